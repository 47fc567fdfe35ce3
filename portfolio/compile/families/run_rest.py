"""Minimum run and minimum rest.

R = round(min_run_h / dt) steps (applies to charge runs and to discharge
runs), D = round(min_rest_h / dt) steps.  u[t] is a mode binary of
:mod:`.modes` (uc or ud); before the horizon the storage is idle and rested
(u[-1] = 0).

Variant "tight" (turn-on/turn-off formulation: Rajan & Takriti 2005;
Carrion & Arroyo 2006; Morales-Espana et al. 2013).  Per mode, start-up
v[t] and shut-down w[t] in [0, 1]:

    u[t] - u[t-1] = v[t] - w[t]                  (family ``mode_switch``)
    v[t] <= 1 - u[t-1],   w[t] <= u[t-1]         (family ``mode_switch_limit``)
    sum_{tau=t-R+1..t} v[tau] <= u[t]            (family ``min_run``)
    sum_{tau=t-D+1..t} (wc[tau] + wd[tau]) <= 1 - uc[t] - ud[t]
                                                 (family ``min_rest``)

With u binary the first two families make v and w exactly the 0/1 start and
stop indicators, so they need not be declared integer.  A run cut by the
horizon end is allowed: nothing asks it to continue past T-1.

Variant "plain" (the naive form, no start/stop variables):

    u[t] - u[t-1] <= u[tau]                   for tau in t+1..t+R-1   (``min_run``)
    u[t-1] - u[t] + uc[tau] + ud[tau] <= 1    for tau in t..t+D-1     (``min_rest``)

Both variants admit exactly the same schedules (tests check the optimum).
"""

from __future__ import annotations

import math

from ..context import Ctx, Origin
from ._common import fmt


def _steps(hours: float, dt: float) -> int:
    """Whole steps, rounded UP (40 min on 30-min steps is 2 steps), as lint P310 says."""
    return int(math.ceil(hours / dt - 1e-9)) if hours > 0 else 0


def build(ctx: Ctx) -> None:
    p = ctx.p
    bins = ctx.expr.get("mode_bins", {})
    todo = []
    for k, s in p.storages.items():
        R, D = _steps(s.min_run_h, ctx.dt), _steps(s.min_rest_h, ctx.dt)
        b = bins.get(k)
        if b is None or "one" in b or (R <= 1 and D <= 0):
            continue
        modes = [(m, b[m]) for m in ("charge", "discharge") if b.get(m)]
        todo.append((k, s, R, D, modes))
    if not todo:
        return
    if ctx.variant == "plain":
        _plain(ctx, todo)
    else:
        _tight(ctx, todo)


def _origins(k, s):
    o_run = Origin(s.where("min_run_h"), f'minimum run of storage "{k}" ({fmt(s.min_run_h)} h)')
    o_rest = Origin(s.where("min_rest_h"), f'minimum rest of storage "{k}" ({fmt(s.min_rest_h)} h)')
    return o_run, o_rest


def _tight(ctx: Ctx, todo) -> None:
    assets = [(k, m) for k, _, _, _, modes in todo for m, _ in modes]
    ctx.add_var("mode_start", assets, ub=1.0)
    ctx.add_var("mode_stop", assets, ub=1.0)
    for k, s, R, D, modes in todo:
        o_run, o_rest = _origins(k, s)
        o_sw = Origin(s.span, f'start and stop of storage "{k}"')
        for m, ub in modes:
            a = (k, m)
            for t in ctx.steps:
                u, up = ctx.v(ub, k, t), ctx.v(ub, k, t - 1)
                v, w = ctx.v("mode_start", a, t), ctx.v("mode_stop", a, t)
                ctx.row("mode_switch", (k, m, t), [(1.0, u), (-1.0, up), (-1.0, v), (1.0, w)],
                        lo=0.0, hi=0.0, origin=o_sw, relaxable=False)
                ctx.row("mode_switch_limit", (k, m, "start", t), [(1.0, v), (1.0, up)], hi=1.0,
                        origin=o_sw, relaxable=False)
                ctx.row("mode_switch_limit", (k, m, "stop", t), [(1.0, w), (-1.0, up)], hi=0.0,
                        origin=o_sw, relaxable=False)
                if R > 1:
                    terms = [(1.0, ctx.v("mode_start", a, tau)) for tau in range(max(0, t - R + 1), t + 1)]
                    ctx.row("min_run", (k, m, t), terms + [(-1.0, u)], hi=0.0, origin=o_run)
        if D > 0:
            for t in ctx.steps:
                terms = []
                for m, ub in modes:
                    terms += [(1.0, ctx.v("mode_stop", (k, m), tau))
                              for tau in range(max(0, t - D + 1), t + 1)]
                    terms.append((1.0, ctx.v(ub, k, t)))
                ctx.row("min_rest", (k, t), terms, hi=1.0, origin=o_rest)


def _plain(ctx: Ctx, todo) -> None:
    T = ctx.T
    for k, s, R, D, modes in todo:
        o_run, o_rest = _origins(k, s)
        for m, ub in modes:
            for t in ctx.steps:
                u, up = ctx.v(ub, k, t), ctx.v(ub, k, t - 1)
                if R > 1:
                    for tau in range(t + 1, min(T, t + R)):
                        ctx.row("min_run", (k, m, t, tau),
                                [(1.0, u), (-1.0, up), (-1.0, ctx.v(ub, k, tau))], hi=0.0, origin=o_run)
                if D > 0 and t >= 1:
                    for tau in range(t, min(T, t + D)):
                        terms = [(1.0, up), (-1.0, u)]
                        terms += [(1.0, ctx.v(b, k, tau)) for _, b in modes]
                        ctx.row("min_rest", (k, m, t, tau), terms, hi=1.0, origin=o_rest)
