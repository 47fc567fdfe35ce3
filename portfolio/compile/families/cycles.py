"""Where a store may charge from, and how many equivalent full cycles it may make.

Charging from its sources only (``charge only from A, B``; ``Storage.charge_sources``):
for store k and every step t

    charge_site[k,t] <= 0                    (family ``grid_charge_off``, a bound)

so the store charges only through the supplies fed straight into it (each
named, :func:`portfolio.check.network.check_charging_sources`), still within
its charge limit and its mode rules, which count every charge alike.

Cycle limits (``cycles max N per day`` / ``cycles max N``): with
w[k,t] = d[k,t] / eta_discharge (MW drawn from the store to discharge,
:func:`portfolio.compile.expressions.drawn_for_discharge`) and usable capacity
U = soc_max - soc_min,

    sum_{t in day D} w[k,t]*dt <= N_day * U * share(D)   (family ``cycles_per_day``)
    sum_{t}          w[k,t]*dt <= N     * U              (family ``cycles_horizon``)

for every calendar day D of the horizon's zone; share(D) is the part of the
day the horizon covers (1 for a whole day, pro rata for a first or last day
cut by the horizon: :func:`~portfolio.compile.expressions.calendar_days`).

One window of a longer horizon (portfolio.windows) carries in, per day it
touches, the share the WHOLE horizon covers and the MWh drawn in that day
before the window (``Storage.cycles_days``), and the MWh drawn before it
(``Storage.cycles_drawn_mwh``): its rows are then the whole model's rows
with the committed steps moved to the right-hand side.
"""

from __future__ import annotations

from .. import expressions as E
from ..context import Ctx, Origin
from ._common import fmt


def build(ctx: Ctx) -> None:
    p = ctx.p
    days = None
    for k, s in p.storages.items():
        if s.charge_sources is not None:
            o = Origin(s.where("charge_sources"),
                       f'storage "{k}" charges only from {", ".join(s.charge_sources)}, never from its site')
            for t in ctx.steps:
                ctx.bound("grid_charge_off", E.CHARGE_SITE, k, t, hi=0.0, origin=o)
        if s.cycles_per_day is None and s.cycles_horizon is None:
            continue
        if not ctx.has(E.DISCHARGE, k):
            continue   # nothing is ever drawn to discharge: no row to write
        parts = E.drawn_for_discharge(p, k)
        u = s.usable_mwh
        if s.cycles_per_day is not None:
            if days is None:
                days = E.calendar_days(p.horizon)
            n = s.cycles_per_day
            carried = {day: (share, mwh) for day, share, mwh in s.cycles_days}
            for day, steps, share in days:
                share, before = carried.get(day, (share, 0.0))
                o = Origin(s.where("cycles_per_day"),
                           f'cycle limit of storage "{k}" ({fmt(n)} per day) on {day}'
                           + ("" if share >= 1.0 else f" ({fmt(round(share * 100, 4))} % of the day in the horizon)"))
                terms = [term for t in steps for term in E.terms(ctx, parts, t, ctx.dt)]
                ctx.row("cycles_per_day", (k, day), terms, hi=n * u * share - before, origin=o)
        if s.cycles_horizon is not None:
            n = s.cycles_horizon
            o = Origin(s.where("cycles_horizon"), f'cycle limit of storage "{k}" ({fmt(n)} over the horizon)')
            terms = [term for t in ctx.steps for term in E.terms(ctx, parts, t, ctx.dt)]
            ctx.row("cycles_horizon", (k,), terms, hi=n * u - s.cycles_drawn_mwh, origin=o)
