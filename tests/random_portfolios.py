"""Seeded random portfolios for the independent checks.

Two families, each a pure function of its seed (numpy's default_rng):

* :func:`single_site` — one site on one connection, 2-4 storages, 24-48
  steps, random limits and operating rules (exclusive modes, min output when
  running, min run, min rest, ramp, loss, wear, spill, natural inflow),
  inflows into storages and/or the site bus with or without curtailment,
  demands, site and connection limits, direction exclusive, buy/sell spreads
  (including steps where buying is cheaper than selling).
* :func:`linked` — 2-3 sites on 1-2 connections, routes (release, spill,
  transfer) with delays, factors, efficiencies, max and in-transit at the
  start, site limits nested inside connection limits, and sometimes a
  portfolio-wide Cap.

To keep zero-gap solves quick, a storage draws at most two integer rules
(exclusive, min output, min run, min rest; a min run usually brings a min
output along, so that it binds), and only one or two storages of a
single-site portfolio (about half of a linked one's) draw any.  A few seeds
come out infeasible (tight end rules, inflows that may not be curtailed);
the tests then only ask that both solvers say so.

Every portfolio satisfies what the front end's checks would demand (route
kinds, one release/spill route per source, no zero-delay cycles, inflows
only into storages at their own site, rest implies exclusive, whole-step
rules); :func:`topology_errors` runs the graph checks to confirm it.

:func:`dispatched` caches one engine dispatch (``mip_gap=0``) per
portfolio, so the oracle and the auditor tests solve each one once.
"""

from __future__ import annotations

import functools
from typing import List

import numpy as np

import factory as F
from portfolio.model import END_AT_LEAST, END_EQUAL, END_FREE, Portfolio

SINGLE_SEEDS = range(28)
LINKED_SEEDS = range(15)


def _r(x, nd=3):
    return float(round(float(x), nd))


