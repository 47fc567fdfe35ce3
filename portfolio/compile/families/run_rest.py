"""Minimum run and minimum rest, with the state carried in from before the horizon.

R = ceil(min_run_h / dt) steps (applies to charge runs and to discharge
runs), D = ceil(min_rest_h / dt) steps.  u[t] is a mode binary of
:mod:`.modes` (uc or ud).  u[-1] is a constant: 1 for the mode the store
was running in before the horizon (``Storage.prior_mode``), else 0; a store
with no declared state is idle and rested.

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
horizon end is allowed: nothing asks it to continue past T-1.  A store that
was running at t = -1 has no start at t = 0 (v[0] <= 1 - 1), and stopping at
t = 0 (w[0] = 1) starts a rest.

Variant "plain" (the naive form, no start/stop variables):

    u[t] - u[t-1] <= u[tau]                   for tau in t+1..t+R-1   (``min_run``)
    u[t-1] - u[t] + uc[tau] + ud[tau] <= 1    for tau in t..t+D-1     (``min_rest``;
                                              t >= 1, and t = 0 after a run)

Both variants, what was carried in (p = whole steps already in that state,
rounded up; none when the state is not declared or has no duration):

    u_m[t] = 1 for t < R - p   when running in mode m   (``carried_run``)
    uc[t] + ud[t] = 0 for t < D - p   when idle          (``carried_rest``)

Both variants admit exactly the same schedules (tests check the optimum).
"""

from __future__ import annotations

from ..context import Ctx, Origin
from ...model import PRIOR_IDLE
from ._common import fmt, mode_before, prior_origin, steps_before, whole_steps


def build(ctx: Ctx) -> None:
    p = ctx.p
    bins = ctx.expr.get("mode_bins", {})
    todo = []
    for k, s in p.storages.items():
        R, D = whole_steps(s.min_run_h, ctx.dt), whole_steps(s.min_rest_h, ctx.dt)
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
    _carried(ctx, todo)


def _origins(k, s):
    o_run = Origin(s.where("min_run_h"), f'minimum run of storage "{k}" ({fmt(s.min_run_h)} h)')
    o_rest = Origin(s.where("min_rest_h"), f'minimum rest of storage "{k}" ({fmt(s.min_rest_h)} h)')
    o_prior = prior_origin(k, s) if s.prior_mode is not None else None
    return o_run, o_rest, o_prior


def _tight(ctx: Ctx, todo) -> None:
    assets = [(k, m) for k, _, _, _, modes in todo for m, _ in modes]
    ctx.add_var("mode_start", assets, ub=1.0)
    ctx.add_var("mode_stop", assets, ub=1.0)
    for k, s, R, D, modes in todo:
        o_run, o_rest, o_prior = _origins(k, s)
        o_sw = Origin(s.span, f'start and stop of storage "{k}"')
        before = mode_before(s)
        for m, ub in modes:
            a = (k, m)
            for t in ctx.steps:
                u, up = ctx.v(ub, k, t), ctx.v(ub, k, t - 1)
                c0 = before[m] if t == 0 else 0.0      # u[-1], a constant
                o = o_prior if c0 else o_sw
                v, w = ctx.v("mode_start", a, t), ctx.v("mode_stop", a, t)
                ctx.row("mode_switch", (k, m, t), [(1.0, u), (-1.0, up), (-1.0, v), (1.0, w)],
                        const=-c0, lo=0.0, hi=0.0, origin=o, relaxable=False)
                ctx.row("mode_switch_limit", (k, m, "start", t), [(1.0, v), (1.0, up)], const=c0, hi=1.0,
                        origin=o, relaxable=False)
                ctx.row("mode_switch_limit", (k, m, "stop", t), [(1.0, w), (-1.0, up)], const=-c0, hi=0.0,
                        origin=o, relaxable=False)
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
        o_run, o_rest, o_prior = _origins(k, s)
        before = mode_before(s)
        for m, ub in modes:
            for t in ctx.steps:
                u, up = ctx.v(ub, k, t), ctx.v(ub, k, t - 1)
                c0 = before[m] if t == 0 else 0.0      # u[-1], a constant
                if R > 1:
                    for tau in range(t + 1, min(T, t + R)):
                        ctx.row("min_run", (k, m, t, tau),
                                [(1.0, u), (-1.0, up), (-1.0, ctx.v(ub, k, tau))], const=-c0, hi=0.0,
                                origin=o_prior if c0 else o_run)
                if D > 0 and (t >= 1 or c0):
                    for tau in range(t, min(T, t + D)):
                        terms = [(1.0, up), (-1.0, u)]
                        terms += [(1.0, ctx.v(b, k, tau)) for _, b in modes]
                        ctx.row("min_rest", (k, m, t, tau), terms, const=c0, hi=1.0,
                                origin=o_prior if c0 else o_rest)


def _carried(ctx: Ctx, todo) -> None:
    """A run or a rest begun before the horizon binds its first steps (both variants)."""
    for k, s, R, D, modes in todo:
        p = steps_before(s, ctx.dt)
        if s.prior_mode is None or p is None:
            continue
        o = prior_origin(k, s)
        if s.prior_mode == PRIOR_IDLE:
            for t in range(min(ctx.T, D - p)):
                ctx.row("carried_rest", (k, t), [(1.0, ctx.v(b, k, t)) for _, b in modes], hi=0.0, origin=o)
            continue
        ub = dict(modes).get(s.prior_mode)
        if ub is None:
            continue      # the checker refuses a carried-in mode the store cannot run
        for t in range(min(ctx.T, R - p)):
            ctx.row("carried_run", (k, s.prior_mode, t), [(1.0, ctx.v(ub, k, t))], lo=1.0, origin=o)
