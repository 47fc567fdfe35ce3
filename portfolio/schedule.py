"""Per-asset schedule tables and the summary, from a solved model.

Tables are pandas DataFrames indexed by step start (tz-aware, in the
horizon's zone; index name ``time``).  Column sets are fixed by
:data:`COLUMNS` (the output contract, docs/outputs.md).

Conventions:

* solver noise: any value with magnitude below :data:`NOISE` (1e-9) is 0;
* a meter measures net flow, so a site's or connection's import and export
  in one step are netted (at most one of them is non-zero in the tables);
* ``mode`` is ``charge`` / ``discharge`` / ``idle`` with a tolerance of
  :data:`MODE_TOL` (1e-6 MW); a storage without the exclusive rule may, when
  that pays (negative prices with losses), do both: ``both``.

Revenue attribution across a shared connection: each step the connection's
net flow is valued at the sell price if it exports that step, else at the
buy price.  Each asset's net injection into its site (storage:
discharge - charge drawn from the site; supply: power delivered to the site;
demand: -demand) is valued at that same price, and a storage's wear is
subtracted from its own revenue.  So the revenues of the storages, supplies
and demands add up to the objective; a site's revenue is the sum of its
assets', a connection's revenue is its cashflow (before wear).
"""

from __future__ import annotations

from typing import Dict, Optional, Tuple

import numpy as np
import pandas as pd

NOISE = 1e-9
MODE_TOL = 1e-6

CAUTION = ("Schedules are advisory. The plant's own protection systems, manufacturer limits, the grid "
           "operator's instructions and local codes and licensed practice always come first. Reservoir "
           "spill affects people downstream.")

COLUMNS = {
    "storage": ["charge_mw", "discharge_mw", "soc_mwh", "spill_mw", "mode",
                "routed_in_mw", "routed_out_mw"],
    "supply": ["available_mw", "used_mw", "curtailed_mw"],
    "demand": ["demand_mw"],
    "site": ["import_mw", "export_mw"],
    "connection": ["import_mw", "export_mw", "sell_price", "buy_price", "cashflow"],
    "route": ["flow_mw", "arriving_mw"],
}

ASSET_KEYS = ("revenue", "energy_in_mwh", "energy_out_mwh", "equivalent_full_cycles",
              "curtailed_mwh", "spilled_mwh")


def clean(x: np.ndarray) -> np.ndarray:
    x = np.asarray(x, dtype=float).copy()
    x[np.abs(x) < NOISE] = 0.0
    return x


def _net(exp: np.ndarray, imp: np.ndarray) -> Tuple[np.ndarray, np.ndarray]:
    net = clean(exp - imp)
    return np.maximum(net, 0.0), np.maximum(-net, 0.0)


def _asset(revenue=0.0, e_in=0.0, e_out=0.0, efc=None, curtailed=0.0, spilled=0.0) -> dict:
    vals = (revenue, e_in, e_out, efc, curtailed, spilled)
    return {k: (None if v is None else float(v)) for k, v in zip(ASSET_KEYS, vals)}


