"""Per-asset schedule tables and the summary, from a solved model.

Tables are pandas DataFrames indexed by step start (tz-aware, in the
horizon's zone; index name ``time``).  Column sets are fixed by
:mod:`portfolio.contract` (the output contract, docs/outputs.md): every
table is made through :func:`portfolio.contract.frame`.  Who is where comes
from the compiled model's topology (the network graph), and every quantity
the model's rows also use (total charge, route flows, meter flows) from
:mod:`portfolio.compile.expressions`, read through checked accessors.

Conventions:

* solver noise: any value with magnitude below :data:`NOISE` (1e-9) is 0;
* a meter measures net flow, so a site's or connection's import and export
  in one step are netted (at most one of them is non-zero in the tables);
* ``mode`` is ``charge`` / ``discharge`` / ``idle`` with a tolerance of
  :data:`MODE_TOL` (1e-6 MW); a storage without the exclusive rule may, when
  that pays (negative prices with losses), do both: ``both``.

Net value attribution across a shared connection: each step the connection's
net flow is valued at the sell price if it exports that step, else at the
buy price.  Each asset's net injection into its site (storage:
discharge - charge drawn from the site; supply: power delivered to the site;
demand: -demand) is valued at that same price, and a storage's wear is
subtracted from its own net value (``net_value``: money the asset brings,
negative when it costs, as a demand does).  So the net values of the
storages, supplies and demands add up to the objective; a site's is the sum
of its assets', a connection's is its cashflow (before wear).  A storage's
average charge and discharge prices are weighted by the same flows at the
same price.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Dict, Optional, Tuple

import numpy as np
import pandas as pd

from . import units as U
from .compile import expressions as E
from .contract import ASSET_GROUPS, ASSET_KEYS, COLUMNS, ROUTE_KEYS, STORAGE_KEYS, frame

NOISE = 1e-9
MODE_TOL = 1e-6


def clean(x: np.ndarray) -> np.ndarray:
    x = np.asarray(x, dtype=float).copy()
    x[np.abs(x) < NOISE] = 0.0
    return x


def _net(net: np.ndarray) -> Tuple[np.ndarray, np.ndarray]:
    """A meter's net export split into (export, import), at most one non-zero."""
    net = clean(net)
    return np.maximum(net, 0.0), np.maximum(-net, 0.0)


def _asset(net_value=0.0, e_in=0.0, e_out=0.0, efc=None, curtailed=0.0, spilled=0.0) -> dict:
    vals = (net_value, e_in, e_out, efc, curtailed, spilled)
    return {k: (None if v is None else float(v)) for k, v in zip(ASSET_KEYS, vals)}


@dataclass
class _Flows:
    """A solution's flows, per asset (MW unless noted), before they become tables."""

    charge: Dict[str, np.ndarray] = field(default_factory=dict)        # total charge
    charge_site: Dict[str, np.ndarray] = field(default_factory=dict)   # drawn from the site
    discharge: Dict[str, np.ndarray] = field(default_factory=dict)
    route_flow: Dict[str, np.ndarray] = field(default_factory=dict)    # leaving, source units
    route_arrive: Dict[str, np.ndarray] = field(default_factory=dict)  # arriving, target units
    route_transit: Dict[str, float] = field(default_factory=dict)      # MWh on its way at the end
    received: Dict[str, np.ndarray] = field(default_factory=dict)      # MWh per step from routes
    sent: Dict[str, np.ndarray] = field(default_factory=dict)          # MWh per step into routes
    supply_site: Dict[str, np.ndarray] = field(default_factory=dict)   # delivered to the site
    pumped: Dict[str, bool] = field(default_factory=dict)              # a pump route feeds the store
    step_price: Dict[str, np.ndarray] = field(default_factory=dict)    # connection -> price its flow met


