"""The certified result: a solver's answer is a claim, checked here.

A solver path (the HiGHS matrix path, the Pyomo path, the warm start) returns
a :class:`Claim`: a vector of column values and what the solver says of it
(status, objective, bound).  :func:`certify` checks the claim against the
compiled :class:`~portfolio.compile.arrays.Matrix` itself and returns a
:class:`Certificate` whose figures are the project's own:

1. **feasible** — every column bound, every row and integrality hold for the
   vector within :data:`TOL` (scaled by the size of the limit, as a solver's
   feasibility tolerance is), else the row or bound that fails is named;
2. **objective** — recomputed from the vector (``cost @ x + offset``); a
   solver that reports another figure for the vector it returned fails;
3. **bound** — the solver's bound must not lie on the wrong side of the
   recomputed objective; where the LP relaxation's bound is known
   (:func:`dual_bound`, from the relaxation's row duals) the tighter of the
   two is kept, since both are bounds;
4. **gap** — recomputed from objective and bound (:func:`gap`);
5. **status** — ``optimal`` only when that gap is within the asked gap,
   or short of it by no more than the kept bound's slack (the money this
   schedule leaves unearned on columns whose reduced costs are within
   :data:`DUAL_TOL`, which the solver counts as zero: :class:`TinyCosts`,
   :func:`tiny_share`); a feasible vector otherwise is ``feasible``.

A claim of ``optimal`` that the figures do not support is a failure, listed
in ``failures``: the solve path then tries another way (:mod:`portfolio.solve`)
and says so in the summary's ``notes``.

:func:`dual_bound` is the bound of Neumaier and Shcherbina ("Safe bounds in
linear and mixed-integer linear programming", Mathematical Programming 99
(2004) 283-296): for ANY row multipliers y, ``c.x = y.(A x) + (c - A'y).x``
is at most the sum, over rows and columns, of each term at the end of its
range that favours it.  It needs no trust in the solver's duals, only finite
ranges where a multiplier is not zero: a row multiplier facing an open side
is set to zero (exact, since any y will do); reduced costs of roundoff size
(below :data:`ROUNDOFF` of the largest cost) on a column without an upper
limit are taken as zero, so the bound is verified up to roundoff.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import List, Optional, Tuple

import numpy as np

TOL = 1e-6          # feasibility and integrality (HiGHS's default primal tolerances)
ROUNDOFF = 1e-9     # reduced costs below this share of the largest cost count as zero
DUAL_TOL = 1e-7     # reduced costs a solver counts as zero (HiGHS's default dual feasibility tolerance)
OBJ_TOL = 1e-6      # objective agreement and gap slack, relative (absolute near zero)

OPTIMAL = "optimal"
FEASIBLE = "feasible"


@dataclass
class Claim:
    """What a solver path returned, before anything is believed."""

    x: Optional[np.ndarray]
    optimal: bool                         # the solver says it proved optimality
    objective: Optional[float] = None     # the solver's own figure for x
    bound: Optional[float] = None         # the solver's bound (MIP dual bound)
    source: str = "HiGHS"
    # the reduced costs within DUAL_TOL of the multipliers ``bound`` came from (an LP's
    # bound from its duals, :func:`dual_bound_tiny`); None: none known
    bound_tiny: Optional["TinyCosts"] = None


@dataclass
class Certificate:
    """The project's own figures for a claim (see the module docstring)."""

    feasible: bool
    violation: float
    where: str = ""                       # the worst row or bound, when one fails
    objective: Optional[float] = None
    bound: Optional[float] = None
    bound_source: str = ""
    gap: Optional[float] = None
    status: Optional[str] = None          # OPTIMAL or FEASIBLE; None: no usable schedule
    failures: List[str] = field(default_factory=list)
    bound_slack: float = 0.0              # tiny_share of the kept bound for this schedule (0: none)
    bound_tiny: Optional["TinyCosts"] = field(default=None, repr=False)   # the kept bound's

    @property
    def ok(self) -> bool:
        return not self.failures

    def to_dict(self) -> dict:
        return {"feasible": self.feasible, "max_violation": self.violation,
                "bound_source": self.bound_source, "bound_slack": self.bound_slack,
                "failures": list(self.failures)}


def gap(objective: Optional[float], bound: Optional[float], maximize: bool = True) -> Optional[float]:
    """Relative gap ``(bound - objective) / max(|objective|, 1)`` for a
    maximisation (mirrored for a minimisation); None when either is unknown.

    The denominator's floor of 1 (one unit of money) keeps the gap of a
    near-zero objective finite; HiGHS uses ``|objective|`` alone.
    """
    if objective is None or bound is None:
        return None
    diff = (bound - objective) if maximize else (objective - bound)
    return max(diff, 0.0) / max(abs(objective), 1.0)


