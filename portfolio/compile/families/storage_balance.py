"""Energy balance of every storage, state-of-charge bounds, start and end.

soc[k,t] is the content at the END of step t; soc[k,-1] = soc_start.
With a = (1 - loss_per_h) ** dt (the loss applies to the content carried
into a step), c = total charge (draw from the site plus direct supplies), d = discharge,
q = spill, n = natural supply (MW, the storage's supply series):

    soc[t] = a*soc[t-1] + eta_charge*c[t]*dt - d[t]*dt/eta_discharge - q[t]*dt
             + n[t]*dt + routes_in[t] - transfers_out[t] - pumped_out[t]
                                              (family ``storage_balance``, identity)

    soc_min <= soc[t] <= soc_max              (families ``soc_min``, ``soc_max``)
    end rule:  at_least: soc[T-1] >= end_value;  equal: soc[T-1] = end_value
                                              (family ``end_rule``)

routes_in / transfers_out are the routes' in[r,t] and out[r,t] (:mod:`.routes`, MWh
per step, from :mod:`portfolio.compile.expressions`).  pumped_out is what a pump
route from this store lifts: out[r,t] = eta_charge[u]*c[u,t]*dt/factor[r] for the
upper store u it feeds; a pump route adds nothing to u's routes_in, since u's own
charge term eta_charge*c*dt already is the water arriving (``E.balance_routes``).  A window of a longer
horizon (:mod:`portfolio.windows`) carries in what was released before it
and arrives inside it as fixed MWh per step (``Storage.arriving``, per
route): a constant on the right-hand side of those steps, whose row then
points at the route's span.  Natural
supply cannot be curtailed: a full store must spill it (infeasible when spill
is not allowed, which the relaxation then reports).
"""

from __future__ import annotations

from ...model import END_AT_LEAST, END_EQUAL
from .. import expressions as E
from ..context import Ctx, Origin
from ._common import charge_terms, discharge_terms, fmt


def _routes_in(ctx: Ctx, routes, t: int):
    """MWh arriving at a store in step ``t`` along ``routes``: (terms, constant)."""
    terms, const = [], 0.0
    for r in routes:
        tt, cc = E.route_arriving_terms(ctx, r, t)
        terms += tt
        const += cc
    return terms, const


def _carried_in(k: str, s, into) -> list:
    """(route, MWh per step) of the water carried into a window (``Storage.arriving``)."""
    by_name = {r.name: r for r in into}
    out = []
    for name, mwh in s.arriving:
        r = by_name.get(name)
        if r is None:
            raise ValueError(f'storage "{k}": water arriving along "{name}", which is no route into it')
        out.append((r, tuple(float(x) for x in mwh)))
    return out


def build(ctx: Ctx) -> None:
    p = ctx.p
    dt = ctx.dt
    for k, s in p.storages.items():
        into, leaving = E.balance_routes(ctx.topo, k)
        a = (1.0 - s.loss_per_h) ** dt
        natural = p.profile(s.supply) if s.supply is not None else None
        o = Origin(s.span, f'energy balance of storage "{k}"')
        carried = _carried_in(k, s, into)
        for t in ctx.steps:
            terms = [(1.0, ctx.v(E.SOC, k, t))]
            const = 0.0
            if t > 0:
                terms.append((-a, ctx.v("soc", k, t - 1)))
            else:
                const = a * s.soc_start
            terms += charge_terms(ctx, k, t, -s.eta_charge * dt)
            terms += discharge_terms(ctx, k, t, dt / s.eta_discharge)
            if ctx.has("spill", k):
                terms.append((dt, ctx.v("spill", k, t)))
            if natural is not None:
                const += float(natural[t]) * dt
            rin, rconst = _routes_in(ctx, into, t)
            terms += [(-c, v) for c, v in rin]
            const += rconst
            row_origin = o
            for r, mwh in carried:
                if t < len(mwh):
                    const += mwh[t]
                    row_origin = Origin(r.span, f'water in transit on route "{r.name}" into storage "{k}"')
            terms += [term for r in leaving for term in E.route_out_terms(ctx, r, t)]
            # soc - (supplies) = const  ->  rhs = const
            ctx.row("storage_balance", (k, t), terms, lo=const, hi=const, origin=row_origin,
                    relaxable=False)
        smax = s.soc_max
        omax = Origin(s.where("soc_max") if "soc_max" in s.spans else s.where("energy"),
                      f'upper state-of-charge limit of storage "{k}" ({fmt(smax)} MWh)')
        omin = Origin(s.where("soc_min"),
                      f'lower state-of-charge limit of storage "{k}" ({fmt(s.soc_min)} MWh)')
        for t in ctx.steps:
            ctx.bound("soc_max", "soc", k, t, hi=smax, origin=omax)
            if s.soc_min > 0:
                ctx.bound("soc_min", "soc", k, t, lo=s.soc_min, origin=omin)
        if ctx.T and s.end_rule in (END_AT_LEAST, END_EQUAL):
            where = s.where("end_value") if "end_value" in s.spans else s.where("end_rule")
            word = "at least" if s.end_rule == END_AT_LEAST else "exactly"
            o = Origin(where, f'storage "{k}" must end with {word} {fmt(s.end_value)} MWh')
            hi = s.end_value if s.end_rule == END_EQUAL else None
            ctx.bound("end_rule", "soc", k, ctx.T - 1, lo=s.end_value, hi=hi, origin=o)
