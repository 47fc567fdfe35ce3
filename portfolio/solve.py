"""Solve a compiled portfolio with HiGHS.

Two hand-off paths from the compiled portfolio to HiGHS:

* ``interface="matrix"`` (default, the fast one): the compiler's sparse
  arrays (:class:`portfolio.compile.Matrix`: CSC matrix, row and column
  bounds, costs, integrality) become a ``highspy.HighsLp`` passed to
  ``Highs.passModel`` in one call (:func:`to_highs_lp`).  The solution comes
  back as one NumPy array and is sliced per variable family; the Pyomo model
  is not needed (nor made) for this path.
* ``interface="pyomo"``: Pyomo's newer persistent ``highs`` interface
  (``pyomo.contrib.solver``) on ``Built.model``, kept so that a benchmark
  can compare.

:func:`to_standard_form` (Pyomo's ``LinearStandardFormCompiler`` on
``Built.model``) gives the same LP from the Pyomo side; tests use it to
check that both descriptions of the model agree.

HiGHS output is switched off; the library never prints.  Progress goes to
an optional ``progress(elapsed_s, best_objective, best_bound, gap)``
callable.

What HiGHS returns is a claim (:class:`portfolio.certify.Claim`): no
status, objective, bound or gap is reported before :func:`portfolio.certify.certify`
has checked it against the matrix.  A claim that fails is solved again the
next way in ``RETRIES`` (without the warm start, then with presolve off), and
``Solution.notes`` says so.  The certified schedule is then polished and its
spill tie broken (:mod:`portfolio.polish`) and certified once more.  Every
phase runs under one :class:`Deadline`.

HiGHS's ``HighsModelStatus`` is mapped by the single table ``HIGHS_STATUS``
to what it claims; with a schedule in hand the reported status is the
certificate's (``optimal`` or ``feasible``).  Without one, ``LIMIT`` (a time,
iteration, solution or memory limit or an interrupt) becomes
``no_schedule``; ``INFEASIBLE_OR_UNBOUNDED`` is resolved by
:mod:`portfolio.dispatch`, which re-solves with slacks (zero total slack
means unbounded).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field, replace
from typing import Callable, Dict, List, Optional, Tuple

import highspy
import numpy as np

from . import certify, polish, warmstart
from .highs import Abandoned, _quiet_banner, _use_threads, new_highs  # noqa: F401 (re-exported)

OPTIMAL = "optimal"
FEASIBLE = "feasible"
INFEASIBLE = "infeasible"
UNBOUNDED = "unbounded"
NO_SCHEDULE = "no_schedule"
ERROR = "error"
STATUSES = (OPTIMAL, FEASIBLE, INFEASIBLE, UNBOUNDED, NO_SCHEDULE, ERROR)

# Not final: resolved as described in the module docstring.
LIMIT = "limit"
INFEASIBLE_OR_UNBOUNDED = "infeasible_or_unbounded"

_S = highspy.HighsModelStatus
HIGHS_STATUS: Dict[object, str] = {
    _S.kOptimal: OPTIMAL,
    _S.kModelEmpty: OPTIMAL,           # nothing to decide: the empty schedule is optimal
    _S.kInfeasible: INFEASIBLE,
    _S.kUnbounded: UNBOUNDED,
    _S.kUnboundedOrInfeasible: INFEASIBLE_OR_UNBOUNDED,
    _S.kTimeLimit: LIMIT,
    _S.kIterationLimit: LIMIT,
    _S.kSolutionLimit: LIMIT,
    _S.kObjectiveBound: LIMIT,
    _S.kObjectiveTarget: LIMIT,
    _S.kInterrupt: LIMIT,
    _S.kHighsInterrupt: LIMIT,
    _S.kMemoryLimit: LIMIT,
    _S.kUnknown: LIMIT,                # stopped without proof; an incumbent may exist
    _S.kNotset: ERROR,
    _S.kLoadError: ERROR,
    _S.kModelError: ERROR,
    _S.kPresolveError: ERROR,
    _S.kSolveError: ERROR,
    _S.kPostsolveError: ERROR,
}

# what a failing solve may raise (highspy.HighsError exists from highspy 1.16 on)
_SOLVER_ERRORS = tuple(e for e in (getattr(highspy, "HighsError", None),) if e is not None) + (
    ValueError, RuntimeError, MemoryError)

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
                LP relaxation (:mod:`portfolio.warmstart`) and give it to
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
    certificate: Optional[dict] = None               # what the checks of portfolio.certify found
    polish: Optional[dict] = None
    tie_break: Optional[dict] = None
    polish_seconds: float = 0.0


Progress = Callable[[float, Optional[float], Optional[float], Optional[float]], None]

def _finite(x) -> Optional[float]:
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


# --- the matrix path -----------------------------------------------------------

def _highs_lp(A, cost, col_lower, col_upper, row_lower, row_upper, offset, maximize,
              integer) -> highspy.HighsLp:
    inf = highspy.kHighsInf
    n = A.shape[1]
    lp = highspy.HighsLp()
    lp.num_col_ = n
    lp.num_row_ = A.shape[0]
    lp.col_cost_ = np.asarray(cost, dtype=float)
    lp.col_lower_ = np.where(np.isneginf(col_lower), -inf, col_lower)
    lp.col_upper_ = np.where(np.isposinf(col_upper), inf, col_upper)
    lp.row_lower_ = np.where(np.isneginf(row_lower), -inf, row_lower)
    lp.row_upper_ = np.where(np.isposinf(row_upper), inf, row_upper)
    lp.offset_ = float(offset)
    lp.sense_ = highspy.ObjSense.kMaximize if maximize else highspy.ObjSense.kMinimize
    lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
    lp.a_matrix_.num_col_ = n
    lp.a_matrix_.num_row_ = A.shape[0]
    lp.a_matrix_.start_ = A.indptr.astype(np.int32)
    lp.a_matrix_.index_ = A.indices.astype(np.int32)
    lp.a_matrix_.value_ = A.data.astype(float)
    if integer.any():
        lp.integrality_ = [highspy.HighsVarType.kInteger if i else highspy.HighsVarType.kContinuous
                           for i in integer]
    return lp


def to_highs_lp(built) -> Tuple[highspy.HighsLp, bool]:
    """A compiled portfolio -> (HighsLp, is_mip), straight from its matrix."""
    mx = built.matrix
    lp = _highs_lp(mx.A, mx.cost, mx.col_lower, mx.col_upper, mx.row_lower, mx.row_upper,
                   mx.offset, mx.maximize, mx.integer)
    return lp, bool(mx.integer.any())


def to_standard_form(model):
    """Pyomo model -> (HighsLp, columns, is_mip) via Pyomo's standard-form compiler."""
    from pyomo.repn.plugins.standard_form import LinearStandardFormCompiler

    info = LinearStandardFormCompiler().write(model, mixed_form=True, set_sense=None)
    inf = highspy.kHighsInf
    A = info.A.tocsc()
    rhs = np.asarray(info.rhs, dtype=float)
    ops = np.fromiter((r.bound_type for r in info.rows), dtype=np.int8, count=len(info.rows))
    lower = np.where(ops == 1, -inf, rhs)
    upper = np.where(ops == -1, inf, rhs)
    # A ranged constraint comes out as two rows (<= then >=) with the same
    # coefficients: fold them into one HiGHS row with both bounds.
    if len(ops) > 1:
        cons = [r.constraint for r in info.rows]
        dup = np.zeros(len(ops), dtype=bool)
        for i in np.nonzero((ops[1:] == -1) & (ops[:-1] == 1))[0] + 1:
            if cons[i] is cons[i - 1]:
                dup[i] = True
        if dup.any():
            idx = np.nonzero(dup)[0]
            lower[idx - 1] = rhs[idx]
            keep = ~dup
            A = A[keep, :].tocsc()
            lower, upper = lower[keep], upper[keep]
    columns = info.columns
    n = len(columns)
    col_lower = np.fromiter((-inf if v.lb is None else v.lb for v in columns), dtype=float, count=n)
    col_upper = np.fromiter((inf if v.ub is None else v.ub for v in columns), dtype=float, count=n)
    integer = np.fromiter((v.is_integer() for v in columns), dtype=bool, count=n)
    cost = np.zeros(n)
    if info.c.shape[0]:
        cost = np.asarray(info.c[[0], :].toarray()).ravel()
    offset = float(info.c_offset[0]) if len(info.c_offset) else 0.0
    sense = info.objectives[0].sense if info.objectives else 1
    lp = _highs_lp(A, cost, col_lower, col_upper, lower, upper, offset, int(sense) == -1, integer)
    return lp, columns, bool(integer.any())


