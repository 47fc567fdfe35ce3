"""Routes: what one storage passes to another, after a delay.

For route r from source s to target g with delay D steps, factor f and
efficiency e, the outflow out[r,t] is measured in the source's stored MWh
per step:

    release:   out[r,t] = d[s,t] * dt / eta_discharge[s]
    spill:     out[r,t] = q[s,t] * dt
    transfer:  out[r,t] = x[r,t] * dt      (x: the ``transfer`` variable, MW)

Release and spill already leave the source's balance through d and q; a
transfer is subtracted from the source's balance here.  What arrives at the
target in step t (MWh, added to its balance) is

    in[r,t] = f * e * out[r,t-D]     for t >= D
    in[r,t] = in_transit[r] / D      for t <  D   (spread evenly; unused if D = 0)

and what is still on its way at the end is f * e * sum(out[r,t], t >= T-D).

``max_mw`` bounds the flow: out[r,t] / dt <= max_mw (families
``route_release_limit`` on d, ``route_spill_limit`` on q,
``route_transfer_limit`` on x; bounds, rows only in relax mode).

out[r,t] and in[r,t] are defined once, in :mod:`portfolio.compile.expressions`
(``route_flow``, ``route_out_terms``, ``route_arriving_terms``), where the
storage balance and the schedule tables read them too.
"""

from __future__ import annotations

from .. import expressions as E
from ..context import Ctx, Origin
from ._common import fmt


def build(ctx: Ctx) -> None:
    for r in ctx.topo.routes:
        if r.max_mw is None:
            continue
        flow = E.route_flow(ctx.p, r)      # out / dt = variable / divisor <= max_mw
        o = Origin(r.where("max_mw"), f'flow limit of route "{r.name}" ({fmt(r.max_mw)} MW)')
        for t in ctx.steps:
            ctx.bound(f"route_{r.kind}_limit", flow.variable, flow.asset, t,
                      hi=r.max_mw * flow.divisor, origin=o)
