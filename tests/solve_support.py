"""Test support for the solver layer: what only tests use, kept out of the library.

* :func:`to_standard_form` reads the Pyomo model back into a ``HighsLp``
  through Pyomo's own standard-form compiler (an outside reference), so a
  test can check it against the arrays HiGHS is given.
* :func:`polish_schedule` runs both steps of :mod:`portfolio.solve.polish` on a
  schedule, as the matrix path does one after the other.
"""

from __future__ import annotations

import time
from typing import Optional, Sequence

import highspy
import numpy as np

from portfolio.solve.highs import make_lp
from portfolio.solve.polish import Polished, improve, tie_break


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
    lp = make_lp(A, cost, col_lower, col_upper, lower, upper, offset, int(sense) == -1, integer)
    return lp, columns, bool(integer.any())


def polish_schedule(mx, lp, x: np.ndarray, new_highs, seconds: Optional[float],
                    tidy_cols: Sequence[int], dt: float, hot=None) -> Polished:
    """:func:`~portfolio.solve.polish.improve`, then :func:`~portfolio.solve.polish.tie_break`.

    ``new_highs(seconds)`` gives a configured Highs; ``hot``, for an LP, is
    the Highs that solved it (the tie-break then starts from its basis).
    ``seconds`` None means no limit.
    """
    t0 = time.perf_counter()
    best, h = improve(mx, lp, x, new_highs, seconds)
    left = None if seconds is None else seconds - (time.perf_counter() - t0)
    tie_break(mx, lp, best, h if h is not None else hot, new_highs, left, tidy_cols, dt)
    return best