def _scaled_excess(value: np.ndarray, limit: np.ndarray) -> np.ndarray:
    """How far ``value`` exceeds ``limit``, relative to max(1, |limit|)."""
    with np.errstate(invalid="ignore"):
        out = (value - limit) / np.maximum(1.0, np.abs(limit))
    return np.where(np.isfinite(limit), out, 0.0)


def check_vector(mx, x: np.ndarray):
    """(largest scaled violation, description of where) for ``x`` on ``mx``."""
    if x is None or x.shape != (mx.num_col,) or not np.all(np.isfinite(x)):
        return math.inf, "the solution vector is missing, misshapen or not finite"
    worst, where = 0.0, ""
    names = _column_names(mx)

    def consider(excess: np.ndarray, what) -> None:
        nonlocal worst, where
        if excess.size:
            i = int(np.argmax(excess))
            if excess[i] > worst:
                worst, where = float(excess[i]), what(i)

    consider(_scaled_excess(-x, -mx.col_lower), lambda i: f"lower bound of column {names(i)}")
    consider(_scaled_excess(x, mx.col_upper), lambda i: f"upper bound of column {names(i)}")
    xi = x[mx.integer]
    if xi.size:
        idx = np.nonzero(mx.integer)[0]
        consider(np.abs(xi - np.round(xi)), lambda i: f"integrality of column {names(int(idx[i]))}")
    if mx.num_row:
        r = mx.A @ x
        consider(_scaled_excess(-r, -mx.row_lower), lambda i: f"row {_row_name(mx, i)} (lower side)")
        consider(_scaled_excess(r, mx.row_upper), lambda i: f"row {_row_name(mx, i)} (upper side)")
    return worst, where


def _column_names(mx):
    def name(i: int) -> str:
        for fam, (a, b) in mx.var_ranges.items():
            if a <= i < b:
                keys = mx.var_index.get(fam)
                key = keys[i - a] if keys is not None and i - a < len(keys) else i - a
                return f"{fam}{list(key) if isinstance(key, tuple) else [key]}"
        return str(i)
    return name


def _row_name(mx, i: int) -> str:
    for block in mx.blocks:
        if block.start <= i < block.stop:
            key = block.keys[i - block.start] if i - block.start < len(block.keys) else i - block.start
            return f"{block.name}{list(key) if isinstance(key, tuple) else [key]}"
    return str(i)


def objective(mx, x: np.ndarray) -> float:
    """The objective of ``x``, from the matrix (never from a solver's report)."""
    return float(mx.cost @ x + mx.offset) if mx.num_col else float(mx.offset)


def dual_bound(mx, y: Optional[np.ndarray]) -> Optional[float]:
    """A bound on the objective of every point of the LP relaxation of ``mx``
    from row multipliers ``y`` (any sign convention; see the module docstring).

    An upper bound for a maximisation, a lower bound for a minimisation; None
    when no finite bound follows from ``y``.
    """
    return dual_bound_tiny(mx, y)[0]


@dataclass
class TinyCosts:
    """The columns whose reduced costs (of the multipliers a bound came from, in the
    maximising sense) are not zero but within :data:`DUAL_TOL`, which the solver counts
    as zero; both ends of their ranges finite."""

    index: np.ndarray
    d: np.ndarray


def dual_bound_tiny(mx, y: Optional[np.ndarray]) -> Tuple[Optional[float], Optional[TinyCosts]]:
    """(:func:`dual_bound`, its :class:`TinyCosts`): what :func:`tiny_share` needs to
    tell, for a schedule, how much of its gap to the bound those reduced costs alone
    hold."""
    if y is None or mx.num_col == 0:
        return (float(mx.offset) if mx.num_col == 0 else None), None
    y = np.asarray(y, dtype=float)
    if y.shape != (mx.num_row,) or not np.all(np.isfinite(y)):
        return None, None
    sense = 1.0 if mx.maximize else -1.0
    c = sense * mx.cost                       # maximise c.x
    scale = float(np.max(np.abs(c), initial=0.0))
    best, best_d = None, None
    for yy in (y, -y):                        # both are valid: keep the tighter
        # any multipliers give a valid bound, so one that faces an open side of
        # its row may be set to zero: exact, not an approximation
        yy = np.where(((yy > 0) & np.isinf(mx.row_upper)) | ((yy < 0) & np.isinf(mx.row_lower)),
                      0.0, yy)
        d = c - mx.A.T @ yy
        d = np.where((np.abs(d) <= ROUNDOFF * max(scale, 1.0))
                     & (np.isinf(mx.col_lower) | np.isinf(mx.col_upper)), 0.0, d)
        total = _favoured(yy, mx.row_lower, mx.row_upper) + _favoured(d, mx.col_lower, mx.col_upper)
        if math.isfinite(total) and (best is None or total < best):
            best, best_d = total, d
    if best is None:
        return None, None
    small = ((best_d != 0) & (np.abs(best_d) <= DUAL_TOL)
             & np.isfinite(mx.col_lower) & np.isfinite(mx.col_upper))
    index = np.nonzero(small)[0]
    return sense * best + float(mx.offset), TinyCosts(index, best_d[index])


