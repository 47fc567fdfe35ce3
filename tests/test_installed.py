"""The built wheel carries everything the package reads at run time.

Builds a wheel from a clean copy of the sources (so the checkout gets no
build/ folder), unzips it, and imports the package from the unzipped copy in
a fresh interpreter started outside the checkout with ``-S``: no site
processing, so the editable install of the checkout is not on the path; the
dependencies come from the venv's site-packages, named explicitly.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import sysconfig
import zipfile
from pathlib import Path

import lark
import pytest

from portfolio import syntax

ROOT = Path(__file__).resolve().parents[1]
SOURCES = ["pyproject.toml", "README.md", "portfolio", "grammar"]
OFFLINE = ("No matching distribution", "Could not find a version", "Failed to establish a new connection",
           "Network is unreachable", "Temporary failure in name resolution", "ProxyError")


@pytest.fixture(scope="module")
def unzipped(tmp_path_factory):
    work = tmp_path_factory.mktemp("wheel")
    src = work / "src"
    src.mkdir()
    for name in SOURCES:
        p = ROOT / name
        if p.is_dir():
            shutil.copytree(p, src / name, ignore=shutil.ignore_patterns("__pycache__", "*.pyc"))
        elif p.exists():
            shutil.copy2(p, src / name)
    dist = work / "dist"
    proc = subprocess.run([sys.executable, "-m", "pip", "wheel", str(src), "--no-deps", "-q", "-w", str(dist)],
                          capture_output=True, text=True, timeout=300, cwd=work)
    if proc.returncode != 0:
        if any(s in proc.stdout + proc.stderr for s in OFFLINE):
            pytest.skip("pip cannot fetch the build backend (setuptools, wheel) offline")
        pytest.fail(f"pip wheel failed:\n{proc.stdout}\n{proc.stderr}")
    (wheel,) = dist.glob("portfolio-*.whl")
    out = work / "unzipped"
    with zipfile.ZipFile(wheel) as z:
        z.extractall(out)
    return out, wheel


def _names(wheel):
    with zipfile.ZipFile(wheel) as z:
        return set(z.namelist())


def test_wheel_holds_the_data_files(unzipped):
    out, wheel = unzipped
    names = _names(wheel)
    assert "portfolio/grammar/portfolio.lark" in names
    assert "portfolio/units.txt" in names
    assert "portfolio/syntax_tables.json" in names
    assert (out / "portfolio" / "grammar" / "portfolio.lark").read_text("utf-8") == \
        (ROOT / "grammar" / "portfolio.lark").read_text("utf-8")


def test_wheel_holds_every_module(unzipped):
    """A new subpackage must be listed in pyproject.toml's [tool.setuptools] packages."""
    _, wheel = unzipped
    names = _names(wheel)
    modules = {p.relative_to(ROOT).as_posix() for p in (ROOT / "portfolio").rglob("*.py")
               if "__pycache__" not in p.parts}
    missing = sorted(m for m in modules if m not in names)
    assert not missing, f"modules left out of the wheel: {missing}"


def test_wheel_declares_the_command(unzipped):
    out, _ = unzipped
    (info,) = out.glob("portfolio-*.dist-info")
    assert "portfolio = portfolio._entry:run" in (info / "entry_points.txt").read_text("utf-8")


PROBE = """
import json, sys
import portfolio, portfolio.grammar, portfolio.syntax as s, portfolio.units as u
from portfolio import cli
s.parser(); u.registry()
print(json.dumps({"files": [portfolio.__file__, portfolio.grammar.__file__, s.__file__],
                  "tables": s.tables_fit(s.grammar_text()),
                  "lint": cli.main(["lint", "--quiet", "--format", "json", *sys.argv[1:]])}))
"""


@pytest.fixture(scope="module")
def probe(unzipped, tmp_path_factory):
    """One fresh interpreter: import from the unzipped wheel, build the parser, lint two files."""
    out, _ = unzipped
    cwd = tmp_path_factory.mktemp("outside")
    shutil.copytree(ROOT / "examples" / "kestrel_bay", cwd / "kestrel_bay")
    (cwd / "bad.folio").write_text("site x at nowhere {\n", "utf-8")
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(out), sysconfig.get_paths()["purelib"], sysconfig.get_paths()["platlib"]])
    env.pop("PYTHONHOME", None)
    proc = subprocess.run([sys.executable, "-S", "-c", PROBE, "kestrel_bay/kestrel_bay.folio", "bad.folio"],
                          capture_output=True, text=True, timeout=120, cwd=cwd, env=env)
    assert proc.returncode == 0, proc.stderr
    *report, last = proc.stdout.strip().split("\n")
    return out, json.loads("\n".join(report)), json.loads(last)


def test_unzipped_package_is_the_one_imported(probe):
    out, _, info = probe
    assert len(info["files"]) == 3
    for f in info["files"]:
        assert out.resolve() in Path(f).resolve().parents, f"imported {f}, not the unzipped wheel"


def test_unzipped_package_reads_its_parse_tables(probe):
    """portfolio/syntax_tables.json is in the wheel and fits the grammar there: no build at
    start-up (unless this Lark is not the one that made the tables: tests/test_syntax_tables.py)."""
    _, _, info = probe
    assert info["tables"] is (syntax._tables().get("lark_version") == lark.__version__)


def test_unzipped_package_lints(probe):
    _, report, info = probe
    assert info["lint"] == 1
    assert [(f["path"], f["errors"], f["warnings"]) for f in report["files"]] == \
        [("kestrel_bay/kestrel_bay.folio", 0, 0), ("bad.folio", 1, 0)]
    assert [d["code"] for d in report["diagnostics"]] == ["P102"]
