"""Marginal values of a single dispatch: what one more MW (or MWh) of a limit is worth.

Every integer column is fixed at the schedule found, the linear programme
that is left is solved through the matrix path
(:func:`portfolio.solve.highs.make_lp`, :func:`portfolio.solve.highs.new_highs`),
and its duals are read:

* a limit the compiler made a **row** (a site power balance, the direction
  rule's big-M row, a mode row ``c <= charge_max * u``, a store's charge
  limit when supplies feed it directly) is valued by the row's dual;
* a limit the compiler made a **column bound** (a connection's or site's
  export and import limit, a store's charge and discharge limit without
  direct supplies, its upper state of charge) is valued by the column's
  reduced cost.

Which rows and bounds a limit enters is not guessed: the portfolio is
compiled again with that one limit raised by :data:`DELTA`, and the two
matrices are compared (same rows and columns, the binaries held).  A limit
may enter several places at once (a connection's export limit is the bound
of its export column *and*, where the direction rule holds, the big-M of a
row: two copies of one limit, whose duals HiGHS may split in any way); the
value is the sum over all of them of ``dual x change``, the first-order
change of the optimum (the derivative of the Lagrangian):

    value = sum_r y_r * (d rhs_r - (dA x)_r) + sum_j d_j * d bound_j + d cost . x

per unit of the limit, with ``y`` and ``d`` the row and column duals as
"money per unit of right-hand side or bound", the side being the one that
binds (upper for a positive dual, lower for a negative).  Each row and
column belongs to one step (the last part of its key), so the sum splits
into the value of one more MW *in that step alone*; the horizon's value
(one more MW in every step) is their total.

What it means and where it is not valid: docs/marginal-values.md.  In short,
the value of a small change with the on/off decisions held; not valid for a
change that would flip one; one of a range of values when the LP is
degenerate (``degenerate`` in the result); not computed for a dispatch by
windows, a model changed in Pyomo, or a dispatch without a schedule.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field, replace
from typing import List, Optional, Tuple

import numpy as np
import pandas as pd

from .compile import Built, build
from .contract import MARGINAL_LIMITS, marginal_column
from .model import Portfolio
from .solve.highs import Abandoned, make_lp, new_highs
from .solve.options import FEASIBLE, OPTIMAL, SolveOptions

DELTA = 1.0 / 1024      # the raise per limit (exact in binary): small, so a kink in min() is not crossed
ZERO = 1e-9             # money per unit below which a value is reported as 0 (solver noise)
AT_BOUND = 1e-7         # a basic column or row within this of a bound makes the LP degenerate

# the limits valued, per summary section: their model fields (MARGINAL_LIMITS in the contract)
_FIELDS = {group: tuple(c.name for c in cols) for group, cols in MARGINAL_LIMITS.items()}


class MarginalValuesError(ValueError):
    """Marginal values cannot be asked for this dispatch (a dispatch by windows,
    a model changed in Pyomo): a plain sentence for the user."""


@dataclass
class Limit:
    """One declared limit and what one more unit of it is worth."""

    group: str                      # summary section: connections, sites, storages
    asset: str
    limit: str                      # model field: export_max, charge_max, soc_max, ...
    unit: str                       # money/MW or money/MWh
    declared: float                 # the limit as declared (MW or MWh)
    per_step: np.ndarray            # money per unit, one more unit in that step alone
    families: Tuple[str, ...]       # the row and bound families it enters
    span: object = None             # the setting's Span

    @property
    def column(self) -> str:
        return marginal_column(self.asset, self.limit)

    @property
    def horizon(self) -> float:
        """One more unit in every step."""
        return float(self.per_step.sum())

    def to_dict(self, index) -> dict:
        k = int(np.argmax(np.abs(self.per_step))) if self.per_step.size else 0
        largest = float(self.per_step[k]) if self.per_step.size else 0.0
        sp = self.span
        return {"group": self.group, "asset": self.asset, "limit": self.limit, "unit": self.unit,
                "declared": self.declared, "horizon": self.horizon, "largest": largest,
                "largest_at": index[k].isoformat() if largest else None,
                "binding_steps": int(np.count_nonzero(self.per_step)),
                "families": list(self.families),
                "path": getattr(sp, "path", None), "line": getattr(sp, "line", None),
                "column": getattr(sp, "col", None)}


@dataclass
class MarginalValues:
    """The marginal values of one dispatch (``computed`` False: ``message`` says why)."""

    computed: bool
    message: str = ""
    limits: List[Limit] = field(default_factory=list)
    objective: Optional[float] = None          # the dispatch's
    lp_objective: Optional[float] = None       # the fixed-binary LP's
    fixed_binaries: int = 0
    degenerate: bool = False
    seconds: float = 0.0
    notes: List[str] = field(default_factory=list)

    def table(self, index: pd.DatetimeIndex) -> Optional[pd.DataFrame]:
        """``marginal_values.csv``: one column per limit, ``<asset>.<limit>``."""
        if not self.computed:
            return None
        return pd.DataFrame({lim.column: lim.per_step for lim in self.limits},
                            index=pd.DatetimeIndex(index, name="time"))

    def summary(self, index) -> dict:
        """The ``marginal_values`` key of summary.json (contract: ``MARGINAL_KEYS``)."""
        return {
            "status": "computed" if self.computed else "not_computed",
            "message": self.message,
            "objective": self.objective,
            "lp_objective": self.lp_objective,
            "fixed_binaries": self.fixed_binaries,
            "degenerate": self.degenerate,
            "seconds": self.seconds,
            "energy_capacity": {lim.asset: lim.horizon for lim in self.limits
                                if lim.limit == "soc_max"},
            "limits": [lim.to_dict(index) for lim in self.limits],
            "notes": list(self.notes),
        }


def refusal(result) -> Optional[str]:
    """Why marginal values cannot be asked for ``result``'s kind of dispatch (None: they can)."""
    if getattr(result, "windows", None) is not None:
        return windows_refusal()
    if result.summary.get("model", {}).get("source") == "pyomo":
        return ("marginal values are not computed for a model changed in Pyomo: the limits are "
                "raised by compiling the portfolio again, which would drop the rows you added")
    return None