def tiny_share(mx, tiny: Optional[TinyCosts], x: np.ndarray) -> float:
    """How much of the gap between schedule ``x`` and the bound ``tiny`` belongs to is
    held by those columns alone: the bound minus ``c.x`` is a sum of terms, none negative,
    one per row and one per column, ``d_j * (end favoured by d_j - x_j)``; this is the sum of
    the columns' terms in ``tiny`` (the money ``x`` leaves unearned at prices the solver
    counts as zero), exact for ``x``, whatever else it leaves unearned."""
    if tiny is None or len(tiny.index) == 0:
        return 0.0
    j, d = tiny.index, tiny.d
    fav = np.where(d > 0, mx.col_upper[j], mx.col_lower[j])
    return float(max(0.0, np.sum(d * (fav - np.asarray(x, dtype=float)[j]))))


def _favoured(coef: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> float:
    """sum_i max over v in [lo_i, hi_i] of coef_i * v (inf when unbounded)."""
    pick = np.where(coef > 0, hi, lo)
    with np.errstate(invalid="ignore"):
        val = coef * pick
    return float(np.where(coef == 0, 0.0, val).sum())


def certify(mx, claim: Claim, mip_gap: float, lp_bound: Optional[float] = None) -> Certificate:
    """Check ``claim`` against ``mx``; see the module docstring.

    ``lp_bound`` is a bound already verified (by :func:`dual_bound`), or None.
    """
    if claim.x is None:
        return Certificate(feasible=False, violation=math.inf, where="no schedule returned",
                           bound=lp_bound, bound_source="LP relaxation" if lp_bound is not None else "")
    x = np.asarray(claim.x, dtype=float)
    viol, where = check_vector(mx, x)
    cert = Certificate(feasible=viol <= TOL, violation=viol, where=where)
    if not cert.feasible:
        cert.failures.append(f"{claim.source} returned a schedule that breaks the model "
                             f"({where}, by {viol:.3g})")
        return cert
    obj = objective(mx, x)
    cert.objective = obj
    tol = OBJ_TOL * max(1.0, abs(obj))
    if claim.objective is not None and abs(claim.objective - obj) > tol:
        cert.failures.append(f"{claim.source} reported the objective {claim.objective:.10g} "
                             f"for a schedule worth {obj:.10g}")
    sense = 1.0 if mx.maximize else -1.0
    bound, source, tiny = None, "", None
    if claim.bound is not None and math.isfinite(claim.bound):
        if sense * (claim.bound - obj) < -tol:
            cert.failures.append(f"{claim.source} reported the bound {claim.bound:.10g}, on the "
                                 f"wrong side of its own schedule's value {obj:.10g}")
        else:
            bound, source, tiny = claim.bound, claim.source, claim.bound_tiny
    if lp_bound is not None:
        if sense * (lp_bound - obj) < -tol:
            cert.failures.append(f"the LP relaxation's bound {lp_bound:.10g} is on the wrong side "
                                 f"of a schedule worth {obj:.10g}")
        elif bound is None or sense * (lp_bound - bound) < 0:
            bound, source, tiny = lp_bound, "LP relaxation", None
    if bound is not None and sense * (bound - obj) < 0:
        bound = obj               # within tolerance: the schedule itself is the bound
    slack = tiny_share(mx, tiny, x) if bound is not None else 0.0
    cert.bound, cert.bound_source = bound, source
    cert.bound_slack, cert.bound_tiny = slack, tiny
    cert.gap = gap(obj, bound, mx.maximize)
    # within the asked gap, or short of it by no more than the bound's slack
    # (reduced costs the solver counts as zero): the gap itself is shown as is
    proven = cert.gap is not None and (
        cert.gap <= mip_gap + OBJ_TOL
        or sense * (bound - obj) <= (mip_gap + OBJ_TOL) * max(1.0, abs(obj)) + slack)
    cert.status = OPTIMAL if proven else FEASIBLE
    if claim.optimal and not proven:
        shown = "unknown" if cert.gap is None else f"{100 * cert.gap:.4g} %"
        cert.failures.append(f"{claim.source} said optimal, but the gap recomputed from the "
                             f"schedule and the bound is {shown} (asked: {100 * mip_gap:.4g} %)")
    return cert