def _values_by_family(built, x: np.ndarray) -> Dict[str, np.ndarray]:
    """The solution array sliced per variable family (``slack`` in relax mode)."""
    return {name: x[start:stop] for name, (start, stop) in built.matrix.var_ranges.items()}


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


@dataclass
class _Run:
    """One HiGHS run of the matrix: what it claims, and the object for a hot start."""

    status: str
    claim: certify.Claim
    highs: object
    seconds: float
    highs_status: str
    error: bool = False


def _run_highs(built, lp, is_mip: bool, options: SolveOptions, deadline: Deadline,
               given: Optional[np.ndarray], extra: Dict[str, object], label: str,
               progress: Optional[Progress], offset_s: float) -> _Run:
    h = new_highs(options, deadline.left())
    for k, v in extra.items():
        h.setOptionValue(k, v)
    h.passModel(lp)
    if given is not None:
        start = highspy.HighsSolution()
        start.col_value = given.tolist()
        start.value_valid = True
        h.setSolution(start)
    failure: List[BaseException] = []
    if progress is not None and is_mip:
        last = [-1e9]
        begun = time.perf_counter()

        def report(e, force=False):
            now = time.perf_counter()
            if not force and now - last[0] < 0.5:
                return
            last[0] = now
            d = e.data_out
            try:
                progress(offset_s + now - begun, _finite(d.mip_primal_bound),
                         _finite(d.mip_dual_bound), _finite(d.mip_gap))
            except BaseException as exc:  # stop HiGHS, re-raise after it returns
                failure.append(exc)
                e.interrupt()

        h.cbMipImprovingSolution.subscribe(lambda e: report(e, force=True))
        h.cbMipInterrupt.subscribe(report)
    t1 = time.perf_counter()
    try:
        run_status = h.run()
    except Abandoned as exc:        # past its limit and still busy: nothing of it may be read
        return _Run(status=LIMIT, claim=certify.Claim(x=None, optimal=False, source=label),
                    highs=None, seconds=time.perf_counter() - t1, highs_status=str(exc))
    seconds = time.perf_counter() - t1
    if failure:
        raise _ProgressFailed(failure[0])
    model_status = h.getModelStatus()
    info = h.getInfo()
    status = HIGHS_STATUS.get(model_status, ERROR)
    has_x = info.primal_solution_status == highspy.SolutionStatus.kSolutionStatusFeasible
    if model_status == _S.kModelEmpty:
        has_x = True
    x = None
    if status in (OPTIMAL, LIMIT) and has_x:
        x = np.asarray(h.getSolution().col_value, dtype=float) if lp.num_col_ else np.zeros(0)
    claim = certify.Claim(x=x, optimal=status == OPTIMAL, source=label)
    if x is not None:
        claim.objective = _finite(info.objective_function_value) if lp.num_col_ else None
        if is_mip:
            claim.bound = _finite(info.mip_dual_bound)
        elif status == OPTIMAL:
            # an LP's bound from its own row duals, checked (certify.dual_bound);
            # HiGHS's figure only where no finite bound follows from them
            dual = certify.dual_bound(built.matrix, np.asarray(h.getSolution().row_dual, dtype=float))
            claim.bound = dual if dual is not None else claim.objective
            if dual is not None:
                claim.source = f"{label} (bound from the LP's duals)"
    return _Run(status=status, claim=claim, highs=h, seconds=seconds,
                highs_status=h.modelStatusToString(model_status),
                error=run_status == highspy.HighsStatus.kError or status == ERROR)


