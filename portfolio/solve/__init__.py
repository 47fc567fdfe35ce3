"""Solve a compiled portfolio with HiGHS.

Two hand-off paths from the compiled portfolio to HiGHS, one module each:

* ``interface="matrix"`` (default, the fast one; :mod:`.matrix`): the
  compiler's sparse arrays become a ``highspy.HighsLp`` passed to
  ``Highs.passModel`` in one call; the Pyomo model is not needed (nor made).
* ``interface="pyomo"`` (:mod:`.pyomo_path`): Pyomo's persistent ``highs``
  interface on ``Built.model``, kept so that a benchmark can compare.

The other modules, by job: :mod:`.options` (what is asked and answered),
:mod:`.highs` (the one way a ``Highs`` is made, the ``HighsLp``, the status
table), :mod:`.runs` (one search run read back as a claim),
:mod:`.warmstart` (a first schedule), :mod:`.certify` (a claim checked
against the matrix), :mod:`.polish` (better continuous part, least spill).

HiGHS output is switched off; the library never prints.  Progress goes to
an optional ``progress(elapsed_s, best_objective, best_bound, gap)``
callable.

What HiGHS returns is a claim (:class:`.certify.Claim`): no status,
objective, bound or gap is reported before :func:`.certify.certify` has
checked it against the matrix.  A claim that fails is solved again another
way, and ``Solution.notes`` says so.  Every phase runs under one
:class:`Deadline`.

HiGHS's ``HighsModelStatus`` is mapped by the single table ``HIGHS_STATUS``
to what it claims; with a schedule in hand the reported status is the
certificate's (``optimal`` or ``feasible``).  Without one, ``LIMIT`` (a time,
iteration, solution or memory limit or an interrupt) becomes
``no_schedule``; ``INFEASIBLE_OR_UNBOUNDED`` is resolved by
:mod:`portfolio.dispatch`, which re-solves with slacks (zero total slack
means unbounded).
"""

from __future__ import annotations

from typing import Optional

from .highs import HIGHS_STATUS, SOLVER_ERRORS, new_highs, to_highs_lp
from .matrix import solve_matrix
from .options import (ERROR, FEASIBLE, INFEASIBLE, INFEASIBLE_OR_UNBOUNDED, INTERFACES, LIMIT,
                      MAX_THREADS, NO_SCHEDULE, OPTIMAL, STATUSES, UNBOUNDED, VARIANTS, Deadline,
                      Infeasible, Progress, ProgressFailed, Solution, SolveOptions)
from .pyomo_path import solve_pyomo

__all__ = [
    "solve", "SolveOptions", "Solution", "Deadline", "Progress",
    "OPTIMAL", "FEASIBLE", "INFEASIBLE", "UNBOUNDED", "NO_SCHEDULE", "ERROR", "STATUSES",
    "LIMIT", "INFEASIBLE_OR_UNBOUNDED", "HIGHS_STATUS", "INTERFACES", "MAX_THREADS", "VARIANTS",
    "new_highs", "to_highs_lp",
]


def solve(built, options: Optional[SolveOptions] = None,
          progress: Optional[Progress] = None, deadline: Optional[Deadline] = None,
          hint=None) -> Solution:
    """Solve a :class:`~portfolio.compile.Built`; never raises for solver trouble.

    Every figure returned is certified (:mod:`.certify`); a claim that fails
    is solved again another way, with a note.  ``deadline`` is the
    dispatch's shared time limit (default: ``options.time_limit`` from now).
    Solver failures become ``status="error"`` with ``message`` set; an
    exception raised by ``progress`` stops the solve and propagates.
    ``hint``: a callable ``hint(seconds)`` returning mode binaries (an object
    with ``values``, family -> asset -> one value per step, and ``note``: as
    :func:`portfolio.sketch.sketcher` makes), asked by the matrix path only
    when the LP relaxation's start gives nothing; their schedule
    (:func:`.warmstart.with_modes`) is checked like any start.  The Pyomo path
    ignores it.
    """
    options = options or SolveOptions()
    deadline = deadline or Deadline(options.time_limit)
    try:
        if options.interface == "pyomo":
            sol = solve_pyomo(built, options, progress, deadline)
        else:
            sol = solve_matrix(built, options, progress, deadline, hint)
    except ProgressFailed as exc:
        raise exc.original
    except Infeasible as exc:
        return Solution(status=INFEASIBLE, message=str(exc))
    except SOLVER_ERRORS as exc:
        return Solution(status=ERROR, message=f"{type(exc).__name__}: {exc}")
    if progress is not None:
        progress(sol.handoff_seconds + sol.solve_seconds, sol.objective, sol.best_bound, sol.mip_gap)
    return sol
