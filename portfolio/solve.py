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

Our status set (``STATUSES``) is mapped from ``highspy.HighsModelStatus`` by
the single table ``HIGHS_STATUS``.  Two entries there are not final:
``LIMIT`` (a time, iteration, solution or memory limit or an interrupt)
becomes ``feasible`` when an incumbent exists and ``no_schedule`` when not;
``INFEASIBLE_OR_UNBOUNDED`` is resolved by :mod:`portfolio.dispatch`, which
re-solves with slacks (zero total slack means unbounded).
"""

from __future__ import annotations

import math
import os
import sys
import threading
import time
from dataclasses import dataclass, field
from typing import Callable, Dict, List, Optional, Tuple

import highspy
import numpy as np

from . import warmstart

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

INTERFACES = ("matrix", "pyomo")
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

    def __post_init__(self):
        if self.time_limit is not None and not (self.time_limit > 0):
            raise ValueError(f"time_limit must be positive seconds, got {self.time_limit!r}")
        if not (0 <= self.mip_gap < 1):
            raise ValueError(f"mip_gap must be a fraction in [0, 1), got {self.mip_gap!r}")
        if self.threads is not None and (not isinstance(self.threads, int) or self.threads < 1):
            raise ValueError(f"threads must be a positive integer, got {self.threads!r}")
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


Progress = Callable[[float, Optional[float], Optional[float], Optional[float]], None]

# --- HiGHS prints a banner to the C stdout the first time a Highs object is
# created in a process.  Create that first one with fd 1 pointed at /dev/null.
_banner_lock = threading.Lock()
_banner_done = False


def _quiet_banner() -> None:
    global _banner_done
    with _banner_lock:
        if _banner_done:
            return
        try:
            sys.stdout.flush()
        except Exception:  # pragma: no cover - closed stdout
            pass
        saved = None
        try:
            saved = os.dup(1)
            null = os.open(os.devnull, os.O_WRONLY)
            os.dup2(null, 1)
            os.close(null)
        except OSError:  # pragma: no cover - no fd 1
            saved = None
        try:
            h = highspy.Highs()
            h.setOptionValue("output_flag", False)
            del h
        finally:
            if saved is not None:
                os.dup2(saved, 1)
                os.close(saved)
            _banner_done = True


_threads_lock = threading.Lock()
_threads_in_use: List[Optional[int]] = [None]


def _use_threads(threads: Optional[int]) -> None:
    """HiGHS keeps one global thread pool, sized by the first solve; a
    different ``threads`` later is an error unless the pool is reset."""
    with _threads_lock:
        if threads != _threads_in_use[0]:
            highspy.Highs.resetGlobalScheduler(True)
            _threads_in_use[0] = threads


def new_highs(options: SolveOptions) -> highspy.Highs:
    _quiet_banner()
    _use_threads(options.threads)
    h = highspy.Highs()
    h.setOptionValue("output_flag", False)
    h.setOptionValue("mip_rel_gap", float(options.mip_gap))
    if options.time_limit is not None:
        h.setOptionValue("time_limit", float(options.time_limit))
    if options.threads is not None:
        h.setOptionValue("threads", int(options.threads))
    return h


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


def _solve_matrix(built, options: SolveOptions, progress: Optional[Progress]) -> Solution:
    t0 = time.perf_counter()
    lp, is_mip = to_highs_lp(built)
    handoff = time.perf_counter() - t0

    start = None
    if is_mip and options.warm_start and not built.relax:
        start = warmstart.find(built, lp, lambda: new_highs(options),
                               warmstart.budget(options.time_limit))
        if progress is not None and start.x is not None:
            try:
                progress(start.seconds, start.objective, start.lp_bound,
                         _gap(start.objective, start.lp_bound))
            except BaseException as exc:   # propagates from solve(), as from the search
                raise _ProgressFailed(exc) from exc
    started = start.seconds if start is not None else 0.0
    if start is not None and start.x is not None and \
            _gap(start.objective, start.lp_bound) <= options.mip_gap:
        # the LP bound already proves the start within the gap: no search needed
        built.load_solution(start.x)
        return Solution(status=OPTIMAL, objective=start.objective, best_bound=start.lp_bound,
                        mip_gap=_gap(start.objective, start.lp_bound),
                        values=_values_by_family(built, start.x), handoff_seconds=handoff,
                        solve_seconds=started, highs_status="Optimal (warm start within the gap "
                        "of the LP relaxation's bound)", solved=True, start_seconds=started,
                        start_objective=start.objective, lp_bound=start.lp_bound)

    t0 = time.perf_counter()
    h = new_highs(options)
    if options.time_limit is not None:
        h.setOptionValue("time_limit", max(float(options.time_limit) - started, 0.01))
    h.passModel(lp)
    if start is not None and start.x is not None:
        given = highspy.HighsSolution()
        given.col_value = start.x.tolist()
        given.value_valid = True
        h.setSolution(given)
    handoff += time.perf_counter() - t0

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
                progress(started + now - begun, _finite(d.mip_primal_bound),
                         _finite(d.mip_dual_bound), _finite(d.mip_gap))
            except BaseException as exc:  # stop HiGHS, re-raise after it returns
                failure.append(exc)
                e.interrupt()

        h.cbMipImprovingSolution.subscribe(lambda e: report(e, force=True))
        h.cbMipInterrupt.subscribe(report)

    t1 = time.perf_counter()
    run_status = h.run()
    solve_s = time.perf_counter() - t1
    if failure:
        raise _ProgressFailed(failure[0])

    model_status = h.getModelStatus()
    info = h.getInfo()
    status = HIGHS_STATUS.get(model_status, ERROR)
    has_x = info.primal_solution_status == highspy.SolutionStatus.kSolutionStatusFeasible
    sol = Solution(status=status, handoff_seconds=handoff, solve_seconds=started + solve_s,
                   highs_status=h.modelStatusToString(model_status), start_seconds=started)
    if start is not None:
        sol.start_objective, sol.lp_bound = start.objective, start.lp_bound
    if run_status == highspy.HighsStatus.kError or status == ERROR:
        sol.message = f"HiGHS stopped with an error (model status: {sol.highs_status})"
    if model_status == _S.kModelEmpty:
        has_x = True
    t2 = time.perf_counter()
    if status in (OPTIMAL, LIMIT) and has_x:
        x = np.asarray(h.getSolution().col_value, dtype=float) if lp.num_col_ else np.zeros(0)
        sol.values = _values_by_family(built, x)
        sol.solved = True
        built.load_solution(x)     # into the Pyomo variables, if and when the model is made
        # from the values themselves: what HiGHS reports beside a given start
        # has been seen to disagree with the solution it returns
        sol.objective = warmstart.objective(built.matrix, x) if lp.num_col_ else float(lp.offset_)
        if is_mip:
            sol.best_bound = _finite(info.mip_dual_bound)
            sol.mip_gap = _finite(info.mip_gap)
            if status == LIMIT and start is not None and start.lp_bound is not None and \
                    built.matrix.maximize and \
                    (sol.best_bound is None or start.lp_bound < sol.best_bound):
                # stopped before HiGHS had a bound of its own: the LP relaxation's holds
                sol.best_bound = start.lp_bound
                sol.mip_gap = _gap(sol.objective, sol.best_bound)
        else:
            sol.best_bound = sol.objective if status == OPTIMAL else None
            sol.mip_gap = 0.0 if status == OPTIMAL else None
    sol.load_seconds = time.perf_counter() - t2
    _resolve_limit(sol)
    return sol


def _gap(primal: Optional[float], bound: Optional[float]) -> Optional[float]:
    """HiGHS's relative gap |bound - primal| / |primal| (None when unknown)."""
    if primal is None or bound is None:
        return None
    return abs(bound - primal) / max(abs(primal), 1e-9)