# How to try again when a claim fails its certificate: each entry is
# (label, keep the warm start, extra HiGHS options).
RETRIES = (
    ("HiGHS", True, {}),
    ("HiGHS without the warm start", False, {}),
    ("HiGHS without the warm start, presolve off", False, {"presolve": "off"}),
)


@dataclass
class _Pick:
    """The schedule chosen so far: its certificate, values and (for an LP) the
    Highs that solved it, for a hot-started tie-break."""

    cert: Optional[certify.Certificate] = None
    x: Optional[np.ndarray] = None
    hot: object = None
    gained: float = 0.0               # what the polish added to the solver's schedule


def _solve_matrix(built, options: SolveOptions, progress: Optional[Progress],
                  deadline: Deadline) -> Solution:
    t0 = time.perf_counter()
    lp, is_mip = to_highs_lp(built)
    mx = built.matrix
    sol = Solution(status=ERROR, handoff_seconds=time.perf_counter() - t0)

    start = None
    if is_mip and options.warm_start and not built.relax:
        start = warmstart.find(built, lp, lambda: new_highs(options, deadline.left()),
                               warmstart.budget(deadline.left()))
        sol.start_seconds = start.seconds
        sol.start_objective, sol.lp_bound = start.objective, start.lp_bound
        if progress is not None and start.x is not None:
            try:
                progress(start.seconds, start.objective, start.lp_bound,
                         certify.gap(start.objective, start.lp_bound, mx.maximize))
            except BaseException as exc:   # propagates from solve(), as from the search
                raise _ProgressFailed(exc) from exc
    if is_mip and options.warm_start and not built.relax and (start is None or start.x is None):
        # nothing from the relaxation: a schedule that stands still, if that is
        # allowed, so that a short limit still returns a schedule
        idle = warmstart.idle(built, lp, lambda: new_highs(options, deadline.left()),
                              warmstart.idle_budget(deadline.left()))
        sol.start_seconds += idle.seconds
        if idle.x is not None:
            start = warmstart.Start(idle.x, idle.objective,
                                    start.lp_bound if start is not None else None,
                                    sol.start_seconds, note="idle: every mode binary at 0")
            sol.start_objective = idle.objective
    given = start.x if start is not None else None
    lp_bound = start.lp_bound if start is not None else None
    sol.solve_seconds = sol.start_seconds          # the search, if any, adds its time

    pick = _Pick()
    held = None      # the start, certified: cheap; the polish runs only if it may end the solve
    if given is not None:
        held = certify.certify(mx, certify.Claim(given, optimal=False, source="the start"),
                               options.mip_gap, lp_bound)
        if held.feasible and held.status == certify.OPTIMAL:
            # the verified LP bound already proves the start within the gap: no search
            first = _judge(built, lp, is_mip, options, deadline, lp_bound, sol,
                           certify.Claim(given, optimal=True, source="the warm start"))
            if first is not None and first.cert.status == certify.OPTIMAL and first.cert.ok:
                pick = first
                sol.highs_status = "Optimal (warm start within the gap of the LP relaxation's bound)"
    if pick.cert is None:
        pick = _search(built, lp, is_mip, options, deadline, given, lp_bound, progress, sol)
        if held is not None and held.feasible:
            if pick.cert is None:
                pick = _Pick(held, given)
                sol.notes.append("the start's schedule is returned: the search gave none")
            elif _better(mx, held, pick.cert, certify.OBJ_TOL):
                # more time must never give a worse answer than the one in hand
                sol.notes.append("the search returned a schedule worth less than its start; "
                                 "the start is returned")
                pick = _Pick(held, given)
    if pick.cert is None or pick.x is None:
        if sol.status == LIMIT:
            sol.status = NO_SCHEDULE
        elif sol.status == OPTIMAL:
            sol.status = ERROR
            sol.message = "HiGHS reported optimal but returned no schedule"
        return sol
    _finish(built, lp, is_mip, options, deadline, lp_bound, pick, sol)
    return sol


