"""Dispatch by windows: bound, windows in order, stitch, check, tabulate.

See docs/windows.md for the method and docs/model.md for its equations.
``dispatch_windows(p, Windows(...), options)`` returns the same
:class:`~portfolio.dispatch.DispatchResult` as a single dispatch (tables on
the whole horizon, the summary of docs/outputs.md) with the per-window
table in ``result.windows`` and the figures of the decomposition in
``summary["windows"]``.  It never prints; ``progress`` is called after each
window, ``phase`` (if given) before and during the LPs around them.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field, replace
from typing import Callable, List, Optional, Union

import numpy as np
import pandas as pd

from ..children import ignoring_ctrl_c
from ..compile import build
from ..contract import WINDOW_KEYS, frame
from ..dispatch import DispatchResult, make_result
from ..provenance import collect
from ..model import Portfolio
from ..solve import (ERROR, FEASIBLE, INFEASIBLE, NO_SCHEDULE, OPTIMAL, UNBOUNDED, Solution,
                     SolveOptions)
from ..solve.certify import OBJ_TOL, TOL, check_vector, gap, objective
from ..solve.matrix import values_by_family
from ..compile import expressions as E
from .bound import Relaxed, relax
from .cut import window_model
from .spec import (BOUND_SPLIT, END_VALUE, OPEN, SPLIT_NEEDS, Foresight, Windows, WindowsError,
                   bound_method, plan)
from .task import WindowOutcome, WindowTask, solve_window

Spec = Union[Windows, Foresight]

# progress(windows done, windows in all, seconds so far, stitched objective so far)
WindowProgress = Callable[[int, int, float, Optional[float]], None]
# phase(what, LPs done, LPs in all, seconds so far): the LPs before and after the windows,
# what = PHASE_LP (the whole horizon's, one), PHASE_PRICES or PHASE_BOUND (by pieces)
PhaseProgress = Callable[[str, int, int, float], None]
PHASE_LP = "whole-horizon LP"
PHASE_PRICES = "seam prices"
PHASE_BOUND = "bound by pieces"


class _Ticks:
    """``phase`` told after each of ``total`` LPs of one phase (nothing when phase is None)."""

    def __init__(self, phase: Optional[PhaseProgress], what: str, total: int, t0: float):
        self.phase, self.what, self.total, self.t0, self.done = phase, what, total, t0, 0
        self.tell()

    def tell(self) -> None:
        if self.phase is not None:
            self.phase(self.what, self.done, self.total, time.perf_counter() - self.t0)

    def __call__(self) -> None:
        self.done += 1
        self.tell()


def dispatch_windows(p: Portfolio, spec: Optional[Spec] = None,
                     options: Optional[SolveOptions] = None,
                     progress: Optional[WindowProgress] = None,
                     runner: Callable[[WindowTask], WindowOutcome] = solve_window,
                     executor=None, phase: Optional[PhaseProgress] = None) -> DispatchResult:
    """Schedule ``p`` window by window (raises :class:`~.spec.WindowsError` for a bad ``spec``).

    ``spec``: :class:`~.spec.Windows` (perfect foresight; in parallel when
    ``workers`` > 1) or :class:`~.spec.Foresight` (limited foresight, in
    order).  ``options.time_limit`` applies to each window on its own (the
    whole-horizon LP runs to its end: the bound and the end values need
    it); ``options.mip_gap`` to each window.  ``runner`` solves one task
    (the default in this process; any callable taking the same plain data
    will do).  ``executor``: where parallel windows run, anything with
    ``submit(fn, task)`` returning a future with ``result()`` (a
    ``concurrent.futures`` executor, a Dask ``distributed.Client``); None: a
    process pool of ``spec.workers`` processes, started and stopped here.
    ``phase(what, done, total, seconds)``: told before the whole-horizon LP
    and after each LP of the seam prices and of the bound by pieces.
    """
    source = collect(p)                    # the start time and the inputs as they are now
    result = _dispatch_windows(p, spec, options, progress, runner, executor, phase)
    result.summary["provenance"] = source
    return result


def _dispatch_windows(p, spec, options, progress, runner, executor, phase=None) -> DispatchResult:
    spec = spec or Windows()
    options = options or SolveOptions()
    T, dt = p.horizon.steps, p.horizon.step_hours
    pieces = plan(spec, T, dt)
    sighted = isinstance(spec, Foresight)
    t0 = time.perf_counter()
    method = bound_method(spec, p)
    split = method == BOUND_SPLIT
    if split and not sighted and (spec.workers > 1 or executor is not None):
        raise WindowsError(SPLIT_NEEDS, "windows in parallel start from the whole horizon's LP "
                                        "state of charge, which the bound by pieces ('split') never "
                                        "solves: use the bound 'whole' with --workers")
    # split: the whole portfolio only as a layout (no rows) to carry state and tabulate with
    full = build(p, variant=options.variant, layout_only=split)
    if split:
        relaxed = (_guide(p, pieces, options, phase, t0) if not sighted
                   else Relaxed("not needed", None, 0.0))
    else:
        lp = _Ticks(phase, PHASE_LP, 1, t0)
        relaxed = relax(full, replace(options, time_limit=None))   # bound and end values: whole
        lp()
    head = _head(spec, pieces, relaxed, method)
    if not split and not relaxed.solved:
        infeasible = "nfeasible" in relaxed.status
        return _failed(p, full, options, INFEASIBLE if infeasible else ERROR,
                       f"the whole horizon's LP relaxation gave no bound ({relaxed.status})"
                       + ("; so no schedule exists: dispatch without windows to name the limits "
                          "that give" if infeasible else ""), head, [], t0)
    x = np.zeros(full.matrix.num_col)
    run = _Run(p, full, values_by_family(full, x), x, relaxed, spec, options, pieces, runner,
               progress, t0)
    if not sighted and (spec.workers > 1 or executor is not None):
        failure = _parallel(run, executor)
    else:
        failure = _in_order(run)
    if failure is not None:
        return failure
    if split:
        _split_bound(run, head, phase)
    return _stitched(p, full, x, options, head, run.outcomes, t0, run.resolved)


def _guide(p: Portfolio, pieces, options: SolveOptions, phase=None, t_phase: float = 0.0) -> Relaxed:
    """The value of stored energy at every step where a window ends or commits, by passes
    over pieces (:func:`.split.guide_values`): the windows' end values when the whole
    horizon's LP is not solved."""
    from .split import guide_values
    T = p.horizon.steps
    seams = sorted({b for start, commit, length in pieces for b in (start + commit, start + length)
                    if 0 < b < T})
    cuts = _pieces(seams, T)
    t0 = time.perf_counter()
    ticks = _Ticks(phase, PHASE_PRICES, 3 * max(len(cuts) - 1, 0), t_phase or t0)
    sv = guide_values(p, cuts, options=replace(options, time_limit=None), tick=ticks)
    out = Relaxed("seam values by pieces", None, 0.0)
    for k in p.storages:
        val = np.full(T, np.nan)
        got = np.asarray(sv.values.get(k, np.zeros(len(seams))), dtype=float)
        val[np.asarray(seams, dtype=np.int64) - 1] = np.where(np.isfinite(got), got, 0.0)
        out.value[k] = val
    out.seconds = time.perf_counter() - t0
    return out


