"""Polish a schedule and break ties toward less spill and curtailment.

Two linear programmes, run after the search on the schedule it returned
(stage 5c, called by :mod:`portfolio.solve.matrix`, which hands in the way
to make a Highs):

1. **Polish** (a MILP only): fix every integer column at the returned
   schedule and solve the LP that is left.  If that earns more, the search's
   schedule was not optimal in its continuous part (a solver's "optimal" is a
   claim: this has been seen from HiGHS alone), and the better one is kept.
2. **Tie-break**: among schedules worth as much as the one in hand (within
   :data:`TIE_TOL` of its value, integers still fixed), take the one that
   spills and curtails the least energy.  Spill and curtailment cost nothing
   in the objective, so without this a solver may spill water downstream, or
   throw away solar, for no reason: a safety matter for the people below a
   reservoir.  The money given up is at most ``TIE_TOL`` of the objective (or
   ``TIE_ABS``, a millionth of a currency unit, when that is larger), plus
   the solver's feasibility tolerance, and is reported (``tie_break`` in
   summary.json).

Each step keeps its result only when the checks of :mod:`portfolio.solve.certify`
pass on the original matrix; otherwise the schedule in hand stays and a note
says why.  Both steps run under the caller's time budget; without time left
they are skipped and a note says so.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, List, Optional, Sequence

import numpy as np

from .certify import TOL, check_vector, objective
from .highs import Abandoned, set_limit

TIE_TOL = 1e-9        # share of the objective the tie-break may give up ...
TIE_ABS = 1e-6        # ... or this much money, whichever is larger
GAIN_TOL = 1e-8       # a polish gain or loss below this share of the objective is noise
TIDY_MIN = 1e-9       # MWh of spill and curtailment below which no tie-break runs


@dataclass
class Polished:
    x: np.ndarray
    objective: float
    gained: float = 0.0                   # money the fixed-integer LP found above the search's schedule
    tidy_before: Optional[float] = None   # MWh spilled + curtailed before the tie-break
    tidy_after: Optional[float] = None
    tidy_cost: float = 0.0                # money the tie-break gave up (>= 0)
    notes: List[str] = field(default_factory=list)


def tidy_total(x: np.ndarray, cols: np.ndarray, dt: float) -> float:
    """MWh spilled and curtailed by ``x`` (the columns are MW)."""
    return float(dt * x[cols].sum()) if cols.size else 0.0


def improve(mx, lp, x: np.ndarray, new_highs: Callable, seconds: Optional[float]):
    """Step 1 for a MILP: (Polished, the Highs holding the fixed-integer LP, or None).

    ``lp`` is the HighsLp of ``mx``; ``new_highs(seconds)`` gives a configured
    Highs; ``seconds`` None means no limit.  For a model without integers,
    ``x`` comes back as it is (an LP's optimum is certified by its duals
    instead)."""
    import highspy

    best = Polished(x=np.asarray(x, dtype=float), objective=objective(mx, x))
    ints = np.nonzero(mx.integer)[0].astype(np.int32)
    if not ints.size:
        return best, None
    if seconds is not None and seconds <= 0:
        best.notes.append("polish (integers fixed, LP re-solved) skipped: no time left within "
                          "the time limit")
        return best, None
    sense = 1.0 if mx.maximize else -1.0
    h = new_highs(seconds)
    h.passModel(lp)
    vals = np.round(best.x[ints])
    h.changeColsBounds(len(ints), ints, vals, vals)
    h.changeColsIntegrality(len(ints), ints, np.full(len(ints), highspy.HighsVarType.kContinuous))
    try:
        h.run()
    except Abandoned:
        best.notes.append("polish: the fixed-integer LP did not stop at its time limit; schedule kept")
        return best, None
    if h.getModelStatus() != highspy.HighsModelStatus.kOptimal:
        best.notes.append("polish: the fixed-integer LP did not solve "
                          f"({h.modelStatusToString(h.getModelStatus())}); schedule kept")
        return best, None
    xp = np.asarray(h.getSolution().col_value, dtype=float)
    xp[ints] = vals
    gain = sense * (objective(mx, xp) - best.objective)
    noise = GAIN_TOL * max(1.0, abs(best.objective))
    # kept unless worse beyond noise: the LP's vertex is also the cleaner
    # vector (a search's schedule may sit up to 1e-6 outside a row)
    if check_vector(mx, xp)[0] <= TOL and gain >= -noise:
        best.x, best.objective = xp, objective(mx, xp)
        if gain > noise:
            best.gained = gain
            best.notes.append(f"polish: with its integer decisions fixed, the search's schedule "
                              f"earns {gain:.6g} more; the better schedule is returned")
    return best, h


def tie_break(mx, lp, best: Polished, h, new_highs: Callable, seconds: Optional[float],
              tidy_cols: Sequence[int], dt: float) -> None:
    """Step 2, in place on ``best``: least spill and curtailment at its value.

    ``h`` holds the model already solved with the integers fixed (or, for an
    LP, the LP itself), or is None: then a new Highs is made for an LP, and a
    MILP (whose fixed-integer LP did not solve) is left as it is."""
    cols = np.asarray(tidy_cols, dtype=np.int32)
    if cols.size:
        best.tidy_before = best.tidy_after = tidy_total(best.x, cols, dt)
    if not cols.size or best.tidy_before <= TIDY_MIN or not mx.maximize:
        return
    if seconds is not None and seconds <= 0:
        best.notes.append("tie-break (less spill and curtailment) skipped: no time left within "
                          "the time limit")
        return
    if h is None:
        if mx.integer.any():
            return
        h = new_highs(seconds)
        h.passModel(lp)
    _tie_break(mx, h, best, cols, dt, seconds)


def _tie_break(mx, h, best: Polished, cols: np.ndarray, dt: float, seconds: Optional[float]) -> None:
    """Least spill + curtailment at (nearly) the value in hand, on ``h`` (solved, integers fixed)."""
    import highspy

    allowed = max(TIE_TOL * abs(best.objective), TIE_ABS)
    nz = np.nonzero(mx.cost)[0].astype(np.int32)
    h.addRow(best.objective - float(mx.offset) - allowed, highspy.kHighsInf,
             len(nz), nz, mx.cost[nz].astype(float))
    n = mx.num_col
    h.changeColsCost(n, np.arange(n, dtype=np.int32), np.zeros(n))
    h.changeColsCost(len(cols), cols, np.full(len(cols), dt))
    h.changeObjectiveOffset(0.0)
    h.changeObjectiveSense(highspy.ObjSense.kMinimize)
    if seconds is not None:
        set_limit(h, seconds)
    try:
        h.run()
    except Abandoned:
        best.notes.append("tie-break: the least-spill LP did not stop at its time limit; schedule kept")
        return
    if h.getModelStatus() != highspy.HighsModelStatus.kOptimal:
        best.notes.append("tie-break: the least-spill LP did not solve "
                          f"({h.modelStatusToString(h.getModelStatus())}); schedule kept")
        return
    xt = np.asarray(h.getSolution().col_value, dtype=float)
    ints = mx.integer
    xt[ints] = np.round(best.x[ints])
    value = objective(mx, xt)
    after = tidy_total(xt, cols, dt)
    cost = best.objective - value
    # HiGHS holds the added row to its feasibility tolerance (1e-7, scaled): allow for it
    if check_vector(mx, xt)[0] > TOL or cost > 2 * allowed + 1e-6 or after > best.tidy_before:
        best.notes.append("tie-break: the least-spill schedule failed the checks; schedule kept")
        return
    if after < best.tidy_before - TIDY_MIN:
        best.notes.append(f"tie-break: {best.tidy_before - after:.6g} MWh less spill and "
                          f"curtailment at a cost of {max(cost, 0.0):.3g} in money")
        best.x, best.objective, best.tidy_after, best.tidy_cost = xt, value, after, max(cost, 0.0)
