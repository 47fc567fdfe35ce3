"""Dispatch a checked portfolio: compile, solve, explain, tabulate.

``dispatch(p)`` returns a :class:`DispatchResult`; it never raises for a
portfolio that cannot be scheduled (that is a status) and never prints.

When the portfolio is infeasible (or HiGHS cannot tell infeasible from
unbounded), it is compiled again in relax mode: every limit and rule gets a
non-negative slack and the total slack is minimised.  The limits whose slack
is non-zero are returned in ``relaxed``, largest first, each with the Span
of the setting that imposed it.  Zero total slack means the portfolio was
feasible after all, so the status is ``unbounded``.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field, replace
from typing import Dict, List, Optional

import numpy as np
import pandas as pd

from . import diagnostics as dg
from . import provenance as prov
from . import sketch
from .compile import Built, build
from .model import Portfolio
from .contract import CAUTION
from .schedule import build_tables, periods, wide
from .solve import (ERROR, FEASIBLE, INFEASIBLE, INFEASIBLE_OR_UNBOUNDED, NO_SCHEDULE, OPTIMAL,
                    UNBOUNDED, Deadline, Progress, SolveOptions, solve)
from .spans import Span

SLACK_TOL = 1e-6

EXIT_CODES = {
    OPTIMAL: dg.EXIT_OK,
    FEASIBLE: dg.EXIT_OK,
    INFEASIBLE: dg.EXIT_INFEASIBLE,
    UNBOUNDED: dg.EXIT_UNBOUNDED,
    NO_SCHEDULE: dg.EXIT_NO_SCHEDULE,
    ERROR: dg.EXIT_SOLVER,
}


def exit_code(status: str) -> int:
    """The CLI exit code for a dispatch status (docs/model.md)."""
    return EXIT_CODES.get(status, dg.EXIT_SOLVER)


@dataclass(frozen=True)
class Relaxation:
    """A limit or rule that had to give for the portfolio to be feasible."""

    span: Span
    description: str
    family: str
    amount: float                  # total slack (MW or MWh, summed over steps)
    steps: int                     # number of steps where it gives
    first: Optional[pd.Timestamp]  # first step start where it gives

    def to_dict(self) -> dict:
        return {"path": self.span.path, "line": self.span.line, "column": self.span.col,
                "end_line": self.span.end_line, "end_column": self.span.end_col,
                "family": self.family, "description": self.description,
                "amount": self.amount, "steps": self.steps,
                "first": self.first.isoformat() if self.first is not None else None}


@dataclass
class DispatchResult:
    status: str
    objective: Optional[float]
    best_bound: Optional[float]
    mip_gap: Optional[float]
    build_seconds: float
    solve_seconds: float
    schedule: Optional[pd.DataFrame]
    tables: Dict[str, pd.DataFrame]
    summary: dict
    relaxed: List[Relaxation] = field(default_factory=list)
    message: str = ""
    handoff_seconds: float = 0.0
    portfolio: Optional[Portfolio] = field(default=None, repr=False)
    built: Optional[Built] = field(default=None, repr=False)
    windows: Optional[pd.DataFrame] = None     # dispatch by windows: the per-window table
    marginal_values: Optional[pd.DataFrame] = None   # when asked for: portfolio.marginal.attach
    periods: Optional[pd.DataFrame] = None     # horizons over a day: daily and monthly totals

    @property
    def has_schedule(self) -> bool:
        return self.schedule is not None

    @property
    def exit_code(self) -> int:
        return exit_code(self.status)

    def write(self, out_dir, formats=("csv",)):
        """Write the output folder atomically (see :func:`portfolio.writers.write`)."""
        from .writers import write
        return write(self, out_dir, formats=formats)


def _model_summary(built: Built, changed: bool) -> dict:
    """What was solved: the portfolio as compiled, or its Pyomo model as the user changed it."""
    mx = built.matrix
    added = sum(b - a for name, (a, b) in mx.var_ranges.items() if name not in built.var_blocks
                and name != "slack")
    return {"source": "pyomo" if changed else "compiled", "columns": mx.num_col,
            "rows": mx.num_row, "added_columns": added}


def _explain(p: Portfolio, options: SolveOptions, index, deadline: Deadline) -> tuple:
    """Relax-mode solve: (list of Relaxation, total slack) or (None, None)."""
    rb = build(p, variant=options.variant, relax=True)
    rs = solve(rb, replace(options, explain_infeasible=False), deadline=deadline)
    if not rs.solved:
        return None, None
    s = np.asarray(rs.values.get("slack", np.zeros(0)), dtype=float)
    acc: Dict[tuple, list] = {}
    for val, (family, oi, _side, key) in zip(s, rb.slack_info):
        if val <= SLACK_TOL or oi < 0:
            continue
        entry = acc.setdefault((family, oi), [0.0, set()])
        entry[0] += float(val)
        t = key[-1] if isinstance(key, tuple) else key
        if isinstance(t, (int, np.integer)):
            entry[1].add(int(t))
    out = []
    for (family, oi), (amount, steps) in acc.items():
        origin = rb.origins[family][oi]
        first = index[min(steps)] if steps else None
        out.append(Relaxation(origin.span, origin.description, family, amount, len(steps), first))
    out.sort(key=lambda r: (-r.amount, r.span, r.family))
    return out, float(s.sum())


def _infeasible_was_false(built: Built, options: SolveOptions, deadline: Deadline, notes: list):
    """Solve again with presolve off after a false "infeasible": (solution, status, message)."""
    again = solve(built, replace(options, presolve=False), deadline=deadline)
    if again.solved:
        notes.append("HiGHS said infeasible, but the portfolio holds with every limit kept (its "
                     "explanation needed no slack): solved again with presolve off")
        notes.extend(again.notes)
        return again, again.status, again.message
    return again, ERROR, ("HiGHS said infeasible, but the portfolio holds with every limit kept "
                          "(its explanation needed no slack): numerical trouble in the solver, and "
                          f"solving again with presolve off gave {again.status}")


def dispatch(p: Portfolio, options: Optional[SolveOptions] = None,
             progress: Optional[Progress] = None) -> DispatchResult:
    """Schedule ``p``; see the module docstring."""
    options = options or SolveOptions()
    source = prov.collect(p)                   # the start time and the inputs as they are now
    deadline = Deadline(options.time_limit)    # every phase below counts against it
    built = build(p, variant=options.variant)
    sol = solve(built, options, progress, deadline=deadline,
                hint=sketch.sketcher(p, options))      # short steps: modes from hourly ones
    status = sol.status
    relaxed: List[Relaxation] = []
    message = sol.message
    notes = list(sol.notes)
    index = p.horizon.index
    wants_explanation = status == INFEASIBLE_OR_UNBOUNDED or (
        status == INFEASIBLE and options.explain_infeasible)
    if wants_explanation and deadline.expired():
        notes.append("no time left within the time limit to explain the infeasibility")
        wants_explanation = False
    if wants_explanation:
        t0 = time.perf_counter()
        found, total = _explain(p, options, index, deadline)
        if found is None:
            status = INFEASIBLE if status == INFEASIBLE else ERROR
            message = message or "the solver could not tell infeasible from unbounded"
        elif not found and status == INFEASIBLE_OR_UNBOUNDED:
            status = UNBOUNDED
        elif not found:
            # HiGHS said infeasible, yet every limit holds with no slack at all: the
            # relaxed solve proves a schedule exists, so that claim was false
            sol, status, message = _infeasible_was_false(built, options, deadline, notes)
        else:
            status = INFEASIBLE
            relaxed = found
        explain_s = time.perf_counter() - t0
    else:
        explain_s = 0.0
    if status == INFEASIBLE_OR_UNBOUNDED:
        status = INFEASIBLE

    return make_result(p, built, sol, status, options, relaxed, message, notes, explain_s,
                       source=source)


def dispatch_model(built: Built, options: Optional[SolveOptions] = None,
                   progress: Optional[Progress] = None) -> DispatchResult:
    """Schedule a compiled portfolio whose Pyomo model the user changed
    (``built`` from :meth:`portfolio.compile.Built.for_model`).

    Solved, certified, polished and tabulated as :func:`dispatch` does, on
    the arrays read back from the changed model.  What differs: an
    infeasible model is not explained (the relaxed limits are the
    portfolio's own; the user's rows have no spans), so ``infeasible`` is
    HiGHS's claim; a model HiGHS cannot tell infeasible from unbounded is
    solved once more with presolve off, and is an ``error`` if it still
    cannot.  See docs/extending.md.
    """
    options = options or SolveOptions()
    source = prov.collect(built.portfolio)
    deadline = Deadline(options.time_limit)
    sol = solve(built, options, progress, deadline=deadline)
    notes = list(sol.notes)
    if sol.status == INFEASIBLE_OR_UNBOUNDED and not deadline.expired():
        again = solve(built, replace(options, presolve=False), deadline=deadline)
        notes.append(f"HiGHS could not tell infeasible from unbounded; solved again with presolve "
                     f"off: {again.status}")
        notes.extend(again.notes)
        sol = again
    status, message = sol.status, sol.message
    if status == INFEASIBLE_OR_UNBOUNDED:
        status = ERROR
        message = message or "HiGHS could not tell whether the changed model is infeasible or unbounded"
    elif status == INFEASIBLE:
        notes.append("infeasible is HiGHS's claim for the changed model: a model changed in Pyomo "
                     "is not re-solved with slacks to name the limits that gave")
    return make_result(built.portfolio, built, sol, status, options, [], message, notes, 0.0,
                       changed=True, source=source)


def make_result(p: Portfolio, built: Built, sol, status: str, options: SolveOptions,
            relaxed: List[Relaxation], message: str, notes: List[str], explain_s: float,
            changed: bool = False, source: Optional[dict] = None) -> DispatchResult:
    """The tables, the summary and the :class:`DispatchResult` of a solve.

    ``source``: the provenance taken when the dispatch started
    (:func:`portfolio.provenance.collect`; taken now when not given)."""
    index = p.horizon.index
    tables: Dict[str, pd.DataFrame] = {}
    schedule = None
    parts: dict = {}
    by_period = None
    if status in (OPTIMAL, FEASIBLE) and sol.solved:
        tables, parts = build_tables(built, sol.values)
        schedule = wide(tables, pd.DatetimeIndex(index, name="time"))
        by_period = periods(tables, parts, built.step_hours)
    parts.pop("_step_money", None)

    summary = {
        "status": status,
        "objective": sol.objective if schedule is not None else None,
        "best_bound": sol.best_bound if schedule is not None else None,
        "mip_gap": sol.mip_gap if schedule is not None else None,
        "build_seconds": built.build_seconds,
        "solve_seconds": sol.solve_seconds,
        "handoff_seconds": sol.handoff_seconds,
        "start_seconds": sol.start_seconds,
        "start_objective": sol.start_objective,
        "lp_bound": sol.lp_bound,
        "explain_seconds": explain_s,
        "polish_seconds": sol.polish_seconds,
        "time_limit": options.time_limit,
        "certificate": sol.certificate,
        "polish": sol.polish,
        "tie_break": sol.tie_break,
        "steps": built.steps,
        "step_hours": built.step_hours,
        "start": p.horizon.start.isoformat(),
        "zone": p.horizon.zone,
        "portfolio": p.name,
        "variant": options.variant,
        "warm_start": options.warm_start and options.interface == "matrix",
        "solver_status": sol.highs_status,
        "caution": CAUTION,
        "currency": p.currency,
        "model": _model_summary(built, changed),
    }
    summary.update(parts)
    summary["relaxed"] = [r.to_dict() for r in relaxed]
    summary["notes"] = notes
    summary["provenance"] = source if source is not None else prov.collect(p)
    summary["network"] = prov.network(p, built.topology)
    if message:
        summary["message"] = message
    return DispatchResult(
        status=status,
        objective=summary["objective"], best_bound=summary["best_bound"],
        mip_gap=summary["mip_gap"],
        build_seconds=built.build_seconds, solve_seconds=sol.solve_seconds,
        schedule=schedule, tables=tables, summary=summary, relaxed=relaxed,
        message=message, handoff_seconds=sol.handoff_seconds, portfolio=p, built=built,
        periods=by_period,
    )
