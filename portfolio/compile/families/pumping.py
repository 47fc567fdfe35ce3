"""Pumping: what a pump route lifts from its lower store into its upper one.

A pump route ``route LOWER pump -> UPPER [factor F]`` makes the upper store's
charge its pump: the power it draws (from its site, or from supplies fed
straight into it) is the pump's grid power, bounded by its ``charge max`` and
converted to stored energy at its charge efficiency; its mode rules (exclusive
modes, minimum output when running, run and rest) make a reversible machine
that never pumps and generates in the same step.  The water it lifts leaves the
lower store.  With c[u,t] the upper store's total charge (MW):

    pumped[r,t] = eta_charge[u] * c[u,t] / F              (family ``pumping``, identity)

``pumped`` is the route's flow (source units, MW): the lower store's balance
subtracts pumped[r,t]*dt, and what arrives, F*pumped[r,t]*dt = eta_charge[u]*c[u,t]*dt,
is the upper store's charge term, so the upper balance takes nothing more from
the route (:func:`portfolio.compile.expressions.balance_routes`).  A pump route
has no delay, maximum or efficiency of its own (the checker warns and drops them).
"""

from __future__ import annotations

from .. import expressions as E
from ..context import Ctx, Origin


def build(ctx: Ctx) -> None:
    p = ctx.p
    for r in ctx.topo.routes:
        if r.kind != "pump":
            continue
        lift = E.pump_lift(p, ctx.topo, r)
        o = Origin(r.span, f'pump route "{r.name}": the water the charge of "{r.target}" '
                           f'lifts from "{r.source}"')
        for t in ctx.steps:
            terms = [(1.0, ctx.v(E.PUMPED, r.name, t))] + E.terms(ctx, lift, t, -1.0)
            ctx.row("pumping", (r.name, t), terms, lo=0.0, hi=0.0, origin=o, relaxable=False)
