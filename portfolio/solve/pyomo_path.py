"""The Pyomo path: Pyomo's persistent ``highs`` interface (``pyomo.contrib.solver``)
on ``Built.model``, kept so that a benchmark can compare it with the matrix path.

Its answer is certified like any other; a claim that fails is solved again
on the matrix path (without the warm start), with a note.
"""

from __future__ import annotations

import time
from dataclasses import replace
from typing import Optional

import numpy as np

from . import certify
from .highs import HIGHS_STATUS, quiet_banner, use_threads
from .matrix import settle, solve_matrix, values_by_family
from .options import (ERROR, LIMIT, NO_SCHEDULE, OPTIMAL, Deadline, Infeasible, Progress,
                      Solution, SolveOptions, finite)


def solve_pyomo(built, options: SolveOptions, progress: Optional[Progress],
                deadline: Deadline) -> Solution:
    from pyomo.common.errors import InfeasibleConstraintException
    from pyomo.contrib.solver.solvers.highs import Highs as PyomoHighs

    quiet_banner()
    use_threads(options.threads)
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
        raise Infeasible(str(exc)) from exc
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
    x, cert = _certified(built, res, status, options)
    if not cert.ok:
        again = solve_matrix(built, replace(options, warm_start=False), progress, deadline)
        again.notes.insert(0, "; ".join(cert.failures) + ": not reported; solved again "
                           "(the matrix path, without the warm start)")
        return again
    sol.values = values_by_family(built, x)
    sol.solved = True
    built.load_solution(x)
    settle(sol, cert)
    return sol


def _certified(built, res, status: str, options: SolveOptions):
    """(the schedule Pyomo loaded, in matrix column order; its certificate)."""
    res.solution_loader.load_vars()
    x = np.fromiter((0.0 if v.value is None else v.value for v in built.model_columns),
                    dtype=float, count=built.matrix.num_col)
    bound = finite(res.objective_bound) if built.has_binaries else float(res.incumbent_objective)
    claim = certify.Claim(x, optimal=status == OPTIMAL, objective=float(res.incumbent_objective),
                          bound=bound, source="Pyomo's HiGHS interface")
    return x, certify.certify(built.matrix, claim, options.mip_gap)