def _judge(built, lp, is_mip: bool, options: SolveOptions, deadline: Deadline,
           lp_bound: Optional[float], sol: Solution, claim: certify.Claim,
           hot=None) -> Optional[_Pick]:
    """Certify a claim and, for a MILP, polish it (:func:`portfolio.polish.improve`).

    None when the vector breaks the model.  A polished schedule worth more
    than the claimed bound proves the bound wrong: a failure of the claim,
    and the bound is dropped.
    """
    mx = built.matrix
    cert = certify.certify(mx, claim, options.mip_gap, lp_bound)
    if not cert.feasible:
        return None
    x, gained = np.asarray(claim.x, dtype=float), 0.0
    if is_mip and not built.relax:
        pol, h = polish.improve(mx, lp, x, lambda s: new_highs(options, s), deadline.left())
        sol.notes += pol.notes
        hot, gained = h, pol.gained
        if pol.x is not x:
            bound = claim.bound
            failures = list(cert.failures)
            tol = certify.OBJ_TOL * max(1.0, abs(pol.objective))
            sense = 1.0 if mx.maximize else -1.0
            if bound is not None and sense * (pol.objective - bound) > tol:
                failures.append(f"{claim.source} reported the bound {bound:.10g}, but fixing its "
                                f"integer decisions gives a schedule worth {pol.objective:.10g}")
                bound = None
            x = pol.x
            cert = certify.certify(mx, certify.Claim(x, optimal=claim.optimal and not failures,
                                                     bound=bound, source=claim.source),
                                   options.mip_gap, lp_bound)
            cert.failures = failures + cert.failures
    return _Pick(cert, x, hot, gained)