def _pieces(seams, T: int) -> list:
    edges = [0] + list(seams) + [T]
    return [(a, b) for a, b in zip(edges[:-1], edges[1:]) if b > a]


def _split_bound(run: _Run, head: dict, phase=None) -> None:
    """The bound by pieces of the committed windows (:func:`.split.split_bound`), its seam
    prices from a backward pass whose LPs start from the stitched schedule (its levels, runs,
    water on the way); into ``head``."""
    from .split import seam_values, split_bound
    t0 = time.perf_counter()
    p, T = run.p, run.p.horizon.steps
    cuts = [(o.start, o.start + o.commit) for o in run.outcomes]
    quiet = replace(run.options, time_limit=None)

    def model_of(start, stop, prices):
        valued = Relaxed("seam prices", None, 0.0)
        for k in p.storages:
            valued.value[k] = np.zeros(T)
            if prices is not None:
                valued.value[k][stop - 1] = prices[k]
        return window_model(p, run.full, run.values, start, stop - start, END_VALUE, valued)

    ticks = _Ticks(phase, PHASE_BOUND, 2 * len(cuts) - 1, run.t0)
    sv = seam_values(p, cuts, options=quiet, model_of=model_of, tick=ticks)
    sb = split_bound(p, cuts, sv.values, options=quiet, tick=ticks)
    head["lp_bound"] = sb.bound
    head["lp_seconds"] = float(head["lp_seconds"]) + time.perf_counter() - t0
    if sb.bound is None:
        head["bound_note"] = sb.reason