def build_tables(built, values: Dict[str, np.ndarray]):
    """Return ``(tables, summary_parts)`` for a solution's value arrays.

    ``tables`` maps every asset name to its DataFrame; ``summary_parts`` has
    the per-asset summary sections.
    """
    p = built.portfolio
    T, dt = built.steps, built.step_hours
    index = pd.DatetimeIndex(p.horizon.index, name="time")

    def arr(name, asset):
        return np.asarray(built.array(values, name, asset), dtype=float)

    # -- storages and routes -------------------------------------------------
    charge, charge_site, discharge = {}, {}, {}
    direct = built.expr.get("direct_supplies", {})
    for k in p.storages:
        charge_site[k] = arr("charge_site", k)
        total = charge_site[k].copy()
        for i in direct.get(k, ()):
            total = total + arr("supply_to", (i, k))
        charge[k] = total
        discharge[k] = arr("discharge", k)

    route_flow, route_arrive, route_transit = {}, {}, {}
    received = {k: np.zeros(T) for k in p.storages}
    sent = {k: np.zeros(T) for k in p.storages}
    for r in p.routes:
        src = p.storages[r.source]
        if r.kind == "release":
            flow = discharge[r.source] / src.eta_discharge
        elif r.kind == "spill":
            flow = arr("spill", r.source)
        else:
            flow = arr("transfer", r.name)
        gain = r.factor * r.efficiency
        D = int(r.delay_steps)
        arrive_mwh = np.zeros(T)
        if D > 0:
            arrive_mwh[:min(D, T)] = r.in_transit / D
        if D < T:
            arrive_mwh[D:] = gain * flow[:T - D] * dt
        route_flow[r.name] = flow
        route_arrive[r.name] = arrive_mwh / dt
        route_transit[r.name] = gain * float(flow[max(T - D, 0):].sum()) * dt if D > 0 else 0.0
        if D > T:  # part of what was in transit at the start has not arrived by the end either
            route_transit[r.name] += r.in_transit * (D - T) / D
        received[r.target] = received.get(r.target, np.zeros(T)) + arrive_mwh
        sent[r.source] = sent[r.source] + flow * dt

    tables: Dict[str, pd.DataFrame] = {}
    for k, s in p.storages.items():
        c, d = clean(charge[k]), clean(discharge[k])
        mode = np.where(c > MODE_TOL, np.where(d > MODE_TOL, "both", "charge"),
                        np.where(d > MODE_TOL, "discharge", "idle"))
        tables[k] = pd.DataFrame({
            "charge_mw": c,
            "discharge_mw": d,
            "soc_mwh": clean(arr("soc", k)),
            "spill_mw": clean(arr("spill", k)),
            "mode": mode,
            "routed_in_mw": clean(received[k] / dt),
            "routed_out_mw": clean(sent[k] / dt),
        }, index=index)
    for r in p.routes:
        tables[r.name] = pd.DataFrame({"flow_mw": clean(route_flow[r.name]),
                                       "arriving_mw": clean(route_arrive[r.name])}, index=index)

    # -- supplies, demands ------------------------------------------------------
    supply_site = {}
    for name, f in p.supplies.items():
        avail = p.profile(f.profile)
        to_site = arr("supply_site", name)
        used = to_site.copy()
        for k in f.targets:
            if k != "site":
                used = used + arr("supply_to", (name, k))
        supply_site[name] = to_site
        tables[name] = pd.DataFrame({"available_mw": clean(avail), "used_mw": clean(used),
                                     "curtailed_mw": clean(arr("curtailed", name))}, index=index)
    for name, dmd in p.demands.items():
        tables[name] = pd.DataFrame({"demand_mw": clean(p.profile(dmd.profile))}, index=index)

    # -- sites and connections -------------------------------------------------
    for sname in p.sites:
        exp, imp = _net(arr("site_export", sname), arr("site_import", sname))
        tables[sname] = pd.DataFrame({"import_mw": imp, "export_mw": exp}, index=index)
    step_price = {}
    for cname, conn in p.connections.items():
        exp, imp = _net(arr("conn_export", cname), arr("conn_import", cname))
        sell, buy = p.price(conn.sell), p.price(conn.buy)
        cash = clean(dt * (sell * exp - buy * imp))
        step_price[cname] = np.where(exp > 0, sell, buy)
        tables[cname] = pd.DataFrame({"import_mw": imp, "export_mw": exp, "sell_price": sell,
                                      "buy_price": buy, "cashflow": cash}, index=index)

    # -- summary ---------------------------------------------------------------
    def site_price(sname):
        site = p.sites.get(sname)
        if site is None or site.connection not in step_price:
            return np.zeros(T)
        return step_price[site.connection]

    storages, supplies, demands, sites, connections, routes = {}, {}, {}, {}, {}, {}
    site_rev = {s: 0.0 for s in p.sites}
    for k, s in p.storages.items():
        pr = site_price(s.site)
        d, cs = clean(discharge[k]), clean(charge_site[k])
        rev = float(np.sum(dt * pr * (d - cs))) - s.wear * float(d.sum()) * dt
        e_out = float(d.sum()) * dt
        storages[k] = _asset(rev, float(clean(charge[k]).sum()) * dt, e_out,
                             e_out / s.energy if s.energy > 0 else None,
                             0.0, float(clean(arr("spill", k)).sum()) * dt)
        storages[k]["soc_end_mwh"] = float(clean(arr("soc", k))[-1]) if T else s.soc_start
        if s.site in site_rev:
            site_rev[s.site] += rev
    for name, f in p.supplies.items():
        pr = site_price(f.site)
        rev = float(np.sum(dt * pr * clean(supply_site[name])))
        t = tables[name]
        supplies[name] = _asset(rev, float(t["available_mw"].sum()) * dt, float(t["used_mw"].sum()) * dt,
                               None, float(t["curtailed_mw"].sum()) * dt, 0.0)
        if f.site in site_rev:
            site_rev[f.site] += rev
    for name, dmd in p.demands.items():
        pr = site_price(dmd.site)
        dem = clean(p.profile(dmd.profile))
        rev = -float(np.sum(dt * pr * dem))
        demands[name] = _asset(rev, float(dem.sum()) * dt, 0.0, None, 0.0, 0.0)
        if dmd.site in site_rev:
            site_rev[dmd.site] += rev
    for sname in p.sites:
        t = tables[sname]
        sites[sname] = _asset(site_rev[sname], float(t["import_mw"].sum()) * dt,
                              float(t["export_mw"].sum()) * dt, None, 0.0, 0.0)
    for cname in p.connections:
        t = tables[cname]
        connections[cname] = _asset(float(t["cashflow"].sum()), float(t["import_mw"].sum()) * dt,
                                    float(t["export_mw"].sum()) * dt, None, 0.0, 0.0)
    for r in p.routes:
        routes[r.name] = {"in_transit_end_mwh": float(clean(np.array([route_transit[r.name]]))[0]),
                          "flow_mwh": float(clean(np.array([route_flow[r.name].sum() * dt]))[0])}
    parts = {"storages": storages, "supplies": supplies, "demands": demands, "sites": sites,
             "connections": connections, "routes": routes}
    return tables, parts


def wide(tables: Dict[str, pd.DataFrame], index: Optional[pd.DatetimeIndex] = None) -> pd.DataFrame:
    """All tables in one frame, columns ``<name>.<column>``."""
    if not tables:
        return pd.DataFrame(index=index)
    frames = []
    for name, t in tables.items():
        f = t.copy()
        f.columns = [f"{name}.{c}" for c in t.columns]
        frames.append(f)
    out = pd.concat(frames, axis=1)
    out.index.name = "time"
    return out
