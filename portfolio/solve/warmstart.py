"""A first schedule before the branch-and-bound search (the warm start).

On these models the LP relaxation is nearly exact: its bound lies within a few
hundredths of a percent of the optimum, and HiGHS spends most of its time
*finding* good schedules, not proving the bound (docs/performance.md).  So,
before the search, for a MILP:

1. solve the LP relaxation (every binary continuous in [0, 1]);
2. fix every binary whose relaxed value is already 0 or 1 and solve the small
   MILP that is left, in which only the fractional binaries are free: the
   "RENS" neighbourhood of the relaxed solution (Berthold, "RENS: the optimal
   rounding", Mathematical Programming Computation 6 (2014) 33-54);
3. check what it finds against the matrix itself (column bounds, every row,
   integrality), and hand it to HiGHS as its first incumbent.

The neighbourhood may hold no schedule at all (the fixed binaries may be
incompatible); then there is no start and the search runs as it would have.
A start does not change the optimum, only how soon good schedules are known
(with a positive gap, the schedule returned may be a different one of the
same proven quality); it costs an LP and a small MILP, and its time counts
against the time limit.

The input is a compiled :class:`~portfolio.compile.Built` (its
:class:`~portfolio.compile.Matrix`); the output is a :class:`Start`: one
value per column of the original matrix, so nothing needs mapping back.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import Callable, Optional

import numpy as np

from .certify import TOL, check_vector, dual_bound, objective
from .highs import Abandoned, set_limit

SHARE = 0.5           # about this share of a time limit at most goes to the start
MAX_SECONDS = 60.0    # and never more than this


@dataclass
class Start:
    """What the warm start found (``x`` is None when it found nothing)."""

    x: Optional[np.ndarray]
    objective: Optional[float]
    lp_bound: Optional[float]        # the LP relaxation's verified bound (None: none followed)
    seconds: float
    fixed: int = 0                   # binaries fixed from the relaxation
    free: int = 0                    # binaries left free in the neighbourhood
    note: str = ""                   # why there is no start, when there is none


def budget(time_limit: Optional[float]) -> float:
    """Seconds the start may take under a time limit (None: no limit)."""
    if time_limit is None:
        return MAX_SECONDS
    return max(0.0, min(MAX_SECONDS, SHARE * float(time_limit)))


IDLE_FLOOR = 1.0      # seconds the idle fallback may take even when the limit is spent


def idle_budget(time_left: Optional[float]) -> float:
    """Seconds the idle fallback may take of what is left of a time limit: at
    least :data:`IDLE_FLOOR` (a schedule in hand is worth a short overrun)."""
    if time_left is None:
        return MAX_SECONDS
    return max(IDLE_FLOOR, min(MAX_SECONDS, SHARE * float(time_left)))


def find(built, lp, new_highs: Callable, seconds: float) -> Start:
    """Search for a first schedule of ``built`` within ``seconds``.

    ``lp`` is the ``HighsLp`` of its matrix and ``new_highs()`` gives a
    configured ``highspy.Highs`` (options, threads, output off); both come
    from :mod:`portfolio.solve.matrix`, which makes every Highs the same way.
    """
    import highspy

    t0 = time.perf_counter()
    mx = built.matrix
    ints = np.nonzero(mx.integer)[0].astype(np.int32)
    if not ints.size:
        return Start(None, None, None, 0.0, note="no binaries")
    if seconds <= 0:
        return Start(None, None, None, 0.0, note="no time left for a warm start")

    def left() -> float:
        return seconds - (time.perf_counter() - t0)

    # 1. the LP relaxation
    h = new_highs()
    h.passModel(lp)
    h.changeColsIntegrality(len(ints), ints,
                            np.full(len(ints), highspy.HighsVarType.kContinuous))
    set_limit(h, left())
    # dual simplex with Devex pricing: as fast as HiGHS's default on small
    # models, 3.5 times faster on the 100-storage benchmark (88 s -> 25 s)
    h.setOptionValue("simplex_dual_edge_weight_strategy", 1)
    try:
        h.run()
    except Abandoned:
        return Start(None, None, None, time.perf_counter() - t0,
                     note="LP relaxation: it did not stop at its time limit and was left")
    if h.getModelStatus() != highspy.HighsModelStatus.kOptimal:
        return Start(None, None, None, time.perf_counter() - t0,
                     note=f"LP relaxation: {h.modelStatusToString(h.getModelStatus())}")
    xr = np.asarray(h.getSolution().col_value, dtype=float)
    # the bound is the one that follows from the relaxation's row duals
    # (certify.dual_bound), not the figure HiGHS reports
    lp_bound = dual_bound(mx, np.asarray(h.getSolution().row_dual, dtype=float))
    del h

    # 2. the RENS neighbourhood: binaries already integral are fixed
    xi = xr[ints]
    integral = np.abs(xi - np.round(xi)) <= TOL
    fix = ints[integral]
    vals = np.round(xr[fix])
    free = int((~integral).sum())
    if left() <= 0:
        return Start(None, None, lp_bound, time.perf_counter() - t0, len(fix), free,
                     note="no time left after the LP relaxation")
    h = new_highs()
    h.passModel(lp)
    if len(fix):
        h.changeColsBounds(len(fix), fix, vals, vals)
    set_limit(h, left())
    try:
        h.run()
    except Abandoned:
        return Start(None, None, lp_bound, time.perf_counter() - t0, len(fix), free,
                     note="the neighbourhood's MILP did not stop at its time limit and was left")
    found = h.getInfo().primal_solution_status == highspy.SolutionStatus.kSolutionStatusFeasible
    x = np.asarray(h.getSolution().col_value, dtype=float) if found else None
    status = h.modelStatusToString(h.getModelStatus())
    del h
    elapsed = time.perf_counter() - t0
    if x is None:
        return Start(None, None, lp_bound, elapsed, len(fix), free,
                     note=f"no schedule in the neighbourhood of the relaxation ({status})")

    # 3. trust nothing: check it against the original matrix
    x = np.where(mx.integer, np.round(x), x)
    if check_vector(mx, x)[0] > TOL:
        return Start(None, None, lp_bound, elapsed, len(fix), free,
                     note="the neighbourhood's schedule does not satisfy the model")
    return Start(x, objective(mx, x), lp_bound, elapsed, len(fix), free)


# Mode binaries (portfolio/compile/families/modes.py): at 0 a store neither
# charges nor discharges ("mode_u" at 0 only forbids charging).
IDLE_FAMILIES = ("mode_u", "mode_charge", "mode_discharge")


def idle(built, lp, new_highs: Callable, seconds: float) -> Start:
    """A schedule with every store's mode binaries at 0: doing nothing, or
    the best that can be done without switching a mode on.

    The fallback when :func:`find` gives nothing, so that a schedule is in
    hand whenever standing still is allowed (it may not be: an end rule, a
    run carried in from before the horizon, a source that may not be
    curtailed).  What is left is an LP, plus the direction binaries of the
    connections (few, and kept integer).  Checked like any start.
    """
    mx = built.matrix
    cols = [np.arange(*mx.var_ranges[n]) for n in IDLE_FAMILIES if n in mx.var_ranges]
    if not cols or seconds <= 0:
        return Start(None, None, None, 0.0, note="no mode binaries" if not cols else "no time left")
    fix = np.concatenate(cols).astype(np.int32)
    return _with_fixed(built, lp, new_highs, seconds, fix, np.zeros(len(fix)), "the idle schedule",
                       "standing still is not a schedule")


def with_modes(built, lp, new_highs: Callable, seconds: float, modes) -> Start:
    """The best schedule with the mode binaries fixed at ``modes`` (family -> asset -> one
    value per step, e.g. :func:`portfolio.sketch.mode_hint`'s); every other column is
    solved for (an LP, plus the binaries the modes do not name).  Checked like any start."""
    mx = built.matrix
    cols, vals = [], []
    for name, per_asset in (modes or {}).items():
        if name not in mx.var_ranges:
            continue
        first = mx.var_ranges[name][0]
        for asset, v in per_asset.items():
            block = built.var_blocks.get(name, {}).get(asset)
            v = np.asarray(v, dtype=float)
            if block is None or len(v) != built.steps:
                return Start(None, None, None, 0.0, note=f"the modes given do not fit {name}[{asset}]")
            cols.append(first + block + np.arange(built.steps))
            vals.append(v)
    if not cols or seconds <= 0:
        return Start(None, None, None, 0.0, note="no modes given" if not cols else "no time left")
    return _with_fixed(built, lp, new_highs, seconds, np.concatenate(cols).astype(np.int32),
                       np.concatenate(vals), "the sketch's modes", "the sketch's modes give no schedule")


def _with_fixed(built, lp, new_highs: Callable, seconds: float, fix: np.ndarray, vals: np.ndarray,
                what: str, none: str) -> Start:
    import highspy

    t0 = time.perf_counter()
    mx = built.matrix
    h = new_highs()
    h.passModel(lp)
    h.changeColsBounds(len(fix), fix, vals, vals)
    set_limit(h, seconds)
    try:
        h.run()
    except Abandoned:
        return Start(None, None, None, time.perf_counter() - t0,
                     note=f"{what}: the solve did not stop at its time limit and was left")
    found = h.getInfo().primal_solution_status == highspy.SolutionStatus.kSolutionStatusFeasible
    x = np.asarray(h.getSolution().col_value, dtype=float) if found else None
    elapsed = time.perf_counter() - t0
    if x is None:
        return Start(None, None, None, elapsed,
                     note=f"{none} ({h.modelStatusToString(h.getModelStatus())})")
    x = np.where(mx.integer, np.round(x), x)
    if check_vector(mx, x)[0] > TOL:
        return Start(None, None, None, elapsed, note=f"{what}: the schedule does not satisfy the model")
    return Start(x, objective(mx, x), None, elapsed, fixed=len(fix))