@dataclass
class _Run:
    """One dispatch by windows in progress: the whole portfolio, its committed vector ``x``
    (``values`` are views into it by family), the LP, the plan and what came out so far."""

    p: Portfolio
    full: object
    values: dict
    x: np.ndarray
    relaxed: object
    spec: object
    options: SolveOptions
    pieces: list
    runner: Callable
    progress: Optional[WindowProgress]
    t0: float
    outcomes: List[WindowOutcome] = field(default_factory=list)
    resolved: int = 0            # windows solved again from the committed schedule (parallel)

    @property
    def sighted(self) -> bool:
        return isinstance(self.spec, Foresight)

    def task(self, number, start, commit, length, guess=False, values=None) -> WindowTask:
        """The task of a window from the committed schedule (``guess``: from the LP's;
        ``values``: from those columns instead)."""
        last = start + length == self.p.horizon.steps
        end = self.spec.end
        if values is None:
            values = _lp_values(self) if guess else self.values
        relaxed = None if self.sighted else self.relaxed   # limited foresight never reads it
        model = window_model(self.p, self.full, values, start, length, end, relaxed)
        fallback, fallback_end = None, END_VALUE
        if not last and end != END_VALUE:
            fallback_end = OPEN if self.sighted else END_VALUE
            fallback = window_model(self.p, self.full, values, start, length, fallback_end,
                                    relaxed)
        return WindowTask(number, start, commit, model, self.options,
                          "horizon" if last else str(end), fallback, fallback_end)

    def keep(self, i: int, out: WindowOutcome):
        """Window ``i``'s outcome into the stitched schedule; a failure result or None."""
        if not out.solved and self.outcomes and not self.sighted:
            merged = _merged(self, i)
            if merged is not None:
                self.outcomes[:] = [o for o in self.outcomes if o.start < merged.start]
                if self.outcomes:      # an earlier merged window may reach past this one's start
                    last = self.outcomes[-1]
                    last.commit = min(last.commit, merged.start - last.start)
                out = merged
        self.outcomes.append(out)
        n = len(self.pieces)
        if not out.solved:
            # the window's own status: no schedule within its limit is exit 5, as one MILP's
            status = out.status if out.status in (INFEASIBLE, UNBOUNDED, NO_SCHEDULE, ERROR) else ERROR
            when = self.p.horizon.index[self.pieces[i][0]].isoformat()
            why = ""
            if self.sighted and status == INFEASIBLE:
                why = ("; with limited foresight the windows before it could not see what this "
                       "one needs (the portfolio's own end, water still to come): a longer "
                       "--foresight or the end rule 'hold' may reach it")
            return _failed(self.p, self.full, self.options, status,
                           f"window {i + 1} of {n} (from {when}) gave {out.status}"
                           + (f": {out.message}" if out.message else "") + why,
                           _head(self.spec, self.pieces, self.relaxed,
                                 bound_method(self.spec, self.p)), self.outcomes, self.t0)
        _place(self.full, self.x, out, out.start)
        if self.progress is not None:
            self.progress(i + 1, n, time.perf_counter() - self.t0,
                          objective(self.full.matrix, self.x) if i + 1 == n else None)
        return None


