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

Publishes ``ctx.expr["route_out"][r]`` (a function t -> terms of out[r,t]),
``ctx.expr["route_in"][g]`` and ``ctx.expr["route_send"][s]`` (functions
t -> (terms, constant) of the MWh received / transfers sent at step t).
"""

from __future__ import annotations

from ..context import Ctx, Origin
from ._common import fmt


def _out_terms(ctx: Ctx, r):
    src = ctx.p.storages[r.source]
    dt = ctx.dt
    if r.kind == "release":
        return lambda t: ([(dt / src.eta_discharge, ctx.v("discharge", src.name, t))]
                          if ctx.has("discharge", src.name) and 0 <= t < ctx.T else [])
    if r.kind == "spill":
        return lambda t: ([(dt, ctx.v("spill", src.name, t))]
                          if ctx.has("spill", src.name) and 0 <= t < ctx.T else [])
    return lambda t: [(dt, ctx.v("transfer", r.name, t))] if 0 <= t < ctx.T else []


def build(ctx: Ctx) -> None:
    p = ctx.p
    route_out = {}
    received = {k: [] for k in p.storages}
    sent = {k: [] for k in p.storages}
    for r in p.routes:
        out = _out_terms(ctx, r)
        route_out[r.name] = out
        D = int(r.delay_steps)
        gain = r.factor * r.efficiency

        def arriving(t, out=out, D=D, gain=gain, r=r):
            if t >= D:
                return [(gain * c, v) for c, v in out(t - D)], 0.0
            return [], (r.in_transit / D if D > 0 else 0.0)

        received.setdefault(r.target, []).append(arriving)
        if r.kind == "transfer":
            sent.setdefault(r.source, []).append(out)
        if r.max_mw is not None:
            o = Origin(r.where("max_mw"), f'flow limit of route "{r.name}" ({fmt(r.max_mw)} MW)')
            src = p.storages[r.source]
            for t in ctx.steps:
                if r.kind == "release":
                    ctx.bound("route_release_limit", "discharge", src.name, t,
                              hi=r.max_mw * src.eta_discharge, origin=o)
                elif r.kind == "spill":
                    ctx.bound("route_spill_limit", "spill", src.name, t, hi=r.max_mw, origin=o)
                else:
                    ctx.bound("route_transfer_limit", "transfer", r.name, t, hi=r.max_mw, origin=o)

    def route_in(k):
        fns = received.get(k, [])

        def at(t):
            terms, const = [], 0.0
            for fn in fns:
                tt, cc = fn(t)
                terms += tt
                const += cc
            return terms, const
        return at

    def route_send(k):
        fns = sent.get(k, [])
        return lambda t: [term for fn in fns for term in fn(t)]

    ctx.expr["route_out"] = route_out
    ctx.expr["route_in"] = {k: route_in(k) for k in p.storages}
    ctx.expr["route_send"] = {k: route_send(k) for k in p.storages}