def build_tables(built, values: Dict[str, np.ndarray]):
    """Return ``(tables, summary_parts)`` for a solution's value arrays.

    ``tables`` maps every asset name to its DataFrame; ``summary_parts`` has
    the per-asset summary sections.
    """
    p, topo = built.portfolio, built.topology
    acc = E.Values(built, values)
    index = pd.DatetimeIndex(p.horizon.index, name="time")
    flows = _Flows()
    _storage_flows(acc, p, topo, flows)
    _route_flows(acc, p, topo, flows)
    tables: Dict[str, pd.DataFrame] = {}
    _storage_tables(acc, p, flows, tables, index)
    _supply_and_demand_tables(acc, p, topo, flows, tables, index)
    _meter_tables(acc, p, flows, tables, index)
    return tables, _summary_parts(acc, p, topo, flows, tables)


def _storage_flows(acc: E.Values, p, topo, flows: _Flows) -> None:
    for k in p.storages:
        flows.charge_site[k] = acc(E.CHARGE_SITE, k)
        flows.charge[k] = acc.of(E.total_charge(topo, k))
        flows.discharge[k] = acc(E.DISCHARGE, k)
        flows.pumped[k] = topo.pump_into(k) is not None


def _route_flows(acc: E.Values, p, topo, flows: _Flows) -> None:
    dt = acc.dt
    arriving_mwh = {}
    for r in topo.routes:
        flow = acc.route_flow(p, r)
        arriving_mwh[r.name] = E.route_arriving_mwh(r, flow, dt)
        flows.route_flow[r.name] = flow
        flows.route_arrive[r.name] = arriving_mwh[r.name] / dt
        flows.route_transit[r.name] = E.route_in_transit_end(r, flow, dt)
    for k in p.storages:
        received, sent = np.zeros(acc.steps), np.zeros(acc.steps)
        arriving, _ = E.balance_routes(topo, k)   # pumped water is the upper store's charge
        for r in arriving:
            received = received + arriving_mwh[r.name]
        for r in topo.routes_out_of(k):
            sent = sent + flows.route_flow[r.name] * dt
        flows.received[k], flows.sent[k] = received, sent


def _storage_tables(acc: E.Values, p, flows: _Flows, tables, index) -> None:
    dt = acc.dt
    for k in p.storages:
        c, d = clean(flows.charge[k]), clean(flows.discharge[k])
        mode = np.where(c > MODE_TOL, np.where(d > MODE_TOL, "both", "charge"),
                        np.where(d > MODE_TOL, "discharge", "idle"))
        tables[k] = frame("storage", {
            "charge_mw": c,
            "discharge_mw": d,
            "soc_mwh": clean(acc(E.SOC, k)),
            "spill_mw": clean(acc(E.SPILL, k)),
            "mode": mode,
            "routed_in_mw": clean(flows.received[k] / dt),
            "routed_out_mw": clean(flows.sent[k] / dt),
            "supply_in_mw": clean(p.profile(p.storages[k].supply)),
            "pump_mw": c if flows.pumped[k] else np.zeros(len(c)),
            **_water_columns(p.storages[k], d, clean(acc(E.SOC, k)), clean(acc(E.SPILL, k)),
                             clean(p.profile(p.storages[k].supply))),
        }, index)
    for r in p.routes:
        tables[r.name] = frame("route", {"flow_mw": clean(flows.route_flow[r.name]),
                                         "arriving_mw": clean(flows.route_arrive[r.name])}, index)


def _water_columns(s, d, soc, spill, supply) -> dict:
    """A store declared in volume: content in m3 and flows in m3/s beside its MWh and MW (by its
    energy equivalent, MWh per m3; docs/outputs.md); NaN (empty) for a store declared in MWh."""
    eq = s.mwh_per_m3
    if eq is None:
        empty = np.full(len(soc), np.nan)
        return {"content_m3": empty, "discharge_m3_per_s": empty, "spill_m3_per_s": empty,
                "supply_in_m3_per_s": empty}
    return {"content_m3": U.water_m3(soc, eq), "discharge_m3_per_s": U.water_m3_per_s(d / s.eta_discharge, eq),
            "spill_m3_per_s": U.water_m3_per_s(spill, eq), "supply_in_m3_per_s": U.water_m3_per_s(supply, eq)}


