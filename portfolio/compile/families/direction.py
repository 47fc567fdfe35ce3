"""Connection direction: never import and export in the same step.

For connection c and step t with a binary y[c,t] (1 = exporting):

    conn_export[c,t] <= Me[c,t] * y[c,t]          (family ``direction_export``)
    conn_import[c,t] <= Mi[c,t] * (1 - y[c,t])    (family ``direction_import``)

The binary is added at every step when ``Connection.exclusive`` is set, and
AUTOMATICALLY at every step where the buy price is below the sell price:
otherwise the LP would import and export at once for a fake profit.

Me and Mi are what the connection can carry: its limits, or where lower,
what the assets behind it can move (:func:`portfolio.reach.connection_reach`):

    Me[c,t] = sum_{s at c} min(Site.export_max, sum_k discharge_max[k] + sum_i a[i,t])
    Mi[c,t] = sum_{s at c} min(Site.import_max, sum_k charge_max[k] + sum_j demand[j,t])

(k storages, i supplies delivering to the site, j demands at s).  These bound
the net flow of each site, which is all the meter sees, so they never cut
off a feasible schedule.  Both rows are identities (never relaxed).
"""

from __future__ import annotations


from ...reach import connection_reach
from ..context import Ctx, Origin


def build(ctx: Ctx) -> None:
    p = ctx.p
    needed = {}
    for cname, c in p.connections.items():
        if c.exclusive:
            needed[cname] = list(ctx.steps)
        else:
            sell = p.price(c.sell)
            buy = p.price(c.buy)
            steps = [t for t in ctx.steps if buy[t] < sell[t]]
            if steps:
                needed[cname] = steps
    ctx.expr["direction_steps"] = needed
    if not needed:
        return
    ctx.add_var("export_on", list(needed), binary=True)
    for cname, steps in needed.items():
        c = p.connections[cname]
        # in relax mode the declared limits may give: the big-M may not lean on them
        me, mi = connection_reach(p, ctx.topo, cname, declared=not ctx.relax)
        if c.exclusive:
            o = Origin(c.where("exclusive"), f'connection "{cname}" may not import and export at once')
        else:
            where = c.buy.span if c.buy is not None else c.span
            o = Origin(where, f'connection "{cname}": buy price below sell price, '
                              f'so import and export are kept apart')
        for t in steps:
            y = ctx.v("export_on", cname, t)
            ctx.row("direction_export", (cname, t),
                    [(1.0, ctx.v("conn_export", cname, t)), (-float(me[t]), y)],
                    hi=0.0, origin=o, relaxable=False)
            ctx.row("direction_import", (cname, t),
                    [(1.0, ctx.v("conn_import", cname, t)), (float(mi[t]), y)],
                    hi=float(mi[t]), origin=o, relaxable=False)
