"""Grid limits: site limits, the connection meter, connection limits, cap.

    site_export[s,t] <= Site.export_max        (family ``site_export_max``)
    site_import[s,t] <= Site.import_max        (family ``site_import_max``)
    conn_export[c,t] - conn_import[c,t]
        = sum_{s at c} (site_export[s,t] - site_import[s,t])
                                               (family ``connection_meter``, identity)
    conn_export[c,t] <= Connection.export_max  (family ``connection_export_max``)
    conn_import[c,t] <= Connection.import_max  (family ``connection_import_max``)
    sum_c conn_export[c,t] <= Cap.export_max   (family ``cap_export``)
    sum_c conn_import[c,t] <= Cap.import_max   (family ``cap_import``)

None means no limit.  Single-variable limits are bounds (rows in relax mode).

Every site and connection flow also gets the bound of what the assets behind
it can move (:mod:`portfolio.reach`; never relaxed, never binding on a
schedule written canonically), so a declared limit far above it (1e12 MW)
never reaches the solver as a number.
"""

from __future__ import annotations

from ...reach import connection_reach, site_reach
from .. import expressions as E
from ..context import Ctx, Origin
from ._common import fmt


def _implied(ctx: Ctx) -> None:
    p = ctx.p
    for sname in p.sites:
        out, inn = site_reach(p, ctx.topo, sname)
        for t in ctx.steps:
            ctx.implied("site_export", sname, t, out[t])
            ctx.implied("site_import", sname, t, inn[t])
    for cname in p.connections:
        out, inn = connection_reach(p, ctx.topo, cname)
        for t in ctx.steps:
            ctx.implied("conn_export", cname, t, out[t])
            ctx.implied("conn_import", cname, t, inn[t])


def build(ctx: Ctx) -> None:
    p = ctx.p
    _implied(ctx)
    for sname, s in p.sites.items():
        for side, lim in (("export", s.export_max), ("import", s.import_max)):
            if lim is None:
                continue
            o = Origin(s.where(f"{side}_max"), f'{side} limit of site "{sname}" ({fmt(lim)} MW)')
            for t in ctx.steps:
                ctx.bound(f"site_{side}_max", f"site_{side}", sname, t, hi=lim, origin=o)
    for cname, c in p.connections.items():
        net = E.meter("connection", cname)
        sites = [E.meter("site", s) for s in ctx.topo.sites_at(cname)]
        o = Origin(c.span, f'meter of connection "{cname}" (net of its sites)')
        for t in ctx.steps:
            terms = E.terms(ctx, net, t)
            for s in sites:
                terms += E.terms(ctx, s, t, -1.0)
            ctx.row("connection_meter", (cname, t), terms, lo=0.0, hi=0.0, origin=o,
                    relaxable=False)
        for side, lim in (("export", c.export_max), ("import", c.import_max)):
            if lim is None:
                continue
            o = Origin(c.where(f"{side}_max"),
                       f'{side} limit of connection "{cname}" ({fmt(lim)} MW)')
            for t in ctx.steps:
                ctx.bound(f"connection_{side}_max", f"conn_{side}", cname, t, hi=lim, origin=o)
    cap = p.cap
    if cap is not None:
        for side, lim in (("export", cap.export_max), ("import", cap.import_max)):
            if lim is None or not p.connections:
                continue
            o = Origin(cap.where(f"{side}_max"),
                       f'portfolio-wide {side} cap "{cap.name}" ({fmt(lim)} MW)')
            for t in ctx.steps:
                terms = [(1.0, ctx.v(f"conn_{side}", c, t)) for c in p.connections]
                ctx.row(f"cap_{side}", (t,), terms, hi=lim, origin=o)