def windows_refusal() -> str:
    return ("--marginal-values does not combine with --windows (or --foresight): the duals of one "
            "LP over the whole horizon would value a schedule that sees the whole horizon at once, "
            "not the one the windows committed; dispatch without windows to get them")


def attach(result, options: Optional[SolveOptions] = None):
    """``result`` with its marginal values: ``result.marginal_values`` (the table, or None),
    ``result.summary["marginal_values"]``, and the :class:`MarginalValues` returned.
    Raises :class:`MarginalValuesError` for a kind of dispatch they cannot be had for."""
    mv = compute(result, options)
    index = result.portfolio.horizon.index if result.portfolio is not None else []
    result.summary["marginal_values"] = mv.summary(index)
    result.marginal_values = mv.table(index)
    return mv


def compute(result, options: Optional[SolveOptions] = None) -> MarginalValues:
    """The marginal values of a :class:`~portfolio.dispatch.DispatchResult`.

    Never raises for a dispatch without a schedule (``computed`` False and a
    message); raises :class:`MarginalValuesError` for a dispatch by windows or
    a model changed in Pyomo."""
    why = refusal(result)
    if why:
        raise MarginalValuesError(why)
    t0 = time.perf_counter()
    built = result.built
    if not result.has_schedule or built is None or built.solution is None:
        return MarginalValues(False, f"no marginal values: the dispatch found no schedule "
                                     f"(status {result.status})")
    options = options or SolveOptions()
    lp = _fixed_lp(built, built.solution, options)
    if isinstance(lp, str):
        return MarginalValues(False, lp, objective=result.objective, seconds=time.perf_counter() - t0)
    mv = MarginalValues(True, objective=result.objective, lp_objective=lp.objective,
                        fixed_binaries=int(built.matrix.integer.sum()), degenerate=lp.degenerate)
    if result.status == FEASIBLE:
        mv.notes.append("the dispatch was not proven optimal (its gap is above zero): these are "
                        "the values of the LP with its on/off decisions, not of the best dispatch")
    elif result.status != OPTIMAL:     # pragma: no cover - a schedule is optimal or feasible
        mv.notes.append(f"the dispatch's status is {result.status}")
    if lp.degenerate:
        mv.notes.append("the LP with the on/off decisions fixed is degenerate: a value may be one "
                        "of a range of equally valid values (docs/marginal-values.md)")
    steps = _Steps(built)
    for group, fields in _FIELDS.items():
        for name, decl in getattr(built.portfolio, group).items():
            for fld in fields:
                lim = _value(built, lp, steps, group, name, decl, fld)
                if isinstance(lim, str):
                    mv.notes.append(lim)
                elif lim is not None:
                    mv.limits.append(lim)
    mv.seconds = time.perf_counter() - t0
    return mv


