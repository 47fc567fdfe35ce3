"""Stage 2: syntax tree -> checked, typed model (:mod:`portfolio.model`).

The Lark tree is first read into nodes with named parts (:mod:`.tree`); then
names are declared (:mod:`.names`), the horizon read (:mod:`.horizon`), and
each declaration checked by its job: quantities and units
(:mod:`.quantities`), series sources (:mod:`.sources`), storages and presets
(:mod:`.storage`, :mod:`.state`), connections, sites, supplies, demands and
routes (:mod:`.network`).  Every finding is a diagnostic with the span of the
text it is about.  Topology checks live in :mod:`portfolio.graph`.
"""

from __future__ import annotations

from pathlib import Path
from typing import Optional

from lark import Tree

from .. import model as M
from ..diagnostics import Sink
from .checker import Checker
from .network import ROUTE_RULES
from .tree import read

__all__ = ["check", "Checker", "ROUTE_RULES"]


def check(tree: Tree, path: str, base_dir: Path, sink: Sink,
          confine: bool = False) -> Optional[M.Portfolio]:
    return Checker(path, base_dir, sink, confine).run(read(tree, path))