def _search(built, lp, is_mip: bool, options: SolveOptions, deadline: Deadline,
            given: Optional[np.ndarray], lp_bound: Optional[float],
            progress: Optional[Progress], sol: Solution) -> _Pick:
    """HiGHS's search, tried again the next way in RETRIES while its claim
    fails the certificate; the best certified-feasible schedule is kept."""
    mx = built.matrix
    pick = _Pick()
    searched = 0.0
    tries = [r for r in RETRIES if given is not None or not r[1]]
    for i, (label, keep_start, extra) in enumerate(tries):
        if i and deadline.expired():
            sol.notes.append(f"no time left to solve again ({label})")
            break
        run = _run_highs(built, lp, is_mip, options, deadline, given if keep_start else None,
                         extra, label, progress, sol.start_seconds + searched)
        searched += run.seconds
        sol.solve_seconds = sol.start_seconds + searched
        sol.highs_status = run.highs_status
        if run.claim.x is None:
            if keep_start and run.status != LIMIT:
                sol.notes.append(f"{label} returned no schedule ({run.highs_status}) although "
                                 f"it was given a feasible one; solved again")
                continue
            sol.status = run.status
            if run.error:
                sol.message = f"HiGHS stopped with an error (model status: {run.highs_status})"
            break
        judged = _judge(built, lp, is_mip, options, deadline, lp_bound, sol, run.claim, run.highs)
        if judged is None:
            nxt = tries[i + 1][0] if i + 1 < len(tries) else None
            viol, where = certify.check_vector(mx, np.asarray(run.claim.x, dtype=float))
            sol.notes.append(f"{label} returned a schedule that breaks the model ({where}, by "
                             f"{viol:.3g}): not reported" + (f"; solved again ({nxt})" if nxt else ""))
            continue
        cert = judged.cert
        if pick.cert is None or cert.ok or _better(mx, cert, pick.cert):
            pick = judged
        if cert.ok:
            break
        nxt = tries[i + 1][0] if i + 1 < len(tries) else None
        sol.notes.append("; ".join(cert.failures) + (
            f": not reported; solved again ({nxt})" if nxt else ": not reported"))
    sol.solve_seconds = sol.start_seconds + searched
    return pick


def _finish(built, lp, is_mip: bool, options: SolveOptions, deadline: Deadline,
            lp_bound: Optional[float], pick: _Pick, sol: Solution) -> None:
    """Polish, break the spill tie, certify the final schedule, fill ``sol``."""
    mx = built.matrix
    t0 = time.perf_counter()
    x, chosen = pick.x, pick.cert
    if not built.relax:
        pol = polish.Polished(x=x, objective=certify.objective(mx, x), gained=pick.gained)
        polish.tie_break(mx, lp, pol, pick.hot, lambda s: new_highs(options, s), deadline.left(),
                         _tidy_columns(built), built.step_hours)
        sol.notes += pol.notes
        sol.polish = {"gained": pol.gained}
        sol.tie_break = {"spilled_and_curtailed_mwh_before": pol.tidy_before,
                         "spilled_and_curtailed_mwh_after": pol.tidy_after,
                         "objective_given_up": pol.tidy_cost}
        if pol.x is not x:
            final = certify.certify(mx, certify.Claim(pol.x, optimal=chosen.status == certify.OPTIMAL,
                                                      bound=chosen.bound, source="the tie-break"),
                                    options.mip_gap, lp_bound)
            if final.feasible and final.ok:
                final.bound_source = chosen.bound_source
                chosen, x = final, pol.x
            else:
                sol.notes.append("tie-break: its schedule failed the final checks; schedule kept")
    sol.polish_seconds = time.perf_counter() - t0
    sol.values = _values_by_family(built, x)
    sol.solved = True
    built.load_solution(x)     # into the Pyomo variables, if and when the model is made
    _settle(sol, chosen)


def _better(mx, a: certify.Certificate, b: certify.Certificate, rel: float = 0.0) -> bool:
    """Whether ``a`` is worth more than ``b`` (by more than ``rel`` of its value)."""
    sense = 1.0 if mx.maximize else -1.0
    va, vb = a.objective or 0.0, b.objective or 0.0
    return sense * (va - vb) > rel * max(1.0, abs(vb))


def _tidy_columns(built) -> np.ndarray:
    """Columns of spill and curtailment (what the tie-break minimises)."""
    ranges = [built.matrix.var_ranges[n] for n in ("spill", "curtailed") if n in built.matrix.var_ranges]
    return np.concatenate([np.arange(a, b) for a, b in ranges]) if ranges else np.zeros(0, dtype=int)