def _resolve_limit(sol: Solution) -> None:
    if sol.status == LIMIT:
        sol.status = FEASIBLE if sol.solved else NO_SCHEDULE
    elif sol.status == OPTIMAL and not sol.solved:
        sol.status = ERROR
        sol.message = "solver reported optimal but returned no solution"


# --- the Pyomo interface path ----------------------------------------------------

def _solve_pyomo(built, options: SolveOptions, progress: Optional[Progress]) -> Solution:
    from pyomo.common.errors import InfeasibleConstraintException
    from pyomo.contrib.solver.solvers.highs import Highs as PyomoHighs

    _quiet_banner()
    _use_threads(options.threads)
    opt = PyomoHighs()
    kw = dict(load_solutions=False, raise_exception_on_nonoptimal_result=False, tee=False,
              rel_gap=float(options.mip_gap))
    if options.time_limit is not None:
        kw["time_limit"] = float(options.time_limit)
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
    t2 = time.perf_counter()
    if status in (OPTIMAL, LIMIT) and res.incumbent_objective is not None:
        res.solution_loader.load_vars()
        sol.values = {}
        sol.solved = True
        names = list(built.var_keys) + (["slack"] if built.relax else [])
        for name in names:
            var = getattr(built.model, name, None)
            if var is None:
                continue
            sol.values[name] = np.fromiter(
                (0.0 if vd.value is None else vd.value for vd in var.values()), dtype=float,
                count=len(var))
        sol.objective = float(res.incumbent_objective)
        sol.best_bound = _finite(res.objective_bound)
        if built.has_binaries:
            info = h.getInfo()
            sol.mip_gap = _finite(info.mip_gap)
        else:
            sol.mip_gap = 0.0 if status == OPTIMAL else None
            if status == OPTIMAL:
                sol.best_bound = sol.objective
    sol.load_seconds = time.perf_counter() - t2
    _resolve_limit(sol)
    return sol


class _Infeasible(Exception):
    """Found infeasible before HiGHS ran (Pyomo's compiler, a row that cannot hold)."""


class _ProgressFailed(Exception):
    def __init__(self, original: BaseException):
        super().__init__(str(original))
        self.original = original


def solve(built, options: Optional[SolveOptions] = None,
          progress: Optional[Progress] = None) -> Solution:
    """Solve a :class:`~portfolio.compile.Built`; never raises for solver trouble.

    Solver failures become ``status="error"`` with ``message`` set; an
    exception raised by ``progress`` stops the solve and propagates.
    """
    options = options or SolveOptions()
    try:
        if options.interface == "pyomo":
            sol = _solve_pyomo(built, options, progress)
        else:
            sol = _solve_matrix(built, options, progress)
    except _ProgressFailed as exc:
        raise exc.original
    except _Infeasible as exc:
        return Solution(status=INFEASIBLE, message=str(exc))
    except (highspy.HighsError, ValueError, RuntimeError, MemoryError) as exc:
        return Solution(status=ERROR, message=f"{type(exc).__name__}: {exc}")
    if progress is not None:
        progress(sol.handoff_seconds + sol.solve_seconds, sol.objective, sol.best_bound, sol.mip_gap)
    return sol
