"""The matrix path: the compiler's arrays handed to HiGHS in one call.

The compiled :class:`portfolio.compile.Matrix` (CSC matrix, row and column
bounds, costs, integrality) becomes a ``highspy.HighsLp``
(:func:`portfolio.solve.highs.to_highs_lp`) passed to ``Highs.passModel``; the
solution comes back as one NumPy array, sliced per variable family.  The
Pyomo model is not needed (nor made) for this path.

The steps, all under one :class:`~portfolio.solve.options.Deadline`:

1. for a MILP, a first schedule (:mod:`portfolio.solve.warmstart`; standing
   still when the relaxation gives none);
2. a start that the LP relaxation's verified bound already proves within the
   gap ends the solve; otherwise HiGHS searches (:func:`portfolio.solve.runs.run_highs`),
   tried again the next way in :data:`RETRIES` while its claim fails the
   certificate (:mod:`portfolio.solve.certify`), each way noted;
3. the chosen schedule is polished and its spill tie broken
   (:mod:`portfolio.solve.polish`) and certified once more; the reported
   figures are the certificate's.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import Dict, Optional

import numpy as np

from . import certify, highs, polish, runs, warmstart
from .highs import to_highs_lp
from .options import (ERROR, FEASIBLE, LIMIT, NO_SCHEDULE, OPTIMAL, Deadline, Progress,
                      ProgressFailed, Solution, SolveOptions)

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


@dataclass
class _Job:
    """What every step after the warm start shares."""

    built: object
    lp: object
    is_mip: bool
    options: SolveOptions
    deadline: Deadline
    progress: Optional[Progress]
    lp_bound: Optional[float]         # verified (certify.dual_bound), or None
    sol: Solution

    def new_highs(self, seconds: Optional[float]):
        # through the module, so that a test's spy on highs.new_highs sees every run
        return highs.new_highs(self.options, seconds)

    def check(self, claim: certify.Claim) -> certify.Certificate:
        return certify.certify(self.built.matrix, claim, self.options.mip_gap, self.lp_bound)


# of what is left when the relaxation's start gave nothing, for a hint's own solve
HINT_SHARE = 0.6


def solve_matrix(built, options: SolveOptions, progress: Optional[Progress],
                 deadline: Deadline, hint=None) -> Solution:
    t0 = time.perf_counter()
    lp, is_mip = to_highs_lp(built)
    sol = Solution(status=ERROR, handoff_seconds=time.perf_counter() - t0)
    start = None
    if is_mip and options.warm_start and not built.relax:
        start = _first_schedule(built, lp, options, deadline, progress, sol, hint)
    given = start.x if start is not None else None
    job = _Job(built, lp, is_mip, options, deadline, progress,
               start.lp_bound if start is not None else None, sol)
    sol.solve_seconds = sol.start_seconds          # the search, if any, adds its time
    pick = _chosen(job, given)
    if pick.cert is None or pick.x is None:
        if sol.status == LIMIT:
            sol.status = NO_SCHEDULE
        elif sol.status == OPTIMAL:
            sol.status = ERROR
            sol.message = "HiGHS reported optimal but returned no schedule"
        return sol
    _finish(job, pick)
    return sol


def _first_schedule(built, lp, options: SolveOptions, deadline: Deadline,
                    progress: Optional[Progress], sol: Solution, hint=None) -> warmstart.Start:
    """The warm start from the LP relaxation; when it gives nothing, the modes of a
    ``hint`` (a sketch, asked only then) with the rest solved; when neither gives
    anything, a schedule that stands still (if that is allowed), so that a short limit
    still returns one."""
    def new_highs():
        return highs.new_highs(options, deadline.left())

    start = warmstart.find(built, lp, new_highs, warmstart.budget(deadline.left()))
    sol.start_seconds = start.seconds
    sol.start_objective, sol.lp_bound = start.objective, start.lp_bound
    if start.x is None and hint is not None:
        t0 = time.perf_counter()
        left = deadline.left()
        drawn = hint(None if left is None else HINT_SHARE * max(left, 0.0))
        sketched = None
        if drawn.values:
            sketched = warmstart.with_modes(built, lp, new_highs, warmstart.budget(deadline.left()),
                                            drawn.values)
        sol.start_seconds += time.perf_counter() - t0
        if sketched is not None and sketched.x is not None:
            start = warmstart.Start(sketched.x, sketched.objective, start.lp_bound,
                                    sol.start_seconds, fixed=sketched.fixed, note="the sketch's modes")
            sol.start_objective = start.objective
            sol.notes.append("the first schedule came from the portfolio solved on hourly "
                             "steps (a sketch, docs/model.md)")
        else:
            sol.notes.append("no start from an hourly sketch: "
                             + (sketched.note if sketched is not None else drawn.note))
    if start.x is not None:
        if progress is not None:
            try:
                progress(sol.start_seconds, start.objective, start.lp_bound,
                         certify.gap(start.objective, start.lp_bound, built.matrix.maximize))
            except BaseException as exc:   # propagates from solve(), as from the search
                raise ProgressFailed(exc) from exc
        return start
    idle = warmstart.idle(built, lp, new_highs, warmstart.idle_budget(deadline.left()))
    sol.start_seconds += idle.seconds
    if idle.x is None:
        return start
    sol.start_objective = idle.objective
    return warmstart.Start(idle.x, idle.objective, start.lp_bound, sol.start_seconds,
                           note="idle: every mode binary at 0")


def _chosen(job: _Job, given: Optional[np.ndarray]) -> _Pick:
    """The start when its bound already proves it, else the search's schedule
    (or the start, when the search gives none or a worse one)."""
    mx, sol = job.built.matrix, job.sol
    pick = _Pick()
    held = None      # the start, certified: cheap; the polish runs only if it may end the solve
    if given is not None:
        held = job.check(certify.Claim(given, optimal=False, source="the start"))
        if held.feasible and held.status == certify.OPTIMAL:
            first = _judge(job, certify.Claim(given, optimal=True, source="the warm start"))
            if first is not None and first.cert.status == certify.OPTIMAL and first.cert.ok:
                sol.highs_status = "Optimal (warm start within the gap of the LP relaxation's bound)"
                return first
    pick = _search(job, given)
    if held is not None and held.feasible:
        if pick.cert is None:
            pick = _Pick(held, given)
            sol.notes.append("the start's schedule is returned: the search gave none")
        elif _better(mx, held, pick.cert, certify.OBJ_TOL):
            # more time must never give a worse answer than the one in hand
            sol.notes.append("the search returned a schedule worth less than its start; "
                             "the start is returned")
            pick = _Pick(held, given)
    return pick


def _judge(job: _Job, claim: certify.Claim, hot=None) -> Optional[_Pick]:
    """Certify a claim and, for a MILP, polish it (:func:`portfolio.solve.polish.improve`).

    None when the vector breaks the model.  A polished schedule worth more
    than the claimed bound proves the bound wrong: a failure of the claim,
    and the bound is dropped.
    """
    mx = job.built.matrix
    cert = job.check(claim)
    if not cert.feasible:
        return None
    x, gained = np.asarray(claim.x, dtype=float), 0.0
    if job.is_mip and not job.built.relax:
        pol, h = polish.improve(mx, job.lp, x, job.new_highs, job.deadline.left())
        job.sol.notes += pol.notes
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
            cert = job.check(certify.Claim(x, optimal=claim.optimal and not failures,
                                           bound=bound, source=claim.source,
                                           bound_tiny=claim.bound_tiny if bound is not None else None))
            cert.failures = failures + cert.failures
    return _Pick(cert, x, hot, gained)


def _search(job: _Job, given: Optional[np.ndarray]) -> _Pick:
    """HiGHS's search, tried again the next way in RETRIES while its claim
    fails the certificate; the best certified-feasible schedule is kept."""
    mx, sol = job.built.matrix, job.sol
    pick = _Pick()
    searched = 0.0
    tries = [r for r in RETRIES if given is not None or not r[1]]
    for i, (label, keep_start, extra) in enumerate(tries):
        if i and job.deadline.expired():
            sol.notes.append(f"no time left to solve again ({label})")
            break
        # through the module, so that a test may doctor what HiGHS claims
        run = runs.run_highs(job.built, job.lp, job.is_mip, job.options, job.deadline,
                             given if keep_start else None, extra, label, job.progress,
                             sol.start_seconds + searched)
        searched += run.seconds
        sol.solve_seconds = sol.start_seconds + searched
        sol.highs_status = run.highs_status
        nxt = tries[i + 1][0] if i + 1 < len(tries) else None
        if run.claim.x is None:
            if keep_start and run.status != LIMIT:
                sol.notes.append(f"{label} returned no schedule ({run.highs_status}) although "
                                 f"it was given a feasible one; solved again")
                continue
            sol.status = run.status
            if run.error:
                sol.message = f"HiGHS stopped with an error (model status: {run.highs_status})"
            break
        judged = _judge(job, run.claim, run.highs)
        if judged is None:
            viol, where = certify.check_vector(mx, np.asarray(run.claim.x, dtype=float))
            sol.notes.append(f"{label} returned a schedule that breaks the model ({where}, by "
                             f"{viol:.3g}): not reported" + (f"; solved again ({nxt})" if nxt else ""))
            continue
        cert = judged.cert
        if pick.cert is None or cert.ok or _better(mx, cert, pick.cert):
            pick = judged
        if cert.ok:
            break
        sol.notes.append("; ".join(cert.failures) + (
            f": not reported; solved again ({nxt})" if nxt else ": not reported"))
    sol.solve_seconds = sol.start_seconds + searched
    return pick


def _finish(job: _Job, pick: _Pick) -> None:
    """Polish, break the spill tie, certify the final schedule, fill ``job.sol``."""
    built, sol = job.built, job.sol
    t0 = time.perf_counter()
    x, chosen = pick.x, pick.cert
    if not built.relax:
        x, chosen = _tie_broken(job, pick)
    sol.polish_seconds = time.perf_counter() - t0
    sol.values = values_by_family(built, x)
    sol.solved = True
    built.load_solution(x)     # into the Pyomo variables, if and when the model is made
    settle(sol, chosen)


def _tie_broken(job: _Job, pick: _Pick):
    """(schedule, certificate) after the spill tie-break; the pick's own when
    the tie-break's schedule fails the final checks."""
    mx, sol = job.built.matrix, job.sol
    x, chosen = pick.x, pick.cert
    pol = polish.Polished(x=x, objective=certify.objective(mx, x), gained=pick.gained)
    polish.tie_break(mx, job.lp, pol, pick.hot, job.new_highs, job.deadline.left(),
                     tidy_columns(job.built), job.built.step_hours)
    sol.notes += pol.notes
    sol.polish = {"gained": pol.gained}
    sol.tie_break = {"spilled_and_curtailed_mwh_before": pol.tidy_before,
                     "spilled_and_curtailed_mwh_after": pol.tidy_after,
                     "objective_given_up": pol.tidy_cost}
    if pol.x is x:
        return x, chosen
    final = job.check(certify.Claim(pol.x, optimal=chosen.status == certify.OPTIMAL,
                                    bound=chosen.bound, source="the tie-break",
                                    bound_tiny=chosen.bound_tiny))
    if final.feasible and final.ok:
        final.bound_source = chosen.bound_source
        return pol.x, final
    sol.notes.append("tie-break: its schedule failed the final checks; schedule kept")
    return x, chosen


