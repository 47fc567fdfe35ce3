"""Inflows (e.g. solar beside a battery): where the available power goes.

For inflow i with available power a[i,t] (MW, its profile) and targets
(the site bus "site" and/or storages k):

    used_bus[i,t] + sum_k inflow_to[i,k,t] + curtailed[i,t] = a[i,t]
                                                   (family ``inflow_split``)
    curtailed[i,t] <= 0   unless curtailment is allowed
                                                   (family ``curtail_limit``)

Power fed straight into a storage counts as that storage's charge (it is
bounded by the storage's ``charge_limit`` and takes its charge efficiency).
"""

from __future__ import annotations

from ..context import Ctx, Origin


def build(ctx: Ctx) -> None:
    p = ctx.p
    for name, i in p.inflows.items():
        avail = p.profile(i.profile)
        o = Origin(i.span, f'inflow "{name}" must go somewhere (used or curtailed)')
        for t in ctx.steps:
            terms = [(1.0, ctx.v("used_bus", name, t)), (1.0, ctx.v("curtailed", name, t))]
            terms += [(1.0, ctx.v("inflow_to", (name, k), t)) for k in i.targets if k != "site"]
            ctx.row("inflow_split", (name, t), terms, lo=float(avail[t]), hi=float(avail[t]),
                    origin=o, relaxable=False)
        if not i.curtail_allowed:
            o = Origin(i.where("curtail_allowed"), f'inflow "{name}" may not be curtailed')
            for t in ctx.steps:
                ctx.bound("curtail_limit", "curtailed", name, t, hi=0.0, origin=o)
