"""HiGHS at the process level: one silent, interruptible, deadline-keeping ``Highs``.

:func:`new_highs` is the only way the project makes a ``highspy.Highs``:
output off, the options' gap and threads, a time limit, and a ``run()`` that

* a Ctrl-C stops at once (HiGHS runs in a worker thread; this thread waits
  where the KeyboardInterrupt lands, asks HiGHS to stop, and re-raises after
  at most :data:`GRACE` seconds), and
* keeps the time limit even where HiGHS does not: some HiGHS phases check
  neither their time limit nor any callback (the set-up of a large MIP after
  presolve was seen to take 9 s, its root LP 18 s).  :data:`GRACE` seconds
  past its limit the run is asked to stop; :data:`GRACE` seconds after that it
  is left to finish in its own thread (its object kept alive, never touched
  again) and :class:`Abandoned` is raised, so the caller goes on with the
  schedule it already has.

It also holds what is said in HiGHS's own terms: the compiled matrix as a
``HighsLp`` (:func:`to_highs_lp`), and what each ``HighsModelStatus`` claims
(:data:`HIGHS_STATUS`).
"""

from __future__ import annotations

import os
import sys
import threading
import time
from typing import Dict, List, Optional, Tuple

import highspy
import numpy as np

from .options import ERROR, INFEASIBLE, INFEASIBLE_OR_UNBOUNDED, LIMIT, OPTIMAL, UNBOUNDED

GRACE = 2.0


class Abandoned(Exception):
    """HiGHS did not stop near its time limit; its run goes on in its thread
    and its object must not be read."""


_abandoned: List[object] = []      # abandoned runs, kept alive until they end


# --- HiGHS prints a banner to the C stdout the first time a Highs object is
# created in a process.  Create that first one with fd 1 pointed at /dev/null.
_banner_lock = threading.Lock()
_banner_done = False


def quiet_banner() -> None:
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


def use_threads(threads: Optional[int]) -> None:
    """HiGHS keeps one global thread pool, sized by the first solve; a
    different ``threads`` later is an error unless the pool is reset."""
    with _threads_lock:
        if threads != _threads_in_use[0]:
            highspy.Highs.resetGlobalScheduler(True)
            _threads_in_use[0] = threads


class _Highs(highspy.Highs):
    """A Highs whose ``run()`` a Ctrl-C stops and whose time limit holds (module docstring)."""

    stop_at: Optional[float] = None     # time.monotonic() by which HiGHS should be done

    def run(self):
        self.HandleUserInterrupt = True
        self.startSolve()
        try:
            return self._watch()
        except KeyboardInterrupt:
            self.cancelSolve()
            until = time.monotonic() + GRACE
            while time.monotonic() < until:
                try:
                    if self._wait_until(until) is not None:
                        break
                except KeyboardInterrupt:
                    continue
            raise

    def _watch(self):
        """Wait for the run, keeping its time limit (see the module docstring)."""
        if self.stop_at is None:
            return self._wait_until(None)
        status = self._wait_until(self.stop_at + GRACE)
        if status is not None:
            return status
        self.cancelSolve()                       # past its limit: ask it to stop
        status = self._wait_until(time.monotonic() + GRACE)
        if status is not None:
            return status
        _abandoned.append(self)                  # still busy: leave it to finish
        raise Abandoned("HiGHS did not stop within "
                        f"{2 * GRACE:g} s of its time limit; its run was left to finish")

    def _wait_until(self, until: Optional[float]):
        """Wait for the run; its status, or None when ``until`` passes first."""
        while until is None or time.monotonic() < until:
            done, status = self.wait(0.1)
            if done:
                return status if status is not None else highspy.HighsStatus.kOk
        return None


def set_limit(h, seconds: float) -> None:
    """Give ``h`` a time limit that its ``run()`` keeps (also on a plain Highs: only the option)."""
    h.setOptionValue("time_limit", max(float(seconds), 0.01))
    if isinstance(h, _Highs):
        h.stop_at = time.monotonic() + max(float(seconds), 0.01)


def new_highs(options, seconds: Optional[float] = None) -> highspy.Highs:
    """A configured, silent Highs; ``seconds`` is its time limit (None: the
    options' limit, if any; a phase passes what is left of the dispatch's)."""
    quiet_banner()
    use_threads(options.threads)
    h = _Highs()
    h.setOptionValue("output_flag", False)
    h.setOptionValue("mip_rel_gap", float(options.mip_gap))
    if not options.presolve:
        h.setOptionValue("presolve", "off")
    limit = seconds if seconds is not None else options.time_limit
    if limit is not None:
        set_limit(h, limit)
    if options.threads is not None:
        h.setOptionValue("threads", int(options.threads))
    return h




# --- the model and the answer, in HiGHS's terms ------------------------------------

def make_lp(A, cost, col_lower, col_upper, row_lower, row_upper, offset, maximize,
            integer) -> highspy.HighsLp:
    """A ``HighsLp`` from a CSC matrix and its bounds (infinities as HiGHS's)."""
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
    lp = make_lp(mx.A, mx.cost, mx.col_lower, mx.col_upper, mx.row_lower, mx.row_upper,
                 mx.offset, mx.maximize, mx.integer)
    return lp, bool(mx.integer.any())


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
SOLVER_ERRORS = tuple(e for e in (getattr(highspy, "HighsError", None),) if e is not None) + (
    ValueError, RuntimeError, MemoryError)
