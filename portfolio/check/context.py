"""What the checker's passes share: the sink, the namespace, the horizon, the series to load."""

from __future__ import annotations

from pathlib import Path
from typing import Dict, List, Optional

from .. import model as M
from ..diagnostics import Sink
from ..series import SeriesSpec
from .names import Names
from .quantities import Quantities
from .tree import Block


class Context:
    def __init__(self, path: str, base_dir: Path, sink: Sink, confine: bool = False):
        self.path = path
        self.base_dir = base_dir
        self.sink = sink
        self.confine = confine      # read no series file outside base_dir
        self.names = Names(sink)
        self.units = Quantities(sink)
        self.presets: Dict[str, Block] = {}
        self.used_presets: set = set()
        self.circles: set = set()   # preset circles already reported
        self.specs: List[SeriesSpec] = []
        self.horizon: Optional[M.Horizon] = None
