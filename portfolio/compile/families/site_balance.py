"""Power balance of every site, each step.

    sum_i supply_site[i,t] + sum_k d[k,t] + site_import[s,t]
        = sum_k charge_site[k,t] + sum_j demand[j,t] + site_export[s,t]

over the supplies i, storages k and demands j at site s (family
``site_balance``, an identity; the demand profiles are data).
"""

from __future__ import annotations

import numpy as np

from .. import expressions as E
from ..context import Ctx, Origin


def build(ctx: Ctx) -> None:
    p, topo = ctx.p, ctx.topo
    for sname, site in p.sites.items():
        storages = topo.storages_at(sname)
        supplies = topo.site_supplies(sname)
        demand = np.zeros(ctx.T)
        for d in topo.demands_at(sname):
            demand = demand + p.profile(p.demands[d].profile)
        net_out = E.meter("site", sname)
        o = Origin(site.span, f'power balance of site "{sname}"')
        for t in ctx.steps:
            terms = [(1.0, ctx.v(E.SUPPLY_SITE, i, t)) for i in supplies]
            terms += [(1.0, ctx.v(E.DISCHARGE, k, t)) for k in storages]
            terms += [(-1.0, ctx.v(E.CHARGE_SITE, k, t)) for k in storages]
            terms += E.terms(ctx, net_out, t, -1.0)       # import - export
            ctx.row("site_balance", (sname, t), terms, lo=float(demand[t]), hi=float(demand[t]),
                    origin=o, relaxable=False)
