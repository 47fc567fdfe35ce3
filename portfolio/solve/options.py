"""What a solve is asked (:class:`SolveOptions`, a :class:`Deadline`) and what
it answers (:class:`Solution` and one of :data:`STATUSES`): shared by both
solver paths and by :mod:`portfolio.dispatch`.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from typing import Callable, Dict, List, Optional

import numpy as np

OPTIMAL = "optimal"
FEASIBLE = "feasible"
INFEASIBLE = "infeasible"
UNBOUNDED = "unbounded"
NO_SCHEDULE = "no_schedule"
ERROR = "error"
STATUSES = (OPTIMAL, FEASIBLE, INFEASIBLE, UNBOUNDED, NO_SCHEDULE, ERROR)

# Not final: LIMIT becomes NO_SCHEDULE when no schedule is in hand, and
# portfolio.dispatch resolves INFEASIBLE_OR_UNBOUNDED with a relaxed re-solve.
LIMIT = "limit"
INFEASIBLE_OR_UNBOUNDED = "infeasible_or_unbounded"

INTERFACES = ("matrix", "pyomo")
MAX_THREADS = 256     # HiGHS aborts the whole process (C++) on absurd thread counts
VARIANTS = ("tight", "plain")


@dataclass(frozen=True)
class SolveOptions:
    """How to solve.

    time_limit: seconds of solver time (None: no limit).
    mip_gap:    relative MIP gap at which HiGHS stops, |primal - bound| /
                |primal| (HiGHS ``mip_rel_gap``); 1e-4 = 0.01 %.
    threads:    HiGHS threads (None: HiGHS' default).
    variant:    "tight" (start/stop formulation, one binary for plain
                exclusivity) or "plain" (naive two-binary big-M, benchmarks).
    interface:  "matrix" (the compiler's arrays -> passModel) or "pyomo"
                (Pyomo's ``highs`` interface).
    explain_infeasible: re-solve with slacks when infeasible (fills
                ``DispatchResult.relaxed``).
    presolve:   HiGHS's presolve (off only to work around a solver fault: a
                dispatch turns it off by itself when an "infeasible" proves false).
    warm_start: before the search of a MILP, find a first schedule from the
                LP relaxation (:mod:`portfolio.solve.warmstart`) and give it to
                HiGHS (matrix interface only; its time counts against
                ``time_limit``).  Off only for benchmarks and comparisons.
    """

    time_limit: Optional[float] = None
    mip_gap: float = 1e-4
    threads: Optional[int] = None
    variant: str = "tight"
    interface: str = "matrix"
    explain_infeasible: bool = True
    warm_start: bool = True
    presolve: bool = True

    def __post_init__(self):
        if self.time_limit is not None and not (self.time_limit > 0):
            raise ValueError(f"time_limit must be positive seconds, got {self.time_limit!r}")
        if not (0 <= self.mip_gap < 1):
            raise ValueError(f"mip_gap must be a fraction in [0, 1), got {self.mip_gap!r}")
        if self.threads is not None and (not isinstance(self.threads, int)
                                         or not 1 <= self.threads <= MAX_THREADS):
            raise ValueError(f"threads must be a whole number from 1 to {MAX_THREADS}, "
                             f"got {self.threads!r}")
        if self.variant not in VARIANTS:
            raise ValueError(f"variant must be one of {VARIANTS}, got {self.variant!r}")
        if self.interface not in INTERFACES:
            raise ValueError(f"interface must be one of {INTERFACES}, got {self.interface!r}")


@dataclass
class Solution:
    status: str
    objective: Optional[float] = None
    best_bound: Optional[float] = None
    mip_gap: Optional[float] = None
    values: Dict[str, np.ndarray] = field(default_factory=dict)
    handoff_seconds: float = 0.0      # Pyomo model -> solver (incl. compile)
    solve_seconds: float = 0.0        # inside HiGHS (the warm start included)
    start_seconds: float = 0.0        # of which the warm start
    start_objective: Optional[float] = None   # the warm start's schedule, when it found one
    lp_bound: Optional[float] = None  # the LP relaxation's optimum (warm start), a bound
    load_seconds: float = 0.0         # solution -> arrays / Pyomo values
    highs_status: str = ""
    message: str = ""
    solved: bool = False              # a primal solution is in ``values``
    notes: List[str] = field(default_factory=list)   # re-solves, polish, tie-break: what was done and why
    certificate: Optional[dict] = None               # what the checks of portfolio.solve.certify found
    polish: Optional[dict] = None
    tie_break: Optional[dict] = None
    polish_seconds: float = 0.0


Progress = Callable[[float, Optional[float], Optional[float], Optional[float]], None]


class Deadline:
    """The seconds left of one time limit, shared by every phase of a dispatch
    (build, warm start, search, re-solves, polish, explanation)."""

    def __init__(self, seconds: Optional[float], clock: Callable[[], float] = time.perf_counter):
        self.limit = None if seconds is None else float(seconds)
        self.clock = clock
        self.began = clock()

    def left(self) -> Optional[float]:
        """Seconds left (may be negative); None without a limit."""
        return None if self.limit is None else self.limit - (self.clock() - self.began)

    def expired(self) -> bool:
        left = self.left()
        return left is not None and left <= 0


def finite(x) -> Optional[float]:
    """A solver's figure, with its infinities (no bound, no incumbent) as None."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


class Infeasible(Exception):
    """Found infeasible before HiGHS ran (Pyomo's compiler, a row that cannot hold)."""


class ProgressFailed(Exception):
    """The caller's progress callable raised: the solve stops and
    :func:`portfolio.solve.solve` raises the original exception."""

    def __init__(self, original: BaseException):
        super().__init__(str(original))
        self.original = original
