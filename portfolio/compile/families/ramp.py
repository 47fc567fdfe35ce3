"""Ramp limit on a storage's net output.

For storage k with ramp_mw_per_h = r and t >= 1 (c = total charge):

    -r*dt <= (d[t] - c[t]) - (d[t-1] - c[t-1]) <= r*dt      (family ``ramp``)

and at t = 0 only when the state before the horizon is declared
(``Storage.prior_mode``), from the net output carried in, n = prior_net_mw
(discharge positive, charge negative, idle 0):

    -r*dt <= (d[0] - c[0]) - n <= r*dt

Without a declared state nothing binds the first step.
"""

from __future__ import annotations

from ..context import Ctx, Origin
from ._common import charge_terms, discharge_terms, fmt, prior_origin


def build(ctx: Ctx) -> None:
    for k, s in ctx.p.storages.items():
        r = s.ramp_mw_per_h
        if r is None:
            continue
        lim = r * ctx.dt
        o = Origin(s.where("ramp_mw_per_h"), f'ramp limit of storage "{k}" ({fmt(r)} MW/h)')
        if s.prior_mode is not None and ctx.T:
            n = s.prior_net_mw
            o0 = prior_origin(k, s)
            o0 = Origin(o0.span, f"{o0.description}: ramp limit ({fmt(r)} MW/h) on the first step")
            terms = discharge_terms(ctx, k, 0) + charge_terms(ctx, k, 0, -1.0)
            ctx.row("ramp", (k, 0), terms, lo=n - lim, hi=n + lim, origin=o0)
        for t in range(1, ctx.T):
            terms = (discharge_terms(ctx, k, t) + charge_terms(ctx, k, t, -1.0)
                     + discharge_terms(ctx, k, t - 1, -1.0) + charge_terms(ctx, k, t - 1))
            ctx.row("ramp", (k, t), terms, lo=-lim, hi=lim, origin=o)
