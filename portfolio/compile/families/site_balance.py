"""Power balance of every site, each step.

    sum_i supply_site[i,t] + sum_k d[k,t] + site_import[s,t]
        = sum_k charge_site[k,t] + sum_j demand[j,t] + site_export[s,t]

over the supplies i, storages k and demands j at site s (family
``site_balance``, an identity; the demand profiles are data).
"""

from __future__ import annotations

import numpy as np

from ..context import Ctx, Origin


def build(ctx: Ctx) -> None:
    p = ctx.p
    for sname, site in p.sites.items():
        storages = [k for k, s in p.storages.items() if s.site == sname]
        supplies = [i for i, f in p.supplies.items() if f.site == sname and "site" in f.targets]
        demand = np.zeros(ctx.T)
        for d in p.demands.values():
            if d.site == sname:
                demand = demand + p.profile(d.profile)
        o = Origin(site.span, f'power balance of site "{sname}"')
        for t in ctx.steps:
            terms = [(1.0, ctx.v("supply_site", i, t)) for i in supplies]
            terms += [(1.0, ctx.v("discharge", k, t)) for k in storages]
            terms += [(-1.0, ctx.v("charge_site", k, t)) for k in storages]
            terms += [(1.0, ctx.v("site_import", sname, t)), (-1.0, ctx.v("site_export", sname, t))]
            ctx.row("site_balance", (sname, t), terms, lo=float(demand[t]), hi=float(demand[t]),
                    origin=o, relaxable=False)