# --- the fixed-binary LP ------------------------------------------------------------------

@dataclass
class _Solved:
    x: np.ndarray            # column values
    y: np.ndarray            # row duals, money per unit of right-hand side
    d: np.ndarray            # column duals (reduced costs), money per unit of bound
    objective: float
    degenerate: bool


def _fixed_lp(built: Built, x: np.ndarray, options: SolveOptions):
    """Solve ``built``'s LP with every integer column fixed at ``x``: a :class:`_Solved`,
    or a sentence saying why not."""
    import highspy

    mx = built.matrix
    if not mx.maximize:       # pragma: no cover - a dispatch maximises its money
        return "no marginal values: the model does not maximise money"
    ints = mx.integer
    lo, hi = mx.col_lower.copy(), mx.col_upper.copy()
    vals = np.round(np.asarray(x, dtype=float)[ints])
    lo[ints] = vals
    hi[ints] = vals
    lp = make_lp(mx.A, mx.cost, lo, hi, mx.row_lower, mx.row_upper, mx.offset, True,
                 np.zeros(mx.num_col, dtype=bool))
    h = new_highs(options, options.time_limit)
    h.passModel(lp)
    try:
        h.run()
    except Abandoned:
        return "no marginal values: the LP with the on/off decisions fixed did not stop at its time limit"
    if h.getModelStatus() != highspy.HighsModelStatus.kOptimal:
        return ("no marginal values: the LP with the on/off decisions fixed did not solve "
                f"({h.modelStatusToString(h.getModelStatus())})")
    sol = h.getSolution()
    xs = np.asarray(sol.col_value, dtype=float)
    y = np.asarray(sol.row_dual, dtype=float)
    d = np.asarray(sol.col_dual, dtype=float)
    act = np.asarray(sol.row_value, dtype=float)
    basis = h.getBasis()
    objective = float(mx.cost @ xs + mx.offset)
    degenerate = _degenerate(basis, xs, lo, hi, act, mx.row_lower, mx.row_upper)
    del h
    return _Solved(xs, y, d, objective, degenerate)


def _degenerate(basis, x, lo, hi, act, rlo, rhi) -> bool:
    """A basic column or row at one of its bounds: the duals may then not be unique.
    A fixed column (a held binary) does not count: it is no decision."""
    import highspy

    basic = highspy.HighsBasisStatus.kBasic
    cb = np.array([s == basic for s in basis.col_status], dtype=bool)
    rb = np.array([s == basic for s in basis.row_status], dtype=bool)

    def at(v, a, b):
        return (np.abs(v - a) <= AT_BOUND) | (np.abs(v - b) <= AT_BOUND)
    return bool(np.any(cb & (lo < hi) & at(x, lo, hi)) or np.any(rb & at(act, rlo, rhi)))


# --- one limit ----------------------------------------------------------------------------

