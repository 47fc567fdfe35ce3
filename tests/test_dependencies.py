"""A documented command works after the documented install (`pip install .`):
every third-party module the package imports is a core requirement, except
pyarrow, which `--parquet` checks for and names the install line of."""

from __future__ import annotations

import ast
import re
import sys
from importlib import metadata
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
OPTIONAL = {"pyarrow"}                     # guarded: `--parquet` says how to install it
IMPORT_TO_DIST = {"yaml": "pyyaml",         # import names that differ from the distribution's
                  "distributed": "dask"}    # required as dask[distributed] (its extra pins distributed)


def _imports() -> set:
    names = set()
    for py in (ROOT / "portfolio").rglob("*.py"):
        for node in ast.walk(ast.parse(py.read_text(), str(py))):
            if isinstance(node, ast.Import):
                names.update(a.name.split(".")[0] for a in node.names)
            elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                names.add(node.module.split(".")[0])
    return names - set(sys.stdlib_module_names) - {"portfolio", "__future__"}


def _core_requirements() -> set:
    reqs = metadata.requires("portfolio") or []
    core = [r for r in reqs if "extra ==" not in r]
    return {re.split(r"[<>=!~;\[ ]", r, maxsplit=1)[0].strip().lower() for r in core}


def test_every_imported_package_is_a_core_requirement():
    core = _core_requirements()
    missing = {m for m in _imports() - OPTIONAL if IMPORT_TO_DIST.get(m, m).lower() not in core}
    assert missing == set(), f"imported but not required by `pip install .`: {sorted(missing)}"


def test_pictures_need_nothing_beyond_the_core():
    assert "matplotlib" in _core_requirements()
    assert "pydot" not in _imports()