def _head(spec, pieces, relaxed, method: str) -> dict:
    sighted = isinstance(spec, Foresight)
    return {"commit_h": float(spec.commit_h), "overlap_h": spec.overlap, "end": str(spec.end),
            "foresight_h": float(spec.foresight_h) if sighted else None,
            # windows solved at once: never more than there are windows, whatever was asked
            "workers": 1 if sighted else max(1, min(spec.workers, len(pieces))), "count": len(pieces),
            "bound_method": method, "lp_bound": relaxed.bound, "lp_seconds": relaxed.seconds}


def _lp_values(run: _Run) -> dict:
    return values_by_family(run.full, run.relaxed.x)


def _in_order(run: _Run):
    """Each window from the schedule committed before it."""
    for i, (start, commit, length) in enumerate(run.pieces):
        failure = run.keep(i, run.runner(run.task(i + 1, start, commit, length)))
        if failure is not None:
            return failure
    return None


def _parallel(run: _Run, executor):
    """Windows in rounds, each round all at once (ends pinned to the LP's state).

    Round 1 solves every window from the LP's state at its start.  Then, in order, a
    window is kept when the committed schedule before it leaves exactly the problem it
    was solved from (:func:`_same`); the first that does not is solved again from the
    committed schedule, and every later one whose start, read from the latest schedule
    of the window before it, differs from what it was solved from is solved again from
    that, all in the next round.  Each round keeps at least one more window, so this
    ends; and the schedule is the one :func:`_in_order` finds with the same settings.
    """
    own = executor is None
    pieces, n = run.pieces, len(run.pieces)
    if own:
        executor = _pool(max(1, min(run.spec.workers, n)))   # no process without a window
    futures: dict = {}
    try:
        tasks = [run.task(i + 1, *pieces[i], guess=i > 0) for i in range(n)]
        with ignoring_ctrl_c(own):
            futures[0] = executor.submit(run.runner, tasks[0])
        for i in range(1, n):
            futures[i] = executor.submit(run.runner, tasks[i])
        outs: dict = {}
        exact = {0}          # windows solved from the committed schedule itself
        kept, rounds = 0, 1
        candidate = np.zeros_like(run.x)
        while kept < n:
            for i in sorted(futures):
                o = outs[i] = futures.pop(i).result()
                if rounds > 1:
                    o.message = (f"solved again in round {rounds} from the schedule before it"
                                 + (f" ({o.message})" if o.message else ""))
            while kept < n:                      # keep what follows the committed schedule
                # a window solved from the committed schedule is kept even when it failed:
                # keep() then merges it with the ones before it, or stops
                wanted = None if kept in exact else run.task(kept + 1, *pieces[kept])
                if wanted is not None and not _same(run, tasks[kept], wanted, outs[kept]):
                    break
                failure = run.keep(kept, outs[kept])
                if failure is not None:
                    return failure
                kept = _kept_steps(run, pieces)
            if kept >= n:
                break
            rounds += 1
            candidate[:] = run.x                 # the committed schedule, then the latest guesses
            for j in range(kept, n):
                if outs[j].solved:
                    _place(run.full, candidate, outs[j], outs[j].start)
            guessed = values_by_family(run.full, candidate)
            for j in range(kept, n):
                t = run.task(j + 1, *pieces[j]) if j == kept else \
                    run.task(j + 1, *pieces[j], values=guessed)
                if j == kept or not _same(run, tasks[j], t, outs[j]):
                    if j == kept:
                        exact.add(j)
                    tasks[j] = t
                    run.resolved += 1
                    futures[j] = executor.submit(run.runner, t)
        return None
    except BaseException:
        for f in futures.values():
            f.cancel()
        if own:
            _stop(executor)
        raise
    finally:
        if own:
            executor.shutdown(wait=True, cancel_futures=True)


