"""The compile context: variables, rows, bounds and their origins.

A constraint family module never touches Pyomo constraints directly.  It asks
the context for variables (:meth:`Ctx.v`), then adds

* rows (:meth:`Ctx.row`): ``lo <= body <= hi`` with ``body`` a linear
  expression built by :func:`lin`, or
* bounds (:meth:`Ctx.bound`): a limit on one variable entry.

Each row and bound names its family (the Pyomo component name) and an
:class:`Origin` (the Span of the setting it encodes plus a description).
:meth:`Ctx.materialize` turns the collected rows into one indexed Pyomo
``Constraint`` per family and applies the bounds to the variables.

In ``relax`` mode every relaxable row and every bound becomes a row with a
non-negative slack, the slack of each row remembers its origin, and the
objective is the total slack (see :mod:`portfolio.compile.families.objective`).
Identities (balances, definitions) are never relaxed: only limits and rules
can "give".
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Dict, Hashable, List, Optional, Sequence, Tuple

import pyomo.environ as pe
from pyomo.core.expr.numeric_expr import LinearExpression, MonomialTermExpression

from ..model import Portfolio
from ..spans import Span


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
    rows: list = field(default_factory=list, repr=False)   # (key, terms, const, lo, hi, origin_idx)
    bounds: list = field(default_factory=list, repr=False)  # (key, lo, hi, origin_idx)

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


def lin(terms: Sequence[Tuple[float, object]], const: float = 0.0):
    """A Pyomo LinearExpression from ``(coef, VarData)`` pairs and a constant.

    Terms with a zero coefficient or a ``None``/0 variable are dropped.  This
    is several times faster than building the same sum with operators.
    """
    args = [MonomialTermExpression((float(c), v)) for c, v in terms
            if c != 0 and v is not None and not isinstance(v, (int, float))]
    if const:
        args.append(float(const))
    return LinearExpression(args)


class Ctx:
    """Shared state while one Portfolio is compiled."""

    def __init__(self, p: Portfolio, variant: str = "tight", relax: bool = False):
        if variant not in ("tight", "plain"):
            raise ValueError(f"unknown formulation variant {variant!r} (use 'tight' or 'plain')")
        self.p = p
        self.variant = variant
        self.relax = relax
        self.T = int(p.horizon.steps)
        self.dt = float(p.horizon.step_hours)
        self.steps = range(self.T)
        self.m = pe.ConcreteModel(name=p.name or "portfolio")
        self.vars: Dict[str, pe.Var] = {}
        self.var_keys: Dict[str, List[tuple]] = {}
        self.var_blocks: Dict[str, Dict[Hashable, int]] = {}   # asset key -> first position
        self._var_data: Dict[str, Dict[Hashable, list]] = {}   # asset -> [VarData per step]
        self.binary_vars: List[str] = []
        self.families: Dict[str, Family] = {}
        self.expr: Dict[str, object] = {}        # expressions shared between modules
        self.objective_terms: List[Tuple[float, object]] = []
        self.objective_const = 0.0
        self.slack_info: List[tuple] = []   # (family, origin idx, side, row key)
        self.notes: List[str] = []               # formulation facts for the summary/docs

    # -- variables -------------------------------------------------------------
    def add_var(self, name: str, assets: Sequence[Hashable], binary: bool = False,
                ub: Optional[float] = None) -> Optional[pe.Var]:
        """A variable family indexed by ``(*asset, t)`` for every asset and step.

        ``assets`` are strings or tuples; the index order is asset-major, so the
        values of one asset are contiguous (see :meth:`Built.array`).
        """
        if name in self.vars:
            raise RuntimeError(f"variable family {name} defined twice")
        keys: List[tuple] = []
        blocks: Dict[Hashable, int] = {}
        for a in assets:
            at = a if isinstance(a, tuple) else (a,)
            blocks[a] = len(keys)
            keys.extend(at + (t,) for t in self.steps)
        self.var_keys[name] = keys
        self.var_blocks[name] = blocks
        if not keys:
            self.vars[name] = None
            return None
        domain = pe.Binary if binary else pe.NonNegativeReals
        var = pe.Var(keys, domain=domain, bounds=(0, ub) if ub is not None else None,
                     dense=True)
        setattr(self.m, name, var)
        self.vars[name] = var
        datas = list(var.values())
        self._var_data[name] = {a: datas[start:start + self.T] for a, start in blocks.items()}
        if binary:
            self.binary_vars.append(name)
        return var

    def has(self, name: str, asset: Hashable) -> bool:
        blocks = self.var_blocks.get(name)
        return blocks is not None and asset in blocks

    def v(self, name: str, asset: Hashable, t: int):
        """The VarData of ``name[asset, t]``; ``None`` if absent or ``t`` < 0."""
        if t < 0:
            return None
        per_asset = self._var_data.get(name)
        if per_asset is None:
            return None
        datas = per_asset.get(asset)
        if datas is None or t >= self.T:
            return None
        return datas[t]

    # -- families --------------------------------------------------------------
    def family(self, name: str, kind: str = "rows", relaxable: bool = True,
               var: Optional[str] = None) -> Family:
        fam = self.families.get(name)
        if fam is None:
            if hasattr(self.m, name) or name in self.vars:
                raise RuntimeError(f"family name {name} clashes with a model component")
            fam = Family(name, kind, relaxable, var)
            self.families[name] = fam
        return fam

    def row(self, family: str, key: tuple, terms, const: float = 0.0,
            lo: Optional[float] = None, hi: Optional[float] = None,
            origin: Optional[Origin] = None, relaxable: bool = True) -> None:
        """Add ``lo <= sum(terms) + const <= hi`` to ``family``."""
        fam = self.family(family, "rows", relaxable)
        if lo is None and hi is None:
            raise RuntimeError(f"row {family}{key} has no bound")
        oi = fam.origin_index(origin) if origin is not None else -1
        fam.rows.append((key, list(terms), float(const), lo, hi, oi))

    def bound(self, family: str, var: str, asset: Hashable, t: int,
              lo: Optional[float] = None, hi: Optional[float] = None,
              origin: Optional[Origin] = None) -> None:
        """A bound on one variable entry (a relaxable row in relax mode)."""
        if not self.has(var, asset):
            return
        fam = self.family(family, "bounds", True, var)
        if fam.var != var:
            raise RuntimeError(f"bound family {family} used for two variables")
        oi = fam.origin_index(origin) if origin is not None else -1
        at = asset if isinstance(asset, tuple) else (asset,)
        fam.bounds.append((at + (t,), lo, hi, oi))

    def origin_only(self, family: str, origin: Origin, kind: str = "rows") -> None:
        """Register an origin for a family whose rows carry none individually."""
        self.family(family, kind).origin_index(origin)

    def objective(self, terms, const: float = 0.0) -> None:
        self.objective_terms.extend(terms)
        self.objective_const += const

    # -- turning it all into Pyomo ---------------------------------------------
    def materialize(self) -> None:
        slack_rows: List[tuple] = []
        m = self.m
        if self.relax:
            n_slack = 0
            for fam in self.families.values():
                if fam.kind == "bounds":
                    n_slack += sum((b[1] is not None) + (b[2] is not None) for b in fam.bounds)
                elif fam.relaxable:
                    n_slack += sum((r[3] is not None) + (r[4] is not None) for r in fam.rows)
            m.slack = pe.Var(range(n_slack), domain=pe.NonNegativeReals, dense=True)
        slack = getattr(m, "slack", None)

        def with_slack(fam, terms, lo, hi, oi, key):
            terms = list(terms)
            if lo is not None:
                s = slack[len(slack_rows)]
                slack_rows.append((fam.name, oi, "lo", key))
                terms.append((1.0, s))
            if hi is not None:
                s = slack[len(slack_rows)]
                slack_rows.append((fam.name, oi, "hi", key))
                terms.append((-1.0, s))
            return terms

        for fam in self.families.values():
            if fam.kind == "bounds":
                var = self.vars[fam.var]
                if not self.relax:
                    for key, lo, hi, _ in fam.bounds:
                        vd = var[key]
                        if lo is not None and (vd.lb is None or lo > vd.lb):
                            vd.setlb(lo)
                        if hi is not None and (vd.ub is None or hi < vd.ub):
                            vd.setub(hi)
                    continue
                rows = {}
                for key, lo, hi, oi in fam.bounds:
                    # one row per bound call: keys may repeat, so number them
                    terms = with_slack(fam, [(1.0, var[key])], lo, hi, oi, key)
                    rows[len(rows)] = _relation(lin(terms), lo, hi)
                if rows:
                    setattr(m, fam.name, pe.Constraint(list(rows), rule=lambda _m, i, r=rows: r[i]))
                continue
            rows = {}
            for key, terms, const, lo, hi, oi in fam.rows:
                key = key[0] if isinstance(key, tuple) and len(key) == 1 else key
                if key in rows:
                    raise RuntimeError(f"row {fam.name}{key} added twice")
                if self.relax and fam.relaxable:
                    terms = with_slack(fam, terms, lo, hi, oi, key)
                body = lin(terms, const)
                rows[key] = _relation(body, lo, hi)
            if rows:
                setattr(m, fam.name,
                        pe.Constraint(list(rows), rule=lambda _m, *k, r=rows: r[k[0] if len(k) == 1 else k]))
        self.slack_info = slack_rows
        if self.relax:
            m.objective = pe.Objective(expr=lin([(1.0, slack[i]) for i in range(len(slack_rows))]),
                                       sense=pe.minimize)
        else:
            m.objective = pe.Objective(expr=lin(self.objective_terms, self.objective_const),
                                       sense=pe.maximize)


def _relation(body, lo, hi):
    if lo is not None and hi is not None:
        if lo == hi:
            return body == lo
        return (lo, body, hi)
    if lo is not None:
        return body >= lo
    return body <= hi
