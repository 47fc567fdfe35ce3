"""The compile context: variables, rows, bounds and their origins.

A constraint family module never touches the solver's matrix or Pyomo
directly.  It asks the context for variables (:meth:`Ctx.v`, a column
number), then adds

* rows (:meth:`Ctx.row`): ``lo <= sum(coef * column) + const <= hi``, or
* bounds (:meth:`Ctx.bound`): a limit on one variable entry.

Each row and bound names its family and an :class:`Origin` (the Span of the
setting it encodes plus a description).  :meth:`Ctx.finish` turns what was
collected into a :class:`Matrix`: sparse rows with their bounds, column
bounds, integrality and objective, in NumPy/SciPy arrays.  That is what the
solver receives; the Pyomo model with one indexed ``Constraint`` per family
is made from it on request (:mod:`portfolio.compile.pyomo_model`).

In ``relax`` mode every relaxable row and every bound becomes a row with a
non-negative slack, the slack of each row remembers its origin, and the
objective is the total slack (see :mod:`portfolio.compile.families.objective`).
Identities (balances, definitions) are never relaxed: only limits and rules
can "give".
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Dict, Hashable, List, Optional, Sequence, Tuple

import numpy as np

from ..graph import network
from ..model import Portfolio
from ..spans import Span
from ..topology import Topology
from .arrays import Keys, Matrix, _cat, _Columns, _Rows

INF = math.inf

# names the Pyomo model uses besides the variable and row families
RESERVED = ("slack", "objective")


@dataclass(frozen=True)
class Origin:
    """Where a limit came from: the span of the setting and what it is."""

    span: Span
    description: str

    def __str__(self) -> str:
        return f"{self.span}: {self.description}"


@dataclass
class Family:
    name: str
    kind: str                     # "rows" or "bounds"
    relaxable: bool
    var: Optional[str] = None     # for bounds: the variable family
    origins: List[Origin] = field(default_factory=list)
    _origin_pos: Dict[Origin, int] = field(default_factory=dict, repr=False)
    _origin_id: Dict[int, int] = field(default_factory=dict, repr=False)
    # rows: one entry per row in these lists; the terms of all rows in one flat
    # list of (coef, column or None), row i owning row_len[i] of them
    keys: list = field(default_factory=list, repr=False)
    lo: list = field(default_factory=list, repr=False)       # None: no lower limit
    hi: list = field(default_factory=list, repr=False)       # None: no upper limit
    const: list = field(default_factory=list, repr=False)
    oi: list = field(default_factory=list, repr=False)       # origin index, -1 for none
    terms: list = field(default_factory=list, repr=False)
    row_len: list = field(default_factory=list, repr=False)
    bounds: list = field(default_factory=list, repr=False)   # (column, lo, hi, origin index)

    def origin_index(self, origin: Origin) -> int:
        # fast path by identity (families reuse one Origin object per setting);
        # the origins list keeps each object alive, so ids are not reused
        pos = self._origin_id.get(id(origin))
        if pos is not None and self.origins[pos] is origin:
            return pos
        pos = self._origin_pos.get(origin)
        if pos is None:
            pos = len(self.origins)
            self.origins.append(origin)
            self._origin_pos[origin] = pos
        if self.origins[pos] is origin:
            self._origin_id[id(origin)] = pos
        return pos


class Ctx:
    """Shared state while one Portfolio is compiled."""

    def __init__(self, p: Portfolio, variant: str = "tight", relax: bool = False,
                 topology: Optional[Topology] = None, layout_only: bool = False):
        if variant not in ("tight", "plain"):
            raise ValueError(f"unknown formulation variant {variant!r} (use 'tight' or 'plain')")
        self.p = p
        # who is where, what flows into what: read from the network graph, nowhere else
        self.topo = topology if topology is not None else network(p).topology()
        self.variant = variant
        self.relax = relax
        # layout only: variables, their places and the objective, but no row and no bound is kept
        # (what reading a long stitched schedule needs, without the memory of its rows)
        self.layout_only = layout_only
        self.T = int(p.horizon.steps)
        self.dt = float(p.horizon.step_hours)
        self.steps = range(self.T)
        self.n_cols = 0
        self.var_keys: Dict[str, Keys] = {}
        self.var_blocks: Dict[str, Dict[Hashable, int]] = {}   # asset key -> first position
        self._var_start: Dict[str, int] = {}                    # family -> first column
        self._col_of: Dict[str, Dict[Hashable, int]] = {}       # asset -> column of step 0
        self._var_ub: Dict[str, Optional[float]] = {}
        self._implied: List[Tuple[int, float]] = []    # (column, upper bound) from portfolio.reach
        self.binary_vars: List[str] = []
        self.families: Dict[str, Family] = {}
        self.expr: Dict[str, object] = {}        # expressions shared between modules
        self.memo: Dict[Hashable, object] = {}   # expression parts, made once per asset
        self.objective_terms: List[Tuple[float, object]] = []
        self.objective_const = 0.0
        self.slack_info: List[tuple] = []   # (family, origin idx, side, row key)
        self.notes: List[str] = []               # formulation facts for the summary/docs

    # -- variables -------------------------------------------------------------
    def add_var(self, name: str, assets: Sequence[Hashable], binary: bool = False,
                ub: Optional[float] = None) -> Optional[int]:
        """A variable family indexed by ``(*asset, t)`` for every asset and step.

        ``assets`` are strings or tuples; the index order is asset-major, so the
        values of one asset are contiguous (see :meth:`Built.array`).  Returns
        the first column of the family (None when it has no entries).
        """
        if name in self.var_keys:
            raise RuntimeError(f"variable family {name} defined twice")
        if name in self.families or name in RESERVED:
            raise RuntimeError(f"variable family {name} clashes with a model component")
        keys = Keys(assets, self.T)
        blocks: Dict[Hashable, int] = {a: i * self.T for i, a in enumerate(keys.assets)}
        self.var_keys[name] = keys
        self.var_blocks[name] = blocks
        if not keys:
            return None
        start = self.n_cols
        self.n_cols += len(keys)
        self._var_start[name] = start
        self._col_of[name] = {a: start + pos for a, pos in blocks.items()}
        self._var_ub[name] = 1.0 if binary else ub
        if binary:
            self.binary_vars.append(name)
        return start

    def has(self, name: str, asset: Hashable) -> bool:
        blocks = self.var_blocks.get(name)
        return blocks is not None and asset in blocks

    def v(self, name: str, asset: Hashable, t: int) -> Optional[int]:
        """The column of ``name[asset, t]``; ``None`` if absent or ``t`` outside the horizon."""
        if t < 0 or t >= self.T:
            return None
        per_asset = self._col_of.get(name)
        if per_asset is None:
            return None
        c = per_asset.get(asset)
        return None if c is None else c + t

    # -- families --------------------------------------------------------------
    def family(self, name: str, kind: str = "rows", relaxable: bool = True,
               var: Optional[str] = None) -> Family:
        fam = self.families.get(name)
        if fam is None:
            if name in self.var_keys or name in RESERVED:
                raise RuntimeError(f"family name {name} clashes with a model component")
            fam = Family(name, kind, relaxable, var)
            self.families[name] = fam
        return fam

    def row(self, family: str, key: tuple, terms, const: float = 0.0,
            lo: Optional[float] = None, hi: Optional[float] = None,
            origin: Optional[Origin] = None, relaxable: bool = True) -> None:
        """Add ``lo <= sum(terms) + const <= hi`` to ``family``.

        ``terms`` are ``(coef, column)`` pairs (columns from :meth:`v`); pairs
        with a zero coefficient or a ``None`` column are dropped.
        """
        if self.layout_only:
            return
        fam = self.families.get(family) or self.family(family, "rows", relaxable)
        if lo is None and hi is None:
            raise RuntimeError(f"row {family}{key} has no bound")
        fam.oi.append(fam.origin_index(origin) if origin is not None else -1)
        fam.keys.append(key[0] if isinstance(key, tuple) and len(key) == 1 else key)
        fam.lo.append(lo)
        fam.hi.append(hi)
        fam.const.append(const)
        flat = fam.terms
        n0 = len(flat)
        flat.extend(terms)
        fam.row_len.append(len(flat) - n0)

    def bound(self, family: str, var: str, asset: Hashable, t: int,
              lo: Optional[float] = None, hi: Optional[float] = None,
              origin: Optional[Origin] = None) -> None:
        """A bound on one variable entry (a relaxable row in relax mode)."""
        col = self.v(var, asset, t)
        if col is None or self.layout_only:
            return
        fam = self.families.get(family) or self.family(family, "bounds", True, var)
        if fam.var != var:
            raise RuntimeError(f"bound family {family} used for two variables")
        oi = fam.origin_index(origin) if origin is not None else -1
        fam.bounds.append((col, lo, hi, oi))

    def implied(self, var: str, asset: Hashable, t: int, hi: float) -> None:
        """An upper bound that every schedule can meet once written canonically
        (see :mod:`portfolio.reach`): applied in both modes, never relaxed, no origin."""
        col = self.v(var, asset, t)
        if col is not None and not self.layout_only:
            self._implied.append((col, float(hi)))

    def origin_only(self, family: str, origin: Origin, kind: str = "rows") -> None:
        """Register an origin for a family whose rows carry none individually."""
        self.family(family, kind).origin_index(origin)

    def objective(self, terms, const: float = 0.0) -> None:
        self.objective_terms.extend(terms)
        self.objective_const += const

    # -- turning it all into arrays ---------------------------------------------
    def finish(self) -> Matrix:
        """The collected variables, rows and bounds as a :class:`Matrix`."""
        cols = self._columns()
        rows = _Rows(self.n_cols)
        col_key: List[object] = []        # filled only in relax mode: column -> (family, key)
        for fam in self.families.values():
            if fam.kind == "bounds":
                if fam.bounds and self.relax and not col_key:
                    col_key = self._column_keys()
                self._add_bounds(fam, cols, rows, col_key)
            else:
                self._add_rows(fam, rows)
        self.slack_info = rows.slack_rows
        cols = self._with_slacks(cols, len(rows.slack_rows))
        cost, offset, maximize = self._objective(len(cols.lower))
        return Matrix(A=rows.matrix(len(cols.lower)), row_lower=_cat(rows.lower, float),
                      row_upper=_cat(rows.upper, float), col_lower=cols.lower,
                      col_upper=cols.upper, integer=cols.integer, cost=cost, offset=offset,
                      maximize=maximize, var_ranges=cols.ranges, var_index=cols.index,
                      binary=cols.binary, blocks=rows.blocks)

    def _columns(self) -> "_Columns":
        """Column bounds and integrality of the variable families (implied bounds applied)."""
        n = self.n_cols
        cols = _Columns(lower=np.zeros(n), upper=np.full(n, INF), integer=np.zeros(n, dtype=bool))
        for name, start in self._var_start.items():
            stop = start + len(self.var_keys[name])
            cols.ranges[name] = (start, stop)
            cols.index[name] = self.var_keys[name]
            cols.binary[name] = name in self.binary_vars
            ub = self._var_ub[name]
            if ub is not None:
                cols.upper[start:stop] = ub
            cols.integer[start:stop] = cols.binary[name]
        if self._implied:
            at, his = zip(*self._implied)
            np.minimum.at(cols.upper, np.asarray(at, dtype=np.int64), np.asarray(his, dtype=float))
        return cols

    def _add_bounds(self, fam: Family, cols: "_Columns", rows: "_Rows", col_key: list) -> None:
        """A bound family: column bounds, or (relax mode) one row per bound call."""
        if not fam.bounds:
            return
        at = np.fromiter((b[0] for b in fam.bounds), dtype=np.int64, count=len(fam.bounds))
        lo = np.array([b[1] for b in fam.bounds], dtype=float)    # None -> nan
        hi = np.array([b[2] for b in fam.bounds], dtype=float)
        lo[np.isnan(lo)] = -INF
        hi[np.isnan(hi)] = INF
        if not self.relax:
            np.maximum.at(cols.lower, at, lo)
            np.minimum.at(cols.upper, at, hi)
            return
        # keys may repeat, so the rows are numbered
        m = len(at)
        first = rows.n
        rows.triplets(first + np.arange(m), at, np.ones(m))
        rows.add_slacks(fam, lo, hi, [col_key[c] for c in at], first)
        rows.block(fam.name, lo, hi, list(range(m)))

    def _add_rows(self, fam: Family, rows: "_Rows") -> None:
        """A row family: its terms as triplets, its bounds less its constants."""
        m = len(fam.keys)
        if not m:
            return
        if len(set(fam.keys)) != m:
            seen = set()
            for key in fam.keys:
                if key in seen:
                    raise RuntimeError(f"row {fam.name}{key} added twice")
                seen.add(key)
        const = np.array(fam.const, dtype=float)
        lo = np.array(fam.lo, dtype=float)
        hi = np.array(fam.hi, dtype=float)
        lo = np.where(np.isnan(lo), -INF, lo - const)
        hi = np.where(np.isnan(hi), INF, hi - const)
        lens = np.array(fam.row_len, dtype=np.int64)
        if fam.terms:
            tv = np.array(fam.terms, dtype=float).reshape(-1, 2)   # None column -> nan
            r = np.repeat(np.arange(m, dtype=np.int64), lens)
            keep = (tv[:, 0] != 0) & ~np.isnan(tv[:, 1])
            rows.triplets(rows.n + r[keep], tv[keep, 1].astype(np.int64), tv[keep, 0])
        if self.relax and fam.relaxable:
            rows.add_slacks(fam, lo, hi, fam.keys, rows.n)
        rows.block(fam.name, lo, hi, fam.keys)

    def _with_slacks(self, cols: "_Columns", n_slack: int) -> "_Columns":
        """Relax mode: the slack columns after the variables (>= 0, continuous)."""
        if not self.relax:
            return cols
        n = self.n_cols
        cols.ranges["slack"] = (n, n + n_slack)
        cols.index["slack"] = list(range(n_slack))
        cols.binary["slack"] = False
        return _Columns(lower=np.concatenate([cols.lower, np.zeros(n_slack)]),
                        upper=np.concatenate([cols.upper, np.full(n_slack, INF)]),
                        integer=np.concatenate([cols.integer, np.zeros(n_slack, dtype=bool)]),
                        ranges=cols.ranges, index=cols.index, binary=cols.binary)

    def _objective(self, n_total: int) -> Tuple[np.ndarray, float, bool]:
        """(cost per column, offset, maximise?): the money, or in relax mode the total slack."""
        cost = np.zeros(n_total)
        if self.relax:
            cost[self.n_cols:] = 1.0
            return cost, 0.0, False
        if self.objective_terms:
            tv = np.array(self.objective_terms, dtype=float).reshape(-1, 2)
            keep = (tv[:, 0] != 0) & ~np.isnan(tv[:, 1])
            np.add.at(cost, tv[keep, 1].astype(np.int64), tv[keep, 0])
        return cost, float(self.objective_const), True

    def _column_keys(self) -> List[tuple]:
        """Column -> its variable key ``(*asset, t)``."""
        out: List[tuple] = []
        for name in self._var_start:
            out.extend(self.var_keys[name])
        return out
