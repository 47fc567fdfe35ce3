"""The whole horizon's LP relaxation: a proven bound, and what windows take from it.

Every binary of the compiled portfolio is made continuous in [0, 1] and the
LP is solved once through the matrix path (:func:`portfolio.solve.new_highs`,
:func:`portfolio.solve.to_highs_lp`).  Nothing HiGHS says is believed: the
bound is :func:`portfolio.solve.certify.dual_bound` of the returned row
duals, valid for any multipliers (Neumaier and Shcherbina 2004), so it is an
upper bound on every schedule of the relaxation and hence on the MILP's
optimum (a maximisation).

From the same solve, per storage and step:

* ``soc``: the LP's state of charge (MWh at the end of each step);
* ``value``: the marginal value of one more MWh in store at the END of step
  t, money per MWh, sign such that a positive value means the rest of the
  horizon would pay for more stored energy.  One MWh more at the end of t
  enters the balance row of step t+1 multiplied by the retention
  ``a = (1 - loss_per_h) ** dt``, so the value is ``a * y[t+1]`` with
  ``y`` the dual of that balance row as the change of the optimum per unit
  increase of the row's right-hand side, which is how HiGHS reports the row
  duals of a maximisation (``tests/test_windows.py`` checks the sign and size
  against a finite difference of the LP optimum in the start state).
  Degenerate LPs have a range of such values; HiGHS returns one of them.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Dict, Optional

import numpy as np

from ..solve import SolveOptions, new_highs
from ..solve.certify import dual_bound
from ..solve.highs import Abandoned

BALANCE = "storage_balance"


@dataclass
class Relaxed:
    """What the whole-horizon LP relaxation gave (``bound`` None: no bound followed)."""

    status: str                               # HiGHS's model status, in its words
    bound: Optional[float]
    seconds: float
    soc: Dict[str, np.ndarray] = field(default_factory=dict)
    value: Dict[str, np.ndarray] = field(default_factory=dict)
    start_value: Dict[str, float] = field(default_factory=dict)   # one more MWh at the start: a * y[0]
    x: Optional[np.ndarray] = field(default=None, repr=False)     # the LP's schedule, every column

    @property
    def solved(self) -> bool:
        return self.bound is not None and bool(self.soc)


def relax(built, options: Optional[SolveOptions] = None, seconds: Optional[float] = None) -> Relaxed:
    """Solve the LP relaxation of ``built`` (a compiled :class:`~portfolio.compile.Built`)."""
    t0 = time.perf_counter()
    mx = built.matrix
    status, x, y = solve_relaxation(mx, options, seconds)
    if x is None:
        return Relaxed(status, None, time.perf_counter() - t0)
    bound = dual_bound(mx, y)
    out = Relaxed(status, bound, 0.0, x=x)
    sense = 1.0 if mx.maximize else -1.0      # money per unit of rhs (the models maximise)
    T = built.steps
    p = built.portfolio
    rows = balance_rows(mx, p.storages, T)
    start, _ = mx.var_ranges.get("soc", (0, 0))
    for k, s in p.storages.items():
        b = built.var_blocks["soc"][k]
        out.soc[k] = x[start + b:start + b + T].copy()
        a = (1.0 - s.loss_per_h) ** built.step_hours
        yk = sense * y[rows[k]] if k in rows else np.zeros(T)
        val = np.zeros(T)
        val[:-1] = a * yk[1:]
        out.value[k] = val          # the last step's is zero: the horizon's end has no future
        out.start_value[k] = float(a * yk[0]) if T else 0.0
    out.seconds = time.perf_counter() - t0
    return out


def solve_relaxation(mx, options: Optional[SolveOptions] = None, seconds: Optional[float] = None):
    """The LP relaxation of the matrix ``mx`` (every integer column continuous): (HiGHS's
    status in its words, column values, row duals), the values None unless it is optimal.
    Nothing is believed yet: a bound follows only from :func:`dual_bound` of the duals."""
    import highspy

    from ..solve.highs import make_lp
    options = options or SolveOptions()
    lp = make_lp(mx.A, mx.cost, mx.col_lower, mx.col_upper, mx.row_lower, mx.row_upper,
                 mx.offset, mx.maximize, np.zeros(mx.num_col, dtype=bool))
    h = new_highs(options, seconds)
    h.passModel(lp)
    h.setOptionValue("simplex_dual_edge_weight_strategy", 1)   # as warmstart.find: faster here
    try:
        h.run()
    except Abandoned:
        return "abandoned at its time limit", None, None
    status = h.modelStatusToString(h.getModelStatus())
    if h.getModelStatus() != highspy.HighsModelStatus.kOptimal:
        return status, None, None
    sol = h.getSolution()
    return (status, np.asarray(sol.col_value, dtype=float), np.asarray(sol.row_dual, dtype=float))


def balance_rows(mx, storages, T: int) -> Dict[str, np.ndarray]:
    """Row numbers of each store's balance rows, by step."""
    block = next((b for b in mx.blocks if b.name == BALANCE), None)
    out: Dict[str, np.ndarray] = {}
    if block is None:
        return out
    pos = {key: block.start + i for i, key in enumerate(block.keys)}
    for k in storages:
        out[k] = np.array([pos[(k, t)] for t in range(T)], dtype=np.int64)
    return out
