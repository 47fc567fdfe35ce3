"""One HiGHS run of the compiled matrix, read back as a claim.

:func:`run_highs` is the search of the matrix path (:mod:`portfolio.solve.matrix`
calls it once per way in its ``RETRIES``): a fresh Highs, the warm start as
its first incumbent, the caller's progress callable on HiGHS's MIP callbacks,
and what it returns as a :class:`portfolio.solve.certify.Claim`, which nothing
reports before it is certified.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import Dict, List, Optional, Tuple

import highspy
import numpy as np

from . import certify, highs
from .highs import HIGHS_STATUS, Abandoned
from .options import ERROR, LIMIT, OPTIMAL, Deadline, Progress, ProgressFailed, SolveOptions, finite

REPORT_EVERY = 0.5    # seconds between progress reports while HiGHS finds nothing better


@dataclass
class Run:
    """One HiGHS run of the matrix: what it claims, and the object for a hot start."""

    status: str
    claim: certify.Claim
    highs: object
    seconds: float
    highs_status: str
    error: bool = False


def run_highs(built, lp, is_mip: bool, options: SolveOptions, deadline: Deadline,
              given: Optional[np.ndarray], extra: Dict[str, object], label: str,
              progress: Optional[Progress], offset_s: float) -> Run:
    """Run HiGHS on ``lp`` with what is left of ``deadline``.

    ``given`` is a first schedule (or None), ``extra`` HiGHS options of this
    way of trying, ``label`` how notes name the run, ``offset_s`` the solve
    time already spent (progress reports count from the solve's start).
    """
    h = _prepared(lp, options, deadline, given, extra)
    failure: List[BaseException] = []
    if progress is not None and is_mip:
        _report_progress(h, progress, offset_s, failure)
    t1 = time.perf_counter()
    try:
        run_status = h.run()
    except Abandoned as exc:        # past its limit and still busy: nothing of it may be read
        return Run(status=LIMIT, claim=certify.Claim(x=None, optimal=False, source=label),
                   highs=None, seconds=time.perf_counter() - t1, highs_status=str(exc))
    seconds = time.perf_counter() - t1
    if failure:
        raise ProgressFailed(failure[0])
    status, claim = _claim(built, lp, h, is_mip, label)
    model_status = h.getModelStatus()
    return Run(status=status, claim=claim, highs=h, seconds=seconds,
               highs_status=h.modelStatusToString(model_status),
               error=run_status == highspy.HighsStatus.kError or status == ERROR)


def _prepared(lp, options: SolveOptions, deadline: Deadline, given: Optional[np.ndarray],
              extra: Dict[str, object]):
    # through the module, so that a test's spy on highs.new_highs sees every run
    h = highs.new_highs(options, deadline.left())
    for k, v in extra.items():
        h.setOptionValue(k, v)
    h.passModel(lp)
    if given is not None:
        start = highspy.HighsSolution()
        start.col_value = given.tolist()
        start.value_valid = True
        h.setSolution(start)
    return h


def _report_progress(h, progress: Progress, offset_s: float, failure: List[BaseException]) -> None:
    """Subscribe ``progress`` to the run's MIP callbacks: at once for a better
    schedule, else at most every :data:`REPORT_EVERY` seconds.  What the
    callable raises goes to ``failure`` and stops HiGHS, since an exception
    cannot cross HiGHS's callback back into this thread."""
    last = [-1e9]
    begun = time.perf_counter()

    def report(e, force=False):
        now = time.perf_counter()
        if not force and now - last[0] < REPORT_EVERY:
            return
        last[0] = now
        d = e.data_out
        try:
            progress(offset_s + now - begun, finite(d.mip_primal_bound),
                     finite(d.mip_dual_bound), finite(d.mip_gap))
        except BaseException as exc:  # stop HiGHS, re-raise after it returns
            failure.append(exc)
            e.interrupt()

    h.cbMipImprovingSolution.subscribe(lambda e: report(e, force=True))
    h.cbMipInterrupt.subscribe(report)


def _claim(built, lp, h, is_mip: bool, label: str) -> Tuple[str, certify.Claim]:
    """(the status HiGHS claims, its schedule and figures) after a run."""
    model_status = h.getModelStatus()
    info = h.getInfo()
    status = HIGHS_STATUS.get(model_status, ERROR)
    has_x = info.primal_solution_status == highspy.SolutionStatus.kSolutionStatusFeasible
    if model_status == highspy.HighsModelStatus.kModelEmpty:
        has_x = True
    x = None
    if status in (OPTIMAL, LIMIT) and has_x:
        x = np.asarray(h.getSolution().col_value, dtype=float) if lp.num_col_ else np.zeros(0)
    claim = certify.Claim(x=x, optimal=status == OPTIMAL, source=label)
    if x is not None:
        claim.objective = finite(info.objective_function_value) if lp.num_col_ else None
        if is_mip:
            claim.bound = finite(info.mip_dual_bound)
        elif status == OPTIMAL:
            # an LP's bound from its own row duals, checked (certify.dual_bound);
            # HiGHS's figure only where no finite bound follows from them
            dual, claim.bound_tiny = certify.dual_bound_tiny(
                built.matrix, np.asarray(h.getSolution().row_dual, dtype=float))
            claim.bound = dual if dual is not None else claim.objective
            if dual is not None:
                claim.source = f"{label} (bound from the LP's duals)"
    return status, claim
