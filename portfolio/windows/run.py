"""Dispatch by windows: bound, windows in order, stitch, check, tabulate.

See docs/windows.md for the method and docs/model.md for its equations.
``dispatch_windows(p, Windows(...), options)`` returns the same
:class:`~portfolio.dispatch.DispatchResult` as a single dispatch (tables on
the whole horizon, the summary of docs/outputs.md) with the per-window
table in ``result.windows`` and the figures of the decomposition in
``summary["windows"]``.  It never prints; ``progress`` is called after each
window.
"""

from __future__ import annotations

import time
from dataclasses import replace
from typing import Callable, List, Optional

import numpy as np
import pandas as pd

from ..compile import build
from ..contract import WINDOW_KEYS, frame
from ..dispatch import DispatchResult, make_result
from ..provenance import collect
from ..model import Portfolio
from ..solve import ERROR, FEASIBLE, INFEASIBLE, OPTIMAL, Solution, SolveOptions
from ..solve.certify import OBJ_TOL, TOL, check_vector, gap, objective
from ..solve.matrix import values_by_family
from .bound import relax
from .cut import window_model
from .spec import END_TARGET, Windows, plan
from .task import WindowOutcome, WindowTask, solve_window

# progress(windows done, windows in all, seconds so far, stitched objective so far)
WindowProgress = Callable[[int, int, float, Optional[float]], None]


def dispatch_windows(p: Portfolio, spec: Optional[Windows] = None,
                     options: Optional[SolveOptions] = None,
                     progress: Optional[WindowProgress] = None,
                     runner: Callable[[WindowTask], WindowOutcome] = solve_window) -> DispatchResult:
    """Schedule ``p`` window by window (raises :class:`~.spec.WindowsError` for a bad ``spec``).

    ``options.time_limit`` applies to each window on its own (the
    whole-horizon LP runs to its end: the bound and the end values need
    it); ``options.mip_gap`` to each window.  ``runner`` solves one
    task (the default in this process; any callable taking the same plain
    data will do).
    """
    source = collect(p)                    # the start time and the inputs as they are now
    result = _dispatch_windows(p, spec, options, progress, runner)
    result.summary["provenance"] = source
    return result


def _dispatch_windows(p, spec, options, progress, runner) -> DispatchResult:
    spec = spec or Windows()
    options = options or SolveOptions()
    T, dt = p.horizon.steps, p.horizon.step_hours
    pieces = plan(spec, T, dt)
    t0 = time.perf_counter()
    full = build(p, variant=options.variant)
    relaxed = relax(full, replace(options, time_limit=None))   # the bound and end values need it whole
    head = {"commit_h": float(spec.commit_h), "overlap_h": spec.overlap, "end": spec.end,
            "count": len(pieces), "lp_bound": relaxed.bound, "lp_seconds": relaxed.seconds}
    if not relaxed.solved:
        infeasible = "nfeasible" in relaxed.status
        return _failed(p, full, options, INFEASIBLE if infeasible else ERROR,
                       f"the whole horizon's LP relaxation gave no bound ({relaxed.status})"
                       + ("; so no schedule exists: dispatch without windows to name the limits "
                          "that give" if infeasible else ""), head, [], t0)

    x = np.zeros(full.matrix.num_col)
    values = values_by_family(full, x)     # views into x: the committed schedule so far
    outcomes: List[WindowOutcome] = []
    for i, (start, commit, length) in enumerate(pieces):
        last = start + length == T
        out = runner(_task(p, full, values, relaxed, spec, options, i + 1, start, commit, length, last))
        if not out.solved and outcomes:
            merged = _merged(p, full, values, relaxed, spec, options, pieces, i, runner)
            if merged is not None:
                outcomes[:] = [o for o in outcomes if o.start < merged.start]
                if outcomes:      # an earlier merged window may reach past this one's start
                    outcomes[-1].commit = min(outcomes[-1].commit, merged.start - outcomes[-1].start)
                out = merged
        outcomes.append(out)
        if not out.solved:
            status = out.status if out.status in (INFEASIBLE, ERROR) else ERROR
            when = p.horizon.index[start].isoformat()
            return _failed(p, full, options, status,
                           f"window {i + 1} of {len(pieces)} (from {when}) gave {out.status}"
                           + (f": {out.message}" if out.message else ""), head, outcomes, t0)
        _place(full, x, out, out.start)
        if progress is not None:
            progress(i + 1, len(pieces), time.perf_counter() - t0,
                     objective(full.matrix, x) if i + 1 == len(pieces) else None)
    return _stitched(p, full, x, options, head, outcomes, t0)


def _task(p, full, values, relaxed, spec, options, number, start, commit, length, last) -> WindowTask:
    end = "horizon" if last else spec.end
    model = window_model(p, full, values, start, length, spec.end, relaxed)
    fallback = None
    if end == END_TARGET:
        fallback = window_model(p, full, values, start, length, "value", relaxed)
    return WindowTask(number, start, commit, model, options, end, fallback)


MAX_BACK = 3      # windows a failed window may be merged back with