def _kept_steps(run: _Run, pieces) -> int:
    """How many windows of the plan the committed schedule covers (a merged window may
    cover several)."""
    if not run.outcomes:
        return 0
    last = run.outcomes[-1]
    end = last.start + last.commit
    return sum(1 for start, _, _ in pieces if start < end)


def _same(run: _Run, solved: WindowTask, wanted: WindowTask, out: WindowOutcome) -> bool:
    """Was ``out`` solved from the very problem ``wanted`` poses (the same compiled matrix,
    of the main model, or of the fallback when the window fell back to it)?  Then its
    schedule is the one solving ``wanted`` gives (same matrix, solver and settings)."""
    if not out.solved:
        return False
    fell_back = out.end != solved.end
    a = solved.fallback if fell_back else solved.portfolio
    b = wanted.fallback if fell_back else wanted.portfolio
    if a is None or b is None:
        return False
    return same_matrix(build(a, variant=run.options.variant).matrix,
                       build(b, variant=run.options.variant).matrix)


def same_matrix(a, b, rtol: float = 1e-12) -> bool:
    """Two compiled matrices pose the same problem (equal within ``rtol``, infinities equal)."""
    if a.A.shape != b.A.shape or a.maximize != b.maximize or a.var_ranges != b.var_ranges:
        return False
    if not np.array_equal(a.integer, b.integer):
        return False
    A, B = a.A.tocsc(), b.A.tocsc()
    if not (np.array_equal(A.indptr, B.indptr) and np.array_equal(A.indices, B.indices)):
        return False
    pairs = [(A.data, B.data), (a.row_lower, b.row_lower), (a.row_upper, b.row_upper),
             (a.col_lower, b.col_lower), (a.col_upper, b.col_upper), (a.cost, b.cost),
             (np.array([a.offset]), np.array([b.offset]))]
    return all(np.allclose(x, y, rtol=rtol, atol=rtol, equal_nan=False) or
               np.array_equal(x, y) for x, y in pairs)


def _quiet() -> None:
    """A pool process leaves Ctrl-C to the dispatching process (which stops it)."""
    import signal
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _pool(workers: int):
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor
    return ProcessPoolExecutor(max_workers=workers, initializer=_quiet,
                               mp_context=multiprocessing.get_context("spawn"))