def _prices(rng, T, name):
    base = rng.uniform(20, 70)
    shape = base + 25 * np.sin(np.arange(T) * 2 * np.pi / rng.uniform(8, 30) + rng.uniform(0, 6))
    vals = np.round(shape + rng.normal(0, 12, T), 2)
    if rng.random() < 0.3:                         # a few negative prices
        vals[rng.integers(0, T, size=max(1, T // 8))] *= -0.5
    return F.series(name, vals, "price")


def _solar(rng, T, dt, name, peak):
    hours = (np.arange(T) * dt + rng.uniform(0, 24)) % 24
    shape = np.clip(np.sin((hours - 6) / 12 * np.pi), 0, None)
    vals = np.round(peak * shape * rng.uniform(0.5, 1.0, T), 3)
    return F.series(name, vals)


def _flat(rng, T, name, lo, hi):
    return F.series(name, np.round(rng.uniform(lo, hi, T), 3))


def _steps_h(rng, dt, choices):
    return float(rng.choice(choices)) * dt


def _storage(rng, name, site, dt, T, series_out, kind=None, *, can_charge=True, natural=False,
             spill=None, integer_rules=True):
    kind = kind or str(rng.choice(["battery", "thermal", "other"]))
    energy = _r(rng.uniform(2, 12), 2)
    cmax = _r(rng.uniform(0.5, 4), 2) if can_charge else 0.0
    dmax = _r(rng.uniform(0.5, 4), 2)
    kw = dict(kind=kind, energy=energy, charge_max=cmax, discharge_max=dmax, power=None,
              eta_charge=_r(rng.uniform(0.8, 1.0)), eta_discharge=_r(rng.uniform(0.8, 1.0)))
    lo = _r(rng.uniform(0, 0.2) * energy) if rng.random() < 0.5 else 0.0
    hi = _r(rng.uniform(0.8, 1.0) * energy) if rng.random() < 0.5 else energy
    start = _r(rng.uniform(lo, hi))
    kw.update(soc_min=lo, soc_max=hi, soc_start=start)
    rule = rng.choice([END_FREE, END_AT_LEAST, END_AT_LEAST, END_EQUAL])
    kw["end_rule"] = str(rule)
    if rule == END_AT_LEAST:
        kw["end_value"] = start if rng.random() < 0.5 else _r(rng.uniform(lo, hi))
    elif rule == END_EQUAL:
        kw["end_value"] = _r(rng.uniform(lo, hi))
    if rng.random() < 0.5:
        kw["loss_per_h"] = float(rng.choice([0.001, 0.005, 0.02]))
    if rng.random() < 0.5:
        kw["wear"] = float(rng.choice([0.5, 2.0, 5.0]))
    # At most two integer rules a storage (keeps zero-gap solves quick).
    rules = rng.permutation(["exclusive", "charge_min", "discharge_min", "min_run", "min_rest"])
    for rule in rules[:int(rng.choice([0, 0, 1, 1, 2])) if integer_rules else 0]:
        if rule == "exclusive":
            kw["exclusive"] = True
        elif rule == "charge_min" and cmax > 0:
            kw["charge_min"] = _r(rng.uniform(0.1, 0.6) * cmax)
        elif rule == "discharge_min":
            kw["discharge_min"] = _r(rng.uniform(0.1, 0.6) * dmax)
        elif rule == "min_run":
            kw["min_run_h"] = _steps_h(rng, dt, [2, 3, 4])
            if rng.random() < 0.7:                 # with a minimum output the run rule binds
                if cmax > 0 and rng.random() < 0.3:
                    kw.setdefault("charge_min", _r(rng.uniform(0.3, 0.8) * cmax))
                else:
                    kw.setdefault("discharge_min", _r(rng.uniform(0.3, 0.8) * dmax))
        elif rule == "min_rest":
            kw["min_rest_h"] = _steps_h(rng, dt, [1, 2])
            kw["exclusive"] = True                 # the checker's rule: rest implies exclusive
    if rng.random() < 0.25:
        kw["ramp_mw_per_h"] = _r(rng.uniform(0.5, 1.5) * max(cmax, dmax) / dt)
    if spill is None:
        spill = rng.random() < 0.4
    if spill:
        kw["spill_allowed"] = True
        if rng.random() < 0.5:
            kw["spill_max"] = _r(rng.uniform(0.5, 3))
    if natural:
        nat = f"{name}_nat"
        series_out.append(_flat(rng, T, nat, 0.0, 0.3 * max(dmax, 0.5)))
        kw["inflow"] = nat
    return F.storage(name, site=site, **kw)


def single_site(seed: int) -> Portfolio:
    rng = np.random.default_rng(1000 + seed)
    T = int(rng.integers(24, 49))
    dt = float(rng.choice([1.0, 0.5]))
    sl = [_prices(rng, T, "sell_price")]
    spread = rng.choice(["same", "adder", "series"])
    if spread == "same":
        buy = F.price("sell_price")
    elif spread == "adder":
        buy = F.price("sell_price", float(rng.choice([2.0, 8.0, -1.5])))
    else:                                           # buy below sell on some steps
        b = sl[0].values + np.round(rng.normal(3, 4, T), 2)
        sl.append(F.series("buy_price", b, "price"))
        buy = F.price("buy_price")
    ckw = {}
    if rng.random() < 0.6:
        ckw["export_max"] = _r(rng.uniform(2, 8), 2)
    if rng.random() < 0.6:
        ckw["import_max"] = _r(rng.uniform(2, 8), 2)
    if rng.random() < 0.3:
        ckw["exclusive"] = True
    skw = {}
    if rng.random() < 0.4:
        skw["export_max"] = _r(rng.uniform(1.5, 6), 2)
    if rng.random() < 0.4:
        skw["import_max"] = _r(rng.uniform(1.5, 6), 2)
    stores = []
    n = int(rng.integers(2, 5))
    ruled = set(rng.choice(n, size=int(rng.choice([1, 1, 2])), replace=False).tolist())  # integer rules on 1-2 storages
    for j in range(n):
        if rng.random() < 0.25:                    # a small reservoir: natural inflow, no charging
            stores.append(_storage(rng, f"s{j}", "site", dt, T, sl, "reservoir", can_charge=False,
                                   natural=True, spill=rng.random() < 0.8, integer_rules=j in ruled))
        else:
            stores.append(_storage(rng, f"s{j}", "site", dt, T, sl,
                                   natural=rng.random() < 0.15, integer_rules=j in ruled))
    inflows = []
    chargeable = [s.name for s in stores if s.charge_max > 0]
    for j in range(int(rng.integers(0, 3))):
        nm = f"pv{j}"
        sl.append(_solar(rng, T, dt, f"{nm}_mw", _r(rng.uniform(0.5, 3))))
        targets = []
        if rng.random() < 0.7 or not chargeable:
            targets.append("site")
        if chargeable and (rng.random() < 0.6 or not targets):
            picks = rng.choice(chargeable, size=int(rng.integers(1, len(chargeable) + 1)), replace=False)
            targets.extend(str(x) for x in picks)
        inflows.append(F.inflow(nm, f"{nm}_mw", targets=targets, curtail_allowed=bool(rng.random() < 0.7)))
    demands = []
    if rng.random() < 0.5:
        sl.append(_flat(rng, T, "load_mw", 0.2, 1.2))
        demands.append(F.demand("load", "load_mw"))
    conn = F.connection("grid", sell=F.price("sell_price"), buy=buy, **ckw)
    return F.portfolio(T, step_hours=dt, storages=stores, inflows=inflows, demands=demands,
                       sites=[F.site("site", "grid", **skw)], connections=[conn], series_list=sl,
                       name=f"single_{seed}")


def linked(seed: int) -> Portfolio:
    rng = np.random.default_rng(5000 + seed)
    T = int(rng.integers(24, 41))
    dt = float(rng.choice([1.0, 0.5]))
    n_conn = int(rng.integers(1, 3))
    n_site = int(rng.integers(2, 4))
    sl: list = []
    conns = []
    for c in range(n_conn):
        sl.append(_prices(rng, T, f"sell{c}"))
        ckw = {}
        if rng.random() < 0.7:
            ckw["export_max"] = _r(rng.uniform(4, 12), 2)
        if rng.random() < 0.7:
            ckw["import_max"] = _r(rng.uniform(3, 10), 2)
        if rng.random() < 0.3:
            ckw["exclusive"] = True
        buy = F.price(f"sell{c}", float(rng.choice([0.0, 3.0, 10.0, -2.0])))
        conns.append(F.connection(f"c{c}", sell=F.price(f"sell{c}"), buy=buy, **ckw))
    sites, stores, inflows, demands = [], [], [], []
    for s in range(n_site):
        cn = conns[s % n_conn] if s < n_conn else conns[int(rng.integers(0, n_conn))]
        skw = {}
        # nested limits: a site's limit inside its connection's
        for key in ("export_max", "import_max"):
            outer = getattr(cn, key)
            if rng.random() < 0.5:
                skw[key] = _r((outer if outer is not None else 8.0) * rng.uniform(0.4, 0.9), 2)
        sname = f"site{s}"
        sites.append(F.site(sname, cn.name, **skw))
        role = rng.choice(["hydro", "hydro", "heat", "heat", "battery"])
        if role == "hydro":
            stores.append(_storage(rng, f"{sname}_up", sname, dt, T, sl, "reservoir", can_charge=False,
                                   natural=True, spill=True, integer_rules=rng.random() < 0.5))
            stores.append(_storage(rng, f"{sname}_low", sname, dt, T, sl, "reservoir", can_charge=False,
                                   spill=rng.random() < 0.7, integer_rules=rng.random() < 0.5))
        elif role == "heat":
            stores.append(_storage(rng, f"{sname}_heat", sname, dt, T, sl, "thermal", integer_rules=rng.random() < 0.5))
        else:
            stores.append(_storage(rng, f"{sname}_bat", sname, dt, T, sl, "battery", integer_rules=rng.random() < 0.5))
        if rng.random() < 0.5:
            nm = f"{sname}_pv"
            sl.append(_solar(rng, T, dt, f"{nm}_mw", _r(rng.uniform(0.5, 3))))
            own = [k.name for k in stores if k.site == sname and k.charge_max > 0]
            targets = ["site"] + ([own[0]] if own and rng.random() < 0.5 else [])
            inflows.append(F.inflow(nm, f"{nm}_mw", site=sname, targets=targets,
                                    curtail_allowed=bool(rng.random() < 0.8)))
        if rng.random() < 0.4:
            nm = f"{sname}_load"
            sl.append(_flat(rng, T, f"{nm}_mw", 0.1, 1.0))
            demands.append(F.demand(nm, f"{nm}_mw", site=sname))
    routes = []

    def route(src, kind, dst):
        kw = {"delay_steps": int(rng.integers(0, 4))}
        if rng.random() < 0.5:
            kw["factor"] = _r(rng.uniform(0.5, 1.2))
        if kind == "transfer":
            kw["efficiency"] = _r(rng.uniform(0.7, 1.0))
        if rng.random() < 0.4:
            kw["max_mw"] = _r(rng.uniform(0.5, 3))
        if kw["delay_steps"] > 0 and rng.random() < 0.5:
            kw["in_transit"] = _r(rng.uniform(0.1, 2))
        routes.append(F.route(f"{src.name}_{kind}_to_{dst.name}", src.name, dst.name, kind, **kw))

    # Routes go from earlier to later storages only: no cycles at all.
    order = list(stores)
    for a, src in enumerate(order):
        later = order[a + 1:]
        same = [k for k in later if k.kind == src.kind]
        if src.kind == "reservoir" and same:
            dst = same[0]
            if rng.random() < 0.85:
                route(src, "release", dst)
            if src.spill_allowed and rng.random() < 0.7:
                route(src, "spill", dst)
        if src.kind == "thermal" and same:
            for dst in same:
                if rng.random() < 0.8:
                    route(src, "transfer", dst)
        if src.kind == "reservoir" and same and rng.random() < 0.3:
            route(src, "transfer", same[-1])
    cap = None
    if rng.random() < 0.5:
        ckw = {}
        if rng.random() < 0.8:
            ckw["export_max"] = _r(rng.uniform(3, 10), 2)
        if rng.random() < 0.5:
            ckw["import_max"] = _r(rng.uniform(2, 8), 2)
        cap = F.cap("total", **ckw)
    return F.portfolio(T, step_hours=dt, storages=stores, inflows=inflows, demands=demands,
                       sites=sites, connections=conns, routes=routes, cap=cap, series_list=sl,
                       name=f"linked_{seed}")


FAMILIES = {"single": single_site, "linked": linked}


def make(family: str, seed: int) -> Portfolio:
    return _make(family, seed)


@functools.lru_cache(maxsize=None)
def _make(family: str, seed: int) -> Portfolio:
    return FAMILIES[family](seed)


def topology_errors(p: Portfolio) -> List[str]:
    """Errors the front end's graph checks would report for ``p``."""
    from portfolio.diagnostics import Sink
    from portfolio.graph import build_graph, check_topology
    sink = Sink()
    check_topology(p, build_graph(p), sink)
    return [f"{d.span}: {d.message}" for d in sink.errors]


@functools.lru_cache(maxsize=None)
def dispatched(family: str, seed: int):
    """The engine's dispatch of one random portfolio at zero gap (cached).

    No re-solve with slacks when infeasible: these tests only need the status.
    """
    from portfolio.dispatch import dispatch
    from portfolio.solve import SolveOptions
    return dispatch(make(family, seed), SolveOptions(mip_gap=0.0, explain_infeasible=False))
