"""A first schedule drawn on a coarser grid (the sketch), for portfolios of short steps.

A quarter-hourly model of a fleet with binary rules (exclusive modes, minimum
output, a minimum run of many steps) can be slow to start: its LP relaxation
alone may take longer than a window's time limit, so the warm start
(:mod:`portfolio.solve.warmstart`) finds nothing and the search begins from
standing still.  The same fleet on hourly steps is four times smaller and its
minimum runs four times shorter in steps; its MILP gives good schedules in
well under a second.  So, for a portfolio whose step divides an hour:

1. :func:`coarsened`: the same portfolio on steps of ``factor`` of its own
   (series averaged, so a power held over the coarse step earns the same;
   water already on its way summed per coarse step; a delay in coarse
   steps; the time a carried-in run or rest has lasted rounded DOWN to whole
   coarse steps, so that the sketch keeps every minimum run and rest at least
   as long as the portfolio asks);
2. :func:`mode_hint`: solve it (the ordinary certified path, under a share of
   the time limit) and repeat each coarse step's mode binaries over the fine
   steps it covers.

The hint is only the mode binaries.  :func:`portfolio.solve.solve` fixes them
in the fine model and solves what is left there (every power, level and
start at the fine steps, against the fine prices), and checks the result
against the fine matrix like any start (:func:`portfolio.solve.warmstart.with_modes`);
the solve asks for it only when the LP relaxation's start gave nothing.  A
hint that leads to no schedule (a ramp limit the piecewise-constant modes
cannot follow, a supply that varies inside the coarse step) is dropped and the
idle start is tried as before.  A hint never changes an optimum or a bound,
only how soon a good schedule is in hand.

The idea is the coarse-to-fine use of a time-aggregated model: Pineda and
Morales, "Chronological time-period clustering for optimal capacity expansion
planning with storage", IEEE Transactions on Power Systems 33 (2018)
7162-7170 (cited from memory), for aggregation of consecutive periods; here only
to find a start.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, replace
from typing import Dict, Hashable, Optional

import numpy as np

from .compile import build
from .compile.families._common import steps_before, whole_steps
from .model import PRIOR_CHARGE, PRIOR_DISCHARGE, Portfolio
from .solve import FEASIBLE, OPTIMAL, solve
from .solve.warmstart import IDLE_FAMILIES as MODE_FAMILIES   # the mode binaries' families

COARSE_HOURS = 1.0       # the sketch's step
MAX_SECONDS = 30.0       # the sketch's own solve at most (its share of a limit: solve/matrix.py)
GAP = 1e-3               # its MIP gap at least this: a start need not be proven


class NotCoarsenable(ValueError):
    """The portfolio cannot be drawn on the coarser grid (the reason is the message)."""


@dataclass
class Hint:
    """Mode binaries per family and asset (fine steps), or None with ``note`` saying why
    there is none."""

    values: Optional[Dict[str, Dict[Hashable, np.ndarray]]]
    seconds: float
    objective: Optional[float] = None        # the coarse model's own
    factor: int = 1
    note: str = ""


def factor_for(p: Portfolio) -> int:
    """Fine steps per coarse step: 1 (no sketch) unless the step is a whole divisor of
    :data:`COARSE_HOURS`, shorter than it, and the horizon holds whole coarse steps."""
    dt = float(p.horizon.step_hours)
    if dt <= 0 or dt >= COARSE_HOURS:
        return 1
    f = int(round(COARSE_HOURS / dt))
    if f < 2 or abs(f * dt - COARSE_HOURS) > 1e-9 or p.horizon.steps % f:
        return 1
    return f


def needs_sketch(p: Portfolio) -> bool:
    """Worth a sketch: steps shorter than the coarse step and a store with mode binaries."""
    return factor_for(p) > 1 and any(s.needs_modes for s in p.storages.values())


def _mean(values: np.ndarray, f: int) -> np.ndarray:
    v = np.asarray(values, dtype=float)
    return v.reshape(-1, f).mean(axis=1)


def coarsened(p: Portfolio, factor: int) -> Portfolio:
    """``p`` on steps ``factor`` times as long (see the module's docstring)."""
    h = p.horizon
    if factor < 2 or h.steps % factor:
        raise NotCoarsenable(f"{h.steps} steps do not make whole groups of {factor}")
    for r in p.routes:
        if int(r.delay_steps) % factor:
            raise NotCoarsenable(f'route "{r.name}": a delay of {r.delay_steps} steps is not '
                                 f"whole groups of {factor}")
    dtc = float(h.step_hours) * factor
    series = {n: replace(s, values=_mean(s.values, factor)) for n, s in p.series.items()}
    storages = {}
    for k, s in p.storages.items():
        kw: dict = {}
        if s.prior_h is not None:
            kw["prior_h"] = math.floor(s.prior_h / dtc + 1e-9) * dtc
        if s.arriving:
            kw["arriving"] = tuple((name, tuple(_sum_groups(mwh, factor))) for name, mwh in s.arriving)
        storages[k] = replace(s, **kw) if kw else s
    routes = tuple(replace(r, delay_steps=int(r.delay_steps) // factor) for r in p.routes)
    return replace(p, horizon=replace(h, steps=h.steps // factor, step_hours=dtc),
                   series=series, storages=storages, routes=routes)


def _sum_groups(mwh, f: int) -> np.ndarray:
    v = np.asarray(mwh, dtype=float)
    pad = (-len(v)) % f
    if pad:
        v = np.concatenate([v, np.zeros(pad)])
    return v.reshape(-1, f).sum(axis=1)


def mode_hint(p: Portfolio, options, seconds: Optional[float]) -> Hint:
    """Solve ``p`` on the coarser grid within ``seconds`` (None: :data:`MAX_SECONDS`) and
    return its mode binaries repeated over the fine steps (``options``: the fine solve's;
    its gap at least :data:`GAP`)."""
    t0 = time.perf_counter()
    seconds = MAX_SECONDS if seconds is None else min(float(seconds), MAX_SECONDS)
    f = factor_for(p)
    if f < 2:
        return Hint(None, 0.0, note="the steps are not a whole divisor of the sketch's")
    if seconds <= 0:
        return Hint(None, 0.0, factor=f, note="no time left for a sketch")
    try:
        coarse = coarsened(p, f)
    except NotCoarsenable as exc:
        return Hint(None, time.perf_counter() - t0, factor=f, note=str(exc))
    cb = build(coarse, variant=options.variant)
    _pin_carried(p, cb, f)
    sol = solve(cb, replace(options, time_limit=max(seconds - (time.perf_counter() - t0), 0.01),
                            mip_gap=max(options.mip_gap, GAP), explain_infeasible=False,
                            interface="matrix"))
    if sol.status not in (OPTIMAL, FEASIBLE):
        return Hint(None, time.perf_counter() - t0, factor=f,
                    note=f"the coarse model gave no schedule ({sol.status})")
    values: Dict[str, Dict[Hashable, np.ndarray]] = {}
    for name in MODE_FAMILIES:
        if cb.var_blocks.get(name) and name in sol.values:
            values[name] = {a: np.round(np.repeat(cb.array(sol.values, name, a), f))
                            for a in cb.var_blocks[name]}
    return Hint(values or None, time.perf_counter() - t0, sol.objective, f,
                note="" if values else "no mode binaries")


def _carried(p: Portfolio, f: int):
    """Per store whose run or rest carried in from before the horizon the FINE model still
    asks to go on: (store, the mode to keep or None for a rest, coarse steps it covers).
    The coarse model keeps such a run too, except where its rule is one coarse step or
    less: it then has no such rows at all (one step is always a whole run), while the fine
    one still asks for the rest of it."""
    dt = float(p.horizon.step_hours)
    for k, s in p.storages.items():
        before = steps_before(s, dt)
        if before is None or s.prior_mode is None:
            continue
        if s.prior_mode in (PRIOR_CHARGE, PRIOR_DISCHARGE):
            keep, left = s.prior_mode, whole_steps(s.min_run_h, dt) - before
        else:
            keep, left = None, whole_steps(s.min_rest_h, dt) - before
        if left > 0:
            yield k, keep, -(-left // f)


def _pin_carried(p: Portfolio, cb, f: int) -> None:
    """Fix the coarse model's mode binaries over the first coarse steps of every carried
    run or rest the fine model still asks for (:func:`_carried`), so that its schedule
    plans around them."""
    mx = cb.matrix
    fams = {PRIOR_CHARGE: "mode_charge", PRIOR_DISCHARGE: "mode_discharge"}
    for k, keep, n in _carried(p, f):
        for mode, name in fams.items():
            block = cb.var_blocks.get(name, {}).get(k)
            if block is None:
                continue
            cols = mx.var_ranges[name][0] + block + np.arange(min(n, cb.steps))
            v = 1.0 if mode == keep else 0.0
            mx.col_lower[cols] = v
            mx.col_upper[cols] = v


def sketcher(p: Portfolio, options):
    """The ``hint`` for :func:`portfolio.solve.solve` of ``p``: a callable that, given
    seconds, draws the sketch (:func:`mode_hint`); None where no sketch applies or a start
    is not wanted (``options.warm_start`` off, the Pyomo path).  The solve calls it only
    when the LP relaxation's start gave nothing."""
    if not (options.warm_start and options.interface == "matrix" and needs_sketch(p)):
        return None
    return lambda seconds: mode_hint(p, options, seconds)
