"""Objective: the money the portfolio makes over the horizon.

    maximise  sum_t dt * sum_c (sell[c,t] * conn_export[c,t] - buy[c,t] * conn_import[c,t])
              - sum_t dt * sum_k wear[k] * d[k,t]

sell/buy are the connections' price expressions (money per MWh); wear is
money per MWh discharged (grid side).  A window of a longer horizon
(:mod:`portfolio.windows`) adds ``+ stored_value[k] * soc[k,T-1]`` (money per
MWh left in store at its end, ``Storage.stored_value``; zero otherwise) and,
per delayed route r, ``+ transit_value[r] * (MWh released in its last D steps,
arriving after the end)`` (``Route.transit_value``, target units; zero
otherwise).  In relax mode the objective is
instead the total slack (minimised), see :mod:`portfolio.compile.context`.
"""

from __future__ import annotations

from .. import expressions as E
from ..context import Ctx


def build(ctx: Ctx) -> None:
    p = ctx.p
    dt = ctx.dt
    terms = []
    for cname, c in p.connections.items():
        sell = p.price(c.sell)
        buy = p.price(c.buy)
        for t in ctx.steps:
            terms.append((dt * float(sell[t]), ctx.v("conn_export", cname, t)))
            terms.append((-dt * float(buy[t]), ctx.v("conn_import", cname, t)))
    for k, s in p.storages.items():
        if s.wear and ctx.has("discharge", k):
            terms += [(-dt * s.wear, ctx.v("discharge", k, t)) for t in ctx.steps]
        if s.stored_value and ctx.T:
            terms.append((s.stored_value, ctx.v("soc", k, ctx.T - 1)))
    for r in p.routes:
        D = int(r.delay_steps)
        if r.transit_value and D > 0:
            gain = E.route_gain(r)
            for t in range(max(ctx.T - D, 0), ctx.T):
                terms += [(r.transit_value * gain * c, v) for c, v in E.route_out_terms(ctx, r, t)]
    ctx.objective(terms)