def _better(mx, a: certify.Certificate, b: certify.Certificate, rel: float = 0.0) -> bool:
    """Whether ``a`` is worth more than ``b`` (by more than ``rel`` of its value)."""
    sense = 1.0 if mx.maximize else -1.0
    va, vb = a.objective or 0.0, b.objective or 0.0
    return sense * (va - vb) > rel * max(1.0, abs(vb))


def tidy_columns(built) -> np.ndarray:
    """Columns of spill and curtailment (what the tie-break minimises)."""
    ranges = [built.matrix.var_ranges[n] for n in ("spill", "curtailed") if n in built.matrix.var_ranges]
    return np.concatenate([np.arange(a, b) for a, b in ranges]) if ranges else np.zeros(0, dtype=int)


def values_by_family(built, x: np.ndarray) -> Dict[str, np.ndarray]:
    """The solution array sliced per variable family (``slack`` in relax mode)."""
    return {name: x[start:stop] for name, (start, stop) in built.matrix.var_ranges.items()}


def settle(sol: Solution, cert: certify.Certificate) -> None:
    """The reported figures: the certificate's, never a solver's."""
    sol.objective, sol.best_bound, sol.mip_gap = cert.objective, cert.bound, cert.gap
    sol.status = OPTIMAL if cert.status == certify.OPTIMAL else FEASIBLE
    sol.certificate = cert.to_dict()