def _supply_and_demand_tables(acc: E.Values, p, topo, flows: _Flows, tables, index) -> None:
    for name, f in p.supplies.items():
        flows.supply_site[name] = acc(E.SUPPLY_SITE, name)
        tables[name] = frame("supply", {
            "available_mw": clean(p.profile(f.profile)),
            "used_mw": clean(acc.of(E.supply_used(topo, name))),
            "curtailed_mw": clean(acc(E.CURTAILED, name))}, index)
    for name, dmd in p.demands.items():
        tables[name] = frame("demand", {"demand_mw": clean(p.profile(dmd.profile))}, index)


def _meter_tables(acc: E.Values, p, flows: _Flows, tables, index) -> None:
    dt = acc.dt
    for sname in p.sites:
        exp, imp = _net(acc.of(E.meter("site", sname)))
        tables[sname] = frame("site", {"import_mw": imp, "export_mw": exp}, index)
    for cname, conn in p.connections.items():
        exp, imp = _net(acc.of(E.meter("connection", cname)))
        sell, buy = p.price(conn.sell), p.price(conn.buy)
        cash = clean(dt * (sell * exp - buy * imp))
        flows.step_price[cname] = np.where(exp > 0, sell, buy)
        tables[cname] = frame("connection", {"import_mw": imp, "export_mw": exp, "sell_price": sell,
                                             "buy_price": buy, "cashflow": cash}, index)


def _summary_parts(acc: E.Values, p, topo, flows: _Flows, tables) -> dict:
    """The per-asset summary sections (docs/outputs.md, "Net value attribution").

    Also keeps each asset's net value per step (``_step_money``), which the
    period totals (:func:`periods`) add up by day and by month.
    """
    T, dt = acc.steps, acc.dt

    def site_price(sname):
        conn = topo.connection_of(sname)
        return flows.step_price[conn] if conn in flows.step_price else np.zeros(T)

    def totals(name, col_in, col_out):
        t = tables[name]
        return float(t[col_in].sum()) * dt, float(t[col_out].sum()) * dt

    storages, supplies, demands, sites, connections, routes = {}, {}, {}, {}, {}, {}
    money: Dict[str, np.ndarray] = {}
    site_money = {s: np.zeros(T) for s in p.sites}
    for k, s in p.storages.items():
        pr = site_price(s.site)
        d, cs = clean(flows.discharge[k]), clean(flows.charge_site[k])
        money[k] = dt * pr * (d - cs) - s.wear * d * dt
        e_out = float(d.sum()) * dt
        # Equivalent full cycles (docs/model.md): MWh drawn from the store to discharge over
        # its usable capacity, the definition the cycle limits use; none for a store that
        # cannot charge (a reservoir filled by nature and routes does not cycle).
        efc = (float(clean(acc.of(E.drawn_for_discharge(p, k))).sum()) * dt / s.usable_mwh
               if s.cycles else None)
        storages[k] = _asset(float(money[k].sum()), float(clean(flows.charge[k]).sum()) * dt, e_out, efc,
                             0.0, float(clean(acc(E.SPILL, k)).sum()) * dt)
        storages[k]["soc_end_mwh"] = float(clean(acc(E.SOC, k))[-1]) if T else s.soc_start
        storages[k].update(_prices(pr, cs, d))
        if s.site in site_money:
            site_money[s.site] = site_money[s.site] + money[k]
    for name, f in p.supplies.items():
        money[name] = dt * site_price(f.site) * clean(flows.supply_site[name])
        e_in, e_out = totals(name, "available_mw", "used_mw")
        supplies[name] = _asset(float(money[name].sum()), e_in, e_out, None,
                                float(tables[name]["curtailed_mw"].sum()) * dt, 0.0)
        if f.site in site_money:
            site_money[f.site] = site_money[f.site] + money[name]
    for name, dmd in p.demands.items():
        dem = clean(p.profile(dmd.profile))
        money[name] = -dt * site_price(dmd.site) * dem
        demands[name] = _asset(float(money[name].sum()), float(dem.sum()) * dt, 0.0, None, 0.0, 0.0)
        if dmd.site in site_money:
            site_money[dmd.site] = site_money[dmd.site] + money[name]
    for sname in p.sites:
        money[sname] = site_money[sname]
        sites[sname] = _asset(float(money[sname].sum()), *totals(sname, "import_mw", "export_mw"), None, 0.0, 0.0)
    for cname in p.connections:
        money[cname] = tables[cname]["cashflow"].to_numpy(dtype=float)
        connections[cname] = _asset(float(money[cname].sum()),
                                    *totals(cname, "import_mw", "export_mw"), None, 0.0, 0.0)
    for r in p.routes:
        figures = (flows.route_transit[r.name], flows.route_flow[r.name].sum() * dt)
        routes[r.name] = {key: float(clean(np.array([x]))[0]) for key, x in zip(ROUTE_KEYS, figures)}
    parts = {"storages": storages, "supplies": supplies, "demands": demands, "sites": sites,
             "connections": connections, "routes": routes}
    assert tuple(parts) == tuple(ASSET_GROUPS)
    for group in ("storages",):
        for fig in parts[group].values():
            assert tuple(fig) == STORAGE_KEYS
    parts["_step_money"] = money
    return parts


