"""Power limits of every storage.

For storage k and step t (c = total charge = charge_site + direct supplies):

    c[k,t] <= charge_max[k]          (family ``charge_limit``, or
                                      ``charge_limit_with_supplies`` as a row)
    d[k,t] <= discharge_max[k]                   (family ``discharge_limit``)
    q[k,t] <= spill_max[k]   if spill allowed    (family ``spill_limit``)
    q[k,t] <= 0              if spill not allowed (same family; origin: the
                                                  storage's spill setting)

A limit on a single variable is a variable bound (a row only in relax mode);
``charge_limit`` is a row when supplies charge the storage directly.
"""

from __future__ import annotations

from ..context import Ctx, Origin
from ._common import charge_terms, fmt


def build(ctx: Ctx) -> None:
    for k, s in ctx.p.storages.items():
        o = Origin(s.where("charge_max"), f'charge limit of storage "{k}" ({fmt(s.charge_max)} MW)')
        if ctx.topo.supplies_into(k):
            for t in ctx.steps:
                ctx.row("charge_limit_with_supplies", (k, t), charge_terms(ctx, k, t), hi=s.charge_max, origin=o)
        else:
            for t in ctx.steps:
                ctx.bound("charge_limit", "charge_site", k, t, hi=s.charge_max, origin=o)
        o = Origin(s.where("discharge_max"),
                   f'discharge limit of storage "{k}" ({fmt(s.discharge_max)} MW)')
        for t in ctx.steps:
            ctx.bound("discharge_limit", "discharge", k, t, hi=s.discharge_max, origin=o)
        if ctx.has("spill", k):
            if not s.spill_allowed:
                o = Origin(s.where("spill_allowed"), f'storage "{k}" may not spill')
                hi = 0.0
            elif s.spill_max is not None:
                o = Origin(s.where("spill_max"), f'spill limit of storage "{k}" ({fmt(s.spill_max)} MW)')
                hi = s.spill_max
            else:
                continue
            for t in ctx.steps:
                ctx.bound("spill_limit", "spill", k, t, hi=hi, origin=o)