def _merged(p, full, values, relaxed, spec, options, pieces, i, runner) -> Optional[WindowOutcome]:
    """Window ``i`` cannot follow what the windows before it left (an end rule out of reach,
    a carried-in run that cannot go on): solve it together with the one before it, then
    the two before, ... (at most :data:`MAX_BACK`), as one window from the earlier start
    state; None when none of these can be scheduled either."""
    T = p.horizon.steps
    start, commit, length = pieces[i]
    for back in range(1, min(MAX_BACK, i) + 1):
        j = i - back
        first = pieces[j][0]
        span = min(T - first, start - first + length)
        last = first + span == T
        task = _task(p, full, values, relaxed, spec, options, j + 1, first, start + commit - first,
                     span, last)
        out = runner(task)
        if out.solved:
            out.message = (f"windows {j + 1} to {i + 1} solved as one: window {i + 1} could not "
                           f"follow the schedule committed before it")
            return out
    return None


def _place(full, x: np.ndarray, out: WindowOutcome, start: int) -> None:
    """The window's committed steps into the full vector, family by family, asset by asset."""
    for name, per_asset in out.committed.items():
        if name not in full.matrix.var_ranges:
            raise RuntimeError(f"window {out.number} has a variable family {name!r} the whole "
                               "horizon does not")
        first = full.matrix.var_ranges[name][0]
        blocks = full.var_blocks[name]
        for asset, vals in per_asset.items():
            at = first + blocks[asset] + start
            x[at:at + len(vals)] = vals


def _table(p: Portfolio, outcomes: List[WindowOutcome]) -> pd.DataFrame:
    index = pd.DatetimeIndex([p.horizon.index[o.start] for o in outcomes], name="time")

    def col(f):
        return np.array([f(o) for o in outcomes], dtype=object)

    nan = float("nan")
    return frame("windows", {
        "window": col(lambda o: o.number), "steps": col(lambda o: o.length),
        "commit_steps": col(lambda o: o.commit), "end": col(lambda o: o.end),
        "status": col(lambda o: o.status),
        "objective": col(lambda o: nan if o.objective is None else o.objective),
        "bound": col(lambda o: nan if o.bound is None else o.bound),
        "gap": col(lambda o: nan if o.gap is None else o.gap),
        "seconds": col(lambda o: o.seconds)}, index)


def _per_window(p: Portfolio, outcomes: List[WindowOutcome]) -> list:
    return [{"window": o.number, "start": p.horizon.index[o.start].isoformat(), "steps": o.length,
             "commit_steps": o.commit, "end": o.end, "status": o.status, "objective": o.objective,
             "bound": o.bound, "gap": o.gap, "seconds": o.seconds, "message": o.message}
            for o in outcomes]


def _summary(p, head: dict, outcomes, t0, **figures) -> dict:
    out = dict(head, stitched_objective=None, gap=None, max_violation=None, worst="",
               seconds=time.perf_counter() - t0, windows=_per_window(p, outcomes))
    out.update(figures)
    assert tuple(out) == WINDOW_KEYS, tuple(out)
    return out


def _failed(p, full, options, status, message, head, outcomes, t0) -> DispatchResult:
    sol = Solution(status=status, message=message)
    result = make_result(p, full, sol, status, options, [], message, [], 0.0)
    result.summary["windows"] = _summary(p, head, outcomes, t0)
    result.windows = _table(p, outcomes) if outcomes else None
    return result


def _stitched(p, full, x, options, head, outcomes, t0) -> DispatchResult:
    """Check the stitched schedule against the WHOLE portfolio's matrix, then tabulate it."""
    mx = full.matrix
    viol, where = check_vector(mx, x)
    obj = objective(mx, x)
    bound = head["lp_bound"]
    if bound is not None and bound < obj - OBJ_TOL * max(1.0, abs(obj)):
        bound = None           # a bound below a checked schedule is no bound: never reported
    g = gap(obj, bound)
    figures = {"stitched_objective": obj, "gap": g, "max_violation": viol, "worst": where}
    notes = [f"dispatched in {len(outcomes)} windows of {head['commit_h']:g} h, each seeing "
             f"{head['overlap_h']:g} h more; the bound is the whole horizon's LP relaxation"]
    if viol > TOL:
        message = (f"the stitched schedule breaks the whole portfolio's model ({where}, by "
                   f"{viol:.3g}); this is a fault of the decomposition, please report it")
        sol = Solution(status=ERROR, message=message)
        result = make_result(p, full, sol, ERROR, options, [], message, notes, 0.0)
    else:
        status = OPTIMAL if g is not None and g <= options.mip_gap + OBJ_TOL else FEASIBLE
        sol = Solution(status=status, objective=obj, best_bound=bound, mip_gap=g,
                       values=values_by_family(full, x), solved=True, lp_bound=bound,
                       solve_seconds=sum(o.seconds for o in outcomes) + head["lp_seconds"],
                       highs_status="windows",
                       certificate={"feasible": True, "max_violation": viol,
                                    "bound_source": "LP relaxation" if bound is not None else "",
                                    "failures": []})
        full.load_solution(x)
        result = make_result(p, full, sol, status, options, [], "", notes, 0.0)
    result.summary["windows"] = _summary(p, head, outcomes, t0, **figures)
    result.windows = _table(p, outcomes)
    return result
