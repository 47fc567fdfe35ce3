"""Small helpers shared by the family modules."""

from __future__ import annotations

from typing import List, Tuple

from ..context import Ctx


def charge_terms(ctx: Ctx, k: str, t: int, coef: float = 1.0) -> List[Tuple[float, object]]:
    """Total charge of storage ``k`` at ``t``: bus draw plus direct inflows."""
    terms = []
    v = ctx.v("charge_site", k, t)
    if v is not None:
        terms.append((coef, v))
    for i in ctx.expr["direct_inflows"].get(k, ()):
        terms.append((coef, ctx.v("inflow_to", (i, k), t)))
    return terms


def discharge_terms(ctx: Ctx, k: str, t: int, coef: float = 1.0) -> List[Tuple[float, object]]:
    v = ctx.v("discharge", k, t)
    return [(coef, v)] if v is not None else []


def can_charge(ctx: Ctx, k: str) -> bool:
    return ctx.p.storages[k].charge_max > 0


def can_discharge(ctx: Ctx, k: str) -> bool:
    return ctx.p.storages[k].discharge_max > 0


def fmt(x: float) -> str:
    return f"{x:g}"
