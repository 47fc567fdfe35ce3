"""One window as a task: plain data in, plain data out (picklable, no shared state).

:func:`solve_window` compiles the window's own portfolio, solves it through
the ordinary certified path (:func:`portfolio.solve.solve`) and returns the
first ``commit`` steps of every variable family, so a process pool or a
cluster can run it as well as this process.  In target mode a window whose
end target cannot be met is solved again with its end valued instead
(``fallback``), and says so; as is a pinned window, and a window of
limited foresight that cannot hold its start state (then its end is free).
A window of steps shorter than an hour with binary rules starts from a
sketch on hourly steps too (:mod:`portfolio.sketch`).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field, replace
from typing import Dict, Hashable, Optional

import numpy as np

from .. import sketch
from ..compile import build
from ..model import Portfolio
from ..solve import FEASIBLE, OPTIMAL, SolveOptions, solve


@dataclass
class WindowTask:
    number: int
    start: int                       # first step, on the whole horizon
    commit: int                      # steps kept
    portfolio: Portfolio             # the window's own model (horizon, series, carried-in state, end)
    options: SolveOptions
    end: str                         # the end rule (spec.END_MODES, "hold", "free", a price) or
    #                                  "horizon" (the last window keeps the portfolio's own)
    fallback: Optional[Portfolio] = None   # the same window with an end that can always be met
    fallback_end: str = "value"


@dataclass
class WindowOutcome:
    number: int
    start: int
    commit: int
    length: int
    end: str
    status: str
    objective: Optional[float] = None    # the window's own (with the value of its end state)
    bound: Optional[float] = None
    gap: Optional[float] = None
    seconds: float = 0.0
    message: str = ""
    committed: Dict[str, Dict[Hashable, np.ndarray]] = field(default_factory=dict, repr=False)

    @property
    def solved(self) -> bool:
        return self.status in (OPTIMAL, FEASIBLE)


def solve_window(task: WindowTask) -> WindowOutcome:
    """Solve one window; never raises for a window that cannot be scheduled (a status)."""
    t0 = time.perf_counter()
    options = replace(task.options, explain_infeasible=False)
    out = _solve(task, task.portfolio, options, task.end)
    if not out.solved and task.fallback is not None:
        again = _solve(task, task.fallback, options, task.fallback_end)
        again.message = (f"its end rule '{task.end}' could not be met ({out.status}); solved again "
                         f"with its end '{task.fallback_end}'")
        out = again
    out.seconds = time.perf_counter() - t0
    return out


def _solve(task: WindowTask, p: Portfolio, options: SolveOptions, end: str) -> WindowOutcome:
    built = build(p, variant=options.variant)
    sol = solve(built, options, hint=sketch.sketcher(p, options))
    out = WindowOutcome(task.number, task.start, task.commit, p.horizon.steps, str(end), sol.status,
                        sol.objective, sol.best_bound, sol.mip_gap, message=sol.message)
    if out.solved:
        for name, blocks in built.var_blocks.items():
            vals = sol.values.get(name)
            if vals is None or not blocks:
                continue
            out.committed[name] = {a: np.array(vals[b:b + task.commit]) for a, b in blocks.items()}
    return out
