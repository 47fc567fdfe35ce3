"""Supplies (e.g. solar beside a battery): where the available power goes.

For supply i with available power a[i,t] (MW, its profile) and targets
(the site "site" and/or storages k):

    supply_site[i,t] + sum_k supply_to[i,k,t] + curtailed[i,t] = a[i,t]
                                                   (family ``supply_split``)
    curtailed[i,t] <= 0   unless curtailment is allowed
                                                   (family ``curtail_limit``)

Power fed straight into a storage counts as that storage's charge (it is
bounded by the storage's ``charge_limit`` and takes its charge efficiency).
"""

from __future__ import annotations

from .. import expressions as E
from ..context import Ctx, Origin


def build(ctx: Ctx) -> None:
    p = ctx.p
    for name, i in p.supplies.items():
        avail = p.profile(i.profile)
        used = E.supply_used(ctx.topo, name)
        o = Origin(i.span, f'supply "{name}" must go somewhere (used or curtailed)')
        for t in ctx.steps:
            terms = E.terms(ctx, used, t) + [(1.0, ctx.v(E.CURTAILED, name, t))]
            ctx.row("supply_split", (name, t), terms, lo=float(avail[t]), hi=float(avail[t]),
                    origin=o, relaxable=False)
        if not i.curtail_allowed:
            o = Origin(i.where("curtail_allowed"), f'supply "{name}" may not be curtailed')
            for t in ctx.steps:
                ctx.bound("curtail_limit", "curtailed", name, t, hi=0.0, origin=o)
