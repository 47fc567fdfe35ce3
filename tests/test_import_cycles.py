"""No import cycle inside the package, counting imports inside functions.

An AST walk over ``portfolio/`` records an edge ``a -> b`` for every import
statement in module ``a`` that names module ``b`` of the package, wherever the
statement stands: at the top, inside a function or method, inside a module
``__getattr__`` (a lazy re-export), under ``if TYPE_CHECKING:``.  An import
inside a function still says "this module needs that one"; a cycle made of
such imports is a layering fault even when it happens to load.

The rule, in three parts:

1. ``from .a import b`` names the module ``a.b`` when that is a module of the
   package, else ``a``; ``import portfolio.a.b`` names ``a.b``.  The parent
   packages that Python runs first are not counted as named.
2. A package's ``__init__`` importing its own parts (eagerly, or lazily from a
   module ``__getattr__``) is not an edge: the package is the namespace of its
   parts, and Python always loads a package before any part of it, so such an
   import says nothing about layering.
3. Because rule 2 hides the edge from a package to its parts, a part may
   import its own ancestor package (``from . import __version__``,
   ``from ..compile import X``) only when that package's ``__init__`` imports
   none of its parts at its top level: otherwise loading the package runs the
   part, which runs the half-loaded package again.  A part imports what it
   needs from the sibling that defines it.

Strings given to ``importlib.import_module`` are not seen; the package uses none.
"""

from __future__ import annotations

import ast
from pathlib import Path
from typing import Dict, List, Set, Tuple

import networkx as nx

ROOT = Path(__file__).resolve().parent.parent
PACKAGE = "portfolio"


def _modules(top: Path) -> Dict[str, Tuple[Path, bool]]:
    """dotted name -> (file, is a package's __init__)."""
    out = {}
    for f in sorted(top.rglob("*.py")):
        parts = list(f.relative_to(top.parent).with_suffix("").parts)
        is_pkg = parts[-1] == "__init__"
        if is_pkg:
            parts = parts[:-1]
        out[".".join(parts)] = (f, is_pkg)
    return out


def _resolve(name: str, mods) -> str:
    """The module a dotted name falls in (``portfolio.a.X`` -> ``portfolio.a``), or ''."""
    while name and name not in mods:
        name = name.rpartition(".")[0]
    return name


def _imports(name: str, path: Path, is_pkg: bool, mods) -> List[Tuple[str, int, bool]]:
    """(module named, line, at the top level) for every package import in a file."""
    package = name if is_pkg else name.rpartition(".")[0]
    tree = ast.parse(path.read_text(encoding="utf-8"), str(path))
    top_level = {id(n) for n in tree.body}
    found = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[:len(base) - node.level + 1]
                base = ".".join(base + ([node.module] if node.module else []))
            else:
                base = node.module or ""
            targets = [f"{base}.{a.name}" if f"{base}.{a.name}" in mods else base for a in node.names]
        else:
            continue
        for t in targets:
            if t == PACKAGE or t.startswith(PACKAGE + "."):
                target = _resolve(t, mods)
                if target and target != name:
                    found.append((target, node.lineno, id(node) in top_level))
    return found


def _within(part: str, package: str) -> bool:
    return part.startswith(package + ".")


def import_graph(top: Path = ROOT / PACKAGE):
    """(graph of counted edges, list of rule-3 faults) for the package at ``top``."""
    mods = _modules(top)
    g = nx.DiGraph()
    g.add_nodes_from(mods)
    eager_parts: Set[str] = set()     # packages whose __init__ imports a part at its top level
    edges = []
    for name, (path, is_pkg) in mods.items():
        for target, line, top_level in _imports(name, path, is_pkg, mods):
            if is_pkg and _within(target, name):
                if top_level:
                    eager_parts.add(name)
                continue                                  # rule 2
            edges.append((name, target, line))
            if not g.has_edge(name, target):
                g.add_edge(name, target, line=line)
    faults = [f"{mods[a][0].relative_to(top.parent)}:{line}: {a} imports its own package {b}, "
              f"whose __init__ imports its parts at the top level"
              for a, b, line in edges if _within(a, b) and b in eager_parts]      # rule 3
    return g, faults


def _describe(g, cycle: List[str]) -> str:
    steps = []
    for a, b in zip(cycle, cycle[1:] + cycle[:1]):
        steps.append(f"{a} -> {b} (line {g.edges[a, b]['line']})")
    return "\n  ".join(steps)


def test_the_package_has_no_import_cycle():
    g, _ = import_graph()
    cycles = sorted(nx.simple_cycles(g), key=len)
    assert not cycles, (f"{len(cycles)} import cycle(s); the shortest:\n  "
                        + _describe(g, cycles[0]))


def test_no_part_imports_a_package_that_imports_it_back():
    _, faults = import_graph()
    assert not faults, "\n".join(faults)


# --- the walk itself must be able to see what it looks for ----------------------

def _graph_of(tmp_path: Path, package: str):
    """import_graph() of a made-up package written as "== path" lines, each
    followed by that file's text."""
    top = tmp_path / PACKAGE
    for chunk in package.split("== ")[1:]:
        rel, _, text = chunk.partition("\n")
        f = top / rel.strip()
        f.parent.mkdir(parents=True, exist_ok=True)
        f.write_text(text)
    return import_graph(top)


CYCLE_IN_A_FUNCTION = """
== __init__.py
== model.py
def run():
    from .dispatch import go
    return go()
== dispatch.py
from .model import run
"""

LAZY_RE_EXPORTS = """
== __init__.py
__version__ = '1'
def __getattr__(name):
    from . import api
    return getattr(api, name)
== api.py
from .sub import thing
== cli.py
from . import __version__
== sub/__init__.py
from .leaf import thing
== sub/leaf.py
def thing():
    from ..cli import main
"""

PART_IMPORTS_EAGER_PACKAGE = """
== __init__.py
== compile/__init__.py
from .context import Ctx
VARIANTS = ('a',)
== compile/context.py
from ..compile import VARIANTS
class Ctx: pass
"""


def test_an_import_inside_a_function_makes_a_cycle(tmp_path):
    g, _ = _graph_of(tmp_path, CYCLE_IN_A_FUNCTION)
    assert sorted(map(sorted, nx.simple_cycles(g))) == [["portfolio.dispatch", "portfolio.model"]]


def test_lazy_re_exports_of_own_parts_are_not_cycles_but_other_lazy_imports_count(tmp_path):
    g, faults = _graph_of(tmp_path, LAZY_RE_EXPORTS)
    assert not g.has_edge("portfolio", "portfolio.api")          # rule 2, lazy
    assert not g.has_edge("portfolio.sub", "portfolio.sub.leaf")  # rule 2, eager
    assert g.has_edge("portfolio.cli", "portfolio")
    assert g.has_edge("portfolio.sub.leaf", "portfolio.cli")      # inside a function
    assert not faults and not list(nx.simple_cycles(g))


def test_a_part_importing_its_eager_package_is_a_fault(tmp_path):
    _, faults = _graph_of(tmp_path, PART_IMPORTS_EAGER_PACKAGE)
    assert len(faults) == 1 and "portfolio.compile.context imports its own package" in faults[0]