def _settle(sol: Solution, cert: certify.Certificate) -> None:
    """The reported figures: the certificate's, never a solver's."""
    sol.objective, sol.best_bound, sol.mip_gap = cert.objective, cert.bound, cert.gap
    sol.status = OPTIMAL if cert.status == certify.OPTIMAL else FEASIBLE
    sol.certificate = cert.to_dict()


# --- the Pyomo interface path ----------------------------------------------------

def _solve_pyomo(built, options: SolveOptions, progress: Optional[Progress],
                 deadline: Deadline) -> Solution:
    from pyomo.common.errors import InfeasibleConstraintException
    from pyomo.contrib.solver.solvers.highs import Highs as PyomoHighs

    _quiet_banner()
    _use_threads(options.threads)
    opt = PyomoHighs()
    kw = dict(load_solutions=False, raise_exception_on_nonoptimal_result=False, tee=False,
              rel_gap=float(options.mip_gap))
    if deadline.left() is not None:
        kw["time_limit"] = max(float(deadline.left()), 0.01)
    if options.threads is not None:
        kw["threads"] = int(options.threads)
    t0 = time.perf_counter()
    try:
        res = opt.solve(built.model, solver_options={"output_flag": False}, **kw)
    except InfeasibleConstraintException as exc:
        # a row with no variables left that cannot hold (found while compiling)
        raise _Infeasible(str(exc)) from exc
    total = time.perf_counter() - t0
    h = opt._solver_model
    model_status = h.getModelStatus()
    solve_s = float(h.getRunTime())
    status = HIGHS_STATUS.get(model_status, ERROR)
    sol = Solution(status=status, handoff_seconds=max(total - solve_s, 0.0), solve_seconds=solve_s,
                   highs_status=h.modelStatusToString(model_status))
    if not (status in (OPTIMAL, LIMIT) and res.incumbent_objective is not None):
        sol.status = NO_SCHEDULE if status == LIMIT else status
        return sol
    res.solution_loader.load_vars()
    x = np.fromiter((0.0 if v.value is None else v.value for v in built.model_columns),
                    dtype=float, count=built.matrix.num_col)
    bound = _finite(res.objective_bound) if built.has_binaries else None
    claim = certify.Claim(x, optimal=status == OPTIMAL, objective=float(res.incumbent_objective),
                          bound=bound if built.has_binaries else float(res.incumbent_objective),
                          source="Pyomo's HiGHS interface")
    cert = certify.certify(built.matrix, claim, options.mip_gap)
    if not cert.ok:
        again = _solve_matrix(built, replace(options, warm_start=False), progress, deadline)
        again.notes.insert(0, "; ".join(cert.failures) + ": not reported; solved again "
                           "(the matrix path, without the warm start)")
        return again
    sol.values = _values_by_family(built, x)
    sol.solved = True
    built.load_solution(x)
    _settle(sol, cert)
    return sol


class _Infeasible(Exception):
    """Found infeasible before HiGHS ran (Pyomo's compiler, a row that cannot hold)."""


class _ProgressFailed(Exception):
    def __init__(self, original: BaseException):
        super().__init__(str(original))
        self.original = original


def solve(built, options: Optional[SolveOptions] = None,
          progress: Optional[Progress] = None, deadline: Optional[Deadline] = None) -> Solution:
    """Solve a :class:`~portfolio.compile.Built`; never raises for solver trouble.

    Every figure returned is certified (:mod:`portfolio.certify`); a claim
    that fails is solved again another way, with a note.  ``deadline`` is
    the dispatch's shared time limit (default: ``options.time_limit`` from
    now).  Solver failures become ``status="error"`` with ``message`` set; an
    exception raised by ``progress`` stops the solve and propagates.
    """
    options = options or SolveOptions()
    deadline = deadline or Deadline(options.time_limit)
    try:
        if options.interface == "pyomo":
            sol = _solve_pyomo(built, options, progress, deadline)
        else:
            sol = _solve_matrix(built, options, progress, deadline)
    except _ProgressFailed as exc:
        raise exc.original
    except _Infeasible as exc:
        return Solution(status=INFEASIBLE, message=str(exc))
    except _SOLVER_ERRORS as exc:
        return Solution(status=ERROR, message=f"{type(exc).__name__}: {exc}")
    if progress is not None:
        progress(sol.handoff_seconds + sol.solve_seconds, sol.objective, sol.best_bound, sol.mip_gap)
    return sol