class _Steps:
    """The step of every row and column (-1: none), from the keys the compiler gave them."""

    def __init__(self, built: Built):
        mx = built.matrix
        self.T = built.steps
        self.row = np.full(mx.num_row, -1, dtype=np.int64)
        for b in mx.blocks:
            self.row[b.start:b.stop] = [_step(k) for k in b.keys]
        self.col = np.full(mx.num_col, -1, dtype=np.int64)
        for name, (a, b) in mx.var_ranges.items():
            self.col[a:b] = [_step(k) for k in mx.var_index[name]]

    def split(self, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
        """Per-row and per-column amounts summed by step."""
        out = np.zeros(self.T)
        for amount, step in ((rows, self.row), (cols, self.col)):
            keep = (step >= 0) & (amount != 0)
            np.add.at(out, step[keep], amount[keep])
        return out


def _step(key) -> int:
    t = key[-1] if isinstance(key, tuple) and key else key
    return int(t) if isinstance(t, (int, np.integer)) and not isinstance(t, bool) else -1


def _raised(p: Portfolio, group: str, name: str, fld: str, by: float) -> Portfolio:
    decls = dict(getattr(p, group))
    decls[name] = replace(decls[name], **{fld: getattr(decls[name], fld) + by})
    return replace(p, **{group: decls})


def _value(built: Built, lp: _Solved, steps: _Steps, group: str, name: str, decl, fld: str):
    """The :class:`Limit` of one declared limit, None for a limit not declared, or a sentence
    saying why it has no value."""
    declared = getattr(decl, fld)
    if declared is None:
        return None
    unit = next(c.unit for c in MARGINAL_LIMITS[group] if c.name == fld)
    where = decl.where("energy" if fld == "soc_max" and "soc_max" not in decl.spans else fld)
    other = build(_raised(built.portfolio, group, name, fld, DELTA), variant=built.variant,
                  topology=built.topology)
    a, b = built.matrix, other.matrix
    if (a.A.shape != b.A.shape or [(k.name, k.start, k.stop) for k in a.blocks]
            != [(k.name, k.start, k.stop) for k in b.blocks] or a.var_ranges != b.var_ranges):
        what = f'{group[:-1]} "{name}"'
        return (f"{fld} of {what}: no marginal value, since raising it changes the model's shape "
                f"(a limit of 0 that adds variables when raised): compare two dispatches instead")
    rows, cols, fams = _change(a, b, lp)
    per_step = steps.split(rows, cols) / DELTA
    per_step[np.abs(per_step) < ZERO] = 0.0
    return Limit(group, name, fld, unit, float(declared), per_step, fams, where)


def _change(a, b, lp: _Solved):
    """First-order change of the optimum from matrix ``a`` to ``b``, per row and per column
    (the side of a bound or row is the one its dual says binds), and the families touched."""
    d_hi = _diff(b.row_upper, a.row_upper)
    d_lo = _diff(b.row_lower, a.row_lower)
    dA = (b.A - a.A).tocsr()
    dAx = dA @ lp.x
    y = lp.y
    rows = y * (np.where(y > 0, d_hi, d_lo) - dAx)
    ints = a.integer
    c_hi = _diff(b.col_upper, a.col_upper)
    c_lo = _diff(b.col_lower, a.col_lower)
    c_hi[ints] = 0.0           # binaries are held, whatever the limit
    c_lo[ints] = 0.0
    cols = lp.d * np.where(lp.d > 0, c_hi, c_lo) + (b.cost - a.cost) * lp.x
    touched_rows = (d_hi != 0) | (d_lo != 0) | (np.diff(dA.indptr) > 0)
    fams = [blk.name for blk in a.blocks if touched_rows[blk.start:blk.stop].any()]
    touched_cols = np.nonzero((c_hi != 0) | (c_lo != 0))[0]
    for name, (s, e) in a.var_ranges.items():
        if ((touched_cols >= s) & (touched_cols < e)).any():
            fams.append(f"bound of {name}")
    return rows, cols, tuple(fams)


def _diff(new: np.ndarray, old: np.ndarray) -> np.ndarray:
    """new - old, with equal infinities as no change (an infinity that appears or goes
    would be a change of shape, which the caller has ruled out for rows it reads)."""
    with np.errstate(invalid="ignore"):
        out = np.asarray(new, dtype=float) - np.asarray(old, dtype=float)
    out[~np.isfinite(out)] = 0.0
    return out