def _stop(pool) -> None:
    """Stop a process pool now: nothing it is still solving is wanted."""
    processes = list((getattr(pool, "_processes", None) or {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    for proc in processes:
        proc.terminate()


MAX_BACK = 3      # windows a failed window may be merged back with


def _merged(run: _Run, i: int) -> Optional[WindowOutcome]:
    """Window ``i`` cannot follow what the windows before it left (an end rule out of reach,
    a carried-in run that cannot go on): solve it together with the one before it, then
    the two before, ... (at most :data:`MAX_BACK`), as one window from the earlier start
    state; None when none of these can be scheduled either."""
    T = run.p.horizon.steps
    pieces = run.pieces
    start, commit, length = pieces[i]
    for back in range(1, min(MAX_BACK, i) + 1):
        j = i - back
        first = pieces[j][0]
        span = min(T - first, start - first + length)
        out = run.runner(run.task(j + 1, first, start + commit - first, span))
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
    out = dict(head, stitched_objective=None, gap=None, ratio_to_bound=None, resolved=0,
               max_violation=None, worst="",
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


def _stitched(p, full, x, options, head, outcomes, t0, resolved=0) -> DispatchResult:
    """Check the stitched schedule against the WHOLE portfolio's matrix (with a bound by pieces:
    each committed piece against its own model, carried-in state read from the stitched
    schedule, :func:`check_pieces`), then tabulate it."""
    mx = full.matrix
    split = head["bound_method"] == BOUND_SPLIT
    bound_note = head.pop("bound_note", "")
    if split:
        viol, where = check_pieces(p, full, x, [(o.start, o.commit) for o in outcomes],
                                   options.variant)
    else:
        viol, where = check_vector(mx, x)
    obj = objective(mx, x)
    bound = head["lp_bound"]
    if bound is not None and bound < obj - OBJ_TOL * max(1.0, abs(obj)):
        bound = None           # a bound below a checked schedule is no bound: never reported
    g = gap(obj, bound)
    ratio = obj / bound if bound is not None and bound > 0 else None
    figures = {"stitched_objective": obj, "gap": g, "ratio_to_bound": ratio, "resolved": resolved,
               "max_violation": viol, "worst": where}
    what = ("the whole horizon's LP relaxation" if not split else
            "the LP relaxations of the committed pieces with their seams priced (a bound by "
            "pieces, docs/windows.md; weaker than the whole horizon's LP)")
    if head["foresight_h"] is not None:
        each = "the one window" if len(outcomes) == 1 else f"each of {len(outcomes)} windows"
        notes = [f"limited foresight: {each} committed "
                 f"{head['commit_h']:g} h seeing {head['foresight_h']:g} h, its end "
                 f"'{head['end']}'; the bound is {what} (perfect foresight), which no window read"]
    else:
        each = "" if len(outcomes) == 1 else "each "
        notes = [f"dispatched in {_windows_count(len(outcomes))} of {head['commit_h']:g} h, {each}"
                 f"seeing {head['overlap_h']:g} h more ({head['workers']} at once); the bound is "
                 f"{what}"]
    if split:
        notes.append("checked piece by piece: each committed piece against its own model, with "
                     "the state carried in from the stitched schedule before it")
    if bound_note:
        notes.append(f"no bound: {bound_note}")
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
                                    "bound_source": ("" if bound is None else "LP relaxation"
                                                     if not split else "LP relaxation by pieces"),
                                    "bound_slack": 0.0, "failures": []})
        full.load_solution(x)
        result = make_result(p, full, sol, status, options, [], "", notes, 0.0)
    result.summary["windows"] = _summary(p, head, outcomes, t0, **figures)
    result.windows = _table(p, outcomes)
    return result


def _windows_count(n: int) -> str:
    """``1 window``, ``4 windows``."""
    return f"{n} window" if n == 1 else f"{n} windows"


def check_pieces(p: Portfolio, full, x: np.ndarray, pieces, variant: str = "tight"):
    """(worst violation, where) of the schedule ``x`` of the whole portfolio (``full`` may be a
    layout) checked piece by piece: each ``(start, steps)`` compiled as a window of its own
    with the state carried in from ``x`` before it (its end free, the last keeping the
    portfolio's own end), and its slice of ``x`` checked against that matrix.  Every row of
    the whole model lies in one piece or crosses a seam as carried-in state, so this is the
    whole check without the whole matrix."""
    values = values_by_family(full, x)
    worst, where = 0.0, ""
    for start, steps in pieces:
        piece = build(window_model(p, full, values, start, steps, OPEN, None), variant=variant)
        v, w = check_vector(piece.matrix, _slice(full, piece, x, start, steps))
        if v > worst:
            worst, where = v, f"piece from step {start}: {w}"
    return worst, where


def _slice(full, piece, x: np.ndarray, start: int, steps: int) -> np.ndarray:
    """A piece's columns read from the whole portfolio's vector (what :func:`_place` writes)."""
    xw = np.zeros(piece.matrix.num_col)
    for name, (first_w, _) in piece.matrix.var_ranges.items():
        if name not in full.matrix.var_ranges:
            raise RuntimeError(f"a piece has a variable family {name!r} the whole horizon does not")
        first = full.matrix.var_ranges[name][0]
        blocks = full.var_blocks[name]
        for asset, at_w in piece.var_blocks[name].items():
            at = first + blocks[asset] + start
            xw[first_w + at_w:first_w + at_w + steps] = x[at:at + steps]
    return xw
