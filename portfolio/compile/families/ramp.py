"""Ramp limit on a storage's net output.

For storage k with ramp_mw_per_h = r and t >= 1 (c = total charge):

    -r*dt <= (d[t] - c[t]) - (d[t-1] - c[t-1]) <= r*dt      (family ``ramp``)

Nothing binds the first step (the state before the horizon is unknown).
"""

from __future__ import annotations

from ..context import Ctx, Origin
from ._common import charge_terms, discharge_terms, fmt


def build(ctx: Ctx) -> None:
    for k, s in ctx.p.storages.items():
        r = s.ramp_mw_per_h
        if r is None:
            continue
        lim = r * ctx.dt
        o = Origin(s.where("ramp_mw_per_h"), f'ramp limit of storage "{k}" ({fmt(r)} MW/h)')
        for t in range(1, ctx.T):
            terms = (discharge_terms(ctx, k, t) + charge_terms(ctx, k, t, -1.0)
                     + discharge_terms(ctx, k, t - 1, -1.0) + charge_terms(ctx, k, t - 1))
            ctx.row("ramp", (k, t), terms, lo=-lim, hi=lim, origin=o)