def _prices(price: np.ndarray, bought: np.ndarray, sold: np.ndarray) -> dict:
    """A storage's energy-weighted average prices (docs/outputs.md, "Storage price figures"):
    the price its flow met at its connection each step, weighted by the MW drawn from the
    site (charge) and by the discharge; None when it drew or discharged nothing."""
    def avg(weights):
        total = float(weights.sum())
        return float(np.sum(price * weights)) / total if total > 0 else None

    buy, sell = avg(bought), avg(sold)
    spread = sell - buy if buy is not None and sell is not None else None
    return {"average_charge_price": buy, "average_discharge_price": sell, "spread_captured": spread}


PERIOD_GROUPS = ("storages", "supplies", "demands", "sites", "connections")   # the assets periods.csv totals
# per table kind, the columns of energy in, energy out, curtailed, spilled (None: not this kind's)
_PERIOD_COLUMNS = {
    "storage": ("charge_mw", "discharge_mw", None, "spill_mw"),
    "supply": ("available_mw", "used_mw", "curtailed_mw", None),
    "demand": ("demand_mw", None, None, None),
    "site": ("import_mw", "export_mw", None, None),
    "connection": ("import_mw", "export_mw", None, None),
}


def periods(tables: Dict[str, pd.DataFrame], parts: dict, step_hours: float) -> Optional[pd.DataFrame]:
    """Daily and monthly totals per asset (``periods.csv``), for a horizon of more than one day;
    None otherwise.  Days and months are the horizon zone's calendar (the tables' index);
    a row's ``time`` is the first step of its period inside the horizon."""
    money = parts.get("_step_money") or {}
    if not tables or not money:
        return None
    index = next(iter(tables.values())).index
    if len(index) * step_hours <= 24.0 + 1e-9:
        return None
    keys = {"day": index.strftime("%Y-%m-%d"), "month": index.strftime("%Y-%m")}
    cols = {c: [] for c in COLUMNS["periods"]}
    starts = []
    for length, labels in keys.items():
        labels = np.asarray(labels)
        order = list(dict.fromkeys(labels))
        for group in PERIOD_GROUPS:
            kind = ASSET_GROUPS[group]
            for name in parts[group]:
                t = tables[name]
                series = [t[c].to_numpy(dtype=float) * step_hours if c else np.zeros(len(t))
                          for c in _PERIOD_COLUMNS[kind]]
                for label in order:
                    m = labels == label
                    starts.append(index[np.argmax(m)])
                    cols["period"].append(length)
                    cols["label"].append(label)
                    cols["asset"].append(name)
                    cols["kind"].append(kind)
                    e_in, e_out, cur, spill = (float(v[m].sum()) for v in series)
                    cols["energy_in_mwh"].append(e_in)
                    cols["energy_out_mwh"].append(e_out)
                    cols["net_value"].append(float(money[name][m].sum()))
                    cols["curtailed_mwh"].append(cur)
                    cols["spilled_mwh"].append(spill)
    return frame("periods", {c: np.asarray(v) for c, v in cols.items()},
                 pd.DatetimeIndex(starts, name="time"))


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
