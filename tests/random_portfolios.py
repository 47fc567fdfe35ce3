"""Seeded random portfolios for the independent checks.

Two fast families (tests/test_oracle.py), each a pure function of its seed (numpy's
default_rng):

* :func:`single_site` — one site on one connection, 2-4 storages, 24-48
  steps, random limits and operating rules (exclusive modes, min output when
  running, min run, min rest, ramp, loss, wear, spill, natural supply),
  supplies into storages and/or the site with or without curtailment,
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
come out infeasible (tight end rules, supplies that may not be curtailed);
the tests then only ask that both solvers say so.

Every portfolio satisfies what the front end's checks would demand (route
kinds, one release/spill route per source, no zero-delay cycles, supplies
only into storages at their own site, rest implies exclusive, whole-step
rules); :func:`topology_errors` runs the graph checks to confirm it.  (Not
quite: five of their seeds give a storage a run rule without exclusive
modes, which the checker would make exclusive.  They are kept as they are,
so that the fast tests keep their meaning.)

The wide families (:data:`WIDE_SEEDS`, the slow group in
tests/test_oracle_wide.py) give every storage with a minimum output, run
or rest rule exclusive modes, as a ``.folio`` file would, and
:func:`front_end_errors` checks that and the checker's other rules:

* ``single_fe`` and ``linked_fe`` — the two generators above on other seeds;
* :func:`modes` — one site, minimum outputs, runs, rests and ramps, steps
  down to 15 minutes;
* :func:`cascade` — reservoirs in cascade over several sites: delays up to
  4 steps, water in transit, tributaries, pumped storage (pump routes), turbines with a
  minimum output;
* :func:`limits` — several sites and connections: site limits inside
  connection limits, a portfolio-wide cap, the direction rule, buying below
  selling, negative prices, supplies into stores and sites, demands,
  transfers.

:func:`features` names the rules a portfolio exercises, so tests can ask
that the seeds cover :data:`RULES` (fast) and :data:`WIDE_RULES` (wide).

:func:`dispatched` caches one engine dispatch (``mip_gap=0``) per
portfolio, so the oracle and the auditor tests solve each one once.
"""

from __future__ import annotations

import functools
from typing import List, Set

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
             spill=None, integer_rules=True, rules=None, front_end=False):
    """A storage with random limits; ``rules`` names its integer rules (None: drawn here).

    ``front_end=True`` gives every storage with a rule that needs mode binaries
    (a minimum output, run or rest) exclusive modes, as a ``.folio`` file
    would state them; no extra draw is made, so the rest is unchanged.
    """
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
    if rules is None:
        rules = rng.permutation(["exclusive", "charge_min", "discharge_min", "min_run", "min_rest"])
        rules = rules[:int(rng.choice([0, 0, 1, 1, 2])) if integer_rules else 0]
    for rule in rules:
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
        kw["supply"] = nat
    if front_end and (kw.get("charge_min", 0) > 0 or kw.get("discharge_min", 0) > 0
                      or kw.get("min_run_h", 0) > 0 or kw.get("min_rest_h", 0) > 0):
        kw["exclusive"] = True
    return F.storage(name, site=site, **kw)


def _route(rng, src, kind, dst, max_delay=3):
    """A route from ``src`` to ``dst`` with a random delay (0..max_delay steps),
    factor, efficiency (transfers), max and water in transit at the start."""
    kw = {"delay_steps": int(rng.integers(0, max_delay + 1))}
    if rng.random() < 0.5:
        kw["factor"] = _r(rng.uniform(0.5, 1.2))
    if kind == "transfer":
        kw["efficiency"] = _r(rng.uniform(0.7, 1.0))
    if rng.random() < 0.4:
        kw["max_mw"] = _r(rng.uniform(0.5, 3))
    if kw["delay_steps"] > 0 and rng.random() < 0.5:
        kw["in_transit"] = _r(rng.uniform(0.1, 2))
    return F.route(f"{src.name}_{kind}_to_{dst.name}", src.name, dst.name, kind, **kw)


def single_site(seed: int, front_end: bool = False) -> Portfolio:
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
        if rng.random() < 0.25:                    # a small reservoir: natural supply, no charging
            stores.append(_storage(rng, f"s{j}", "site", dt, T, sl, "reservoir", can_charge=False,
                                   natural=True, spill=rng.random() < 0.8, integer_rules=j in ruled,
                                   front_end=front_end))
        else:
            stores.append(_storage(rng, f"s{j}", "site", dt, T, sl,
                                   natural=rng.random() < 0.15, integer_rules=j in ruled,
                                   front_end=front_end))
    supplies = []
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
        supplies.append(F.supply(nm, f"{nm}_mw", targets=targets, curtail_allowed=bool(rng.random() < 0.7)))
    demands = []
    if rng.random() < 0.5:
        sl.append(_flat(rng, T, "load_mw", 0.2, 1.2))
        demands.append(F.demand("load", "load_mw"))
    conn = F.connection("grid", sell=F.price("sell_price"), buy=buy, **ckw)
    return F.portfolio(T, step_hours=dt, storages=stores, supplies=supplies, demands=demands,
                       sites=[F.site("site", "grid", **skw)], connections=[conn], series_list=sl,
                       name=f"single{'_fe' if front_end else ''}_{seed}")


def linked(seed: int, front_end: bool = False) -> Portfolio:
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
    sites, stores, supplies, demands = [], [], [], []
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
                                   natural=True, spill=True, integer_rules=rng.random() < 0.5,
                                   front_end=front_end))
            stores.append(_storage(rng, f"{sname}_low", sname, dt, T, sl, "reservoir", can_charge=False,
                                   spill=rng.random() < 0.7, integer_rules=rng.random() < 0.5,
                                   front_end=front_end))
        elif role == "heat":
            stores.append(_storage(rng, f"{sname}_heat", sname, dt, T, sl, "thermal",
                                   integer_rules=rng.random() < 0.5, front_end=front_end))
        else:
            stores.append(_storage(rng, f"{sname}_bat", sname, dt, T, sl, "battery",
                                   integer_rules=rng.random() < 0.5, front_end=front_end))
        if rng.random() < 0.5:
            nm = f"{sname}_pv"
            sl.append(_solar(rng, T, dt, f"{nm}_mw", _r(rng.uniform(0.5, 3))))
            own = [k.name for k in stores if k.site == sname and k.charge_max > 0]
            targets = ["site"] + ([own[0]] if own and rng.random() < 0.5 else [])
            supplies.append(F.supply(nm, f"{nm}_mw", site=sname, targets=targets,
                                    curtail_allowed=bool(rng.random() < 0.8)))
        if rng.random() < 0.4:
            nm = f"{sname}_load"
            sl.append(_flat(rng, T, f"{nm}_mw", 0.1, 1.0))
            demands.append(F.demand(nm, f"{nm}_mw", site=sname))
    routes = []

    def route(src, kind, dst):
        routes.append(_route(rng, src, kind, dst))

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
    return F.portfolio(T, step_hours=dt, storages=stores, supplies=supplies, demands=demands,
                       sites=sites, connections=conns, routes=routes, cap=cap, series_list=sl,
                       name=f"linked{'_fe' if front_end else ''}_{seed}")


# -- the wide families (tests/test_oracle_wide.py) ------------------------------------

# Integer rules a storage of the "modes" family draws (a run rule with a minimum
# output, so that it binds); at most two storages of a portfolio draw any.
MODE_RULES = (("discharge_min",), ("charge_min",), ("charge_min", "discharge_min"),
              ("min_run", "discharge_min"), ("min_run", "charge_min"), ("min_rest", "discharge_min"),
              ("min_run", "min_rest", "discharge_min"), ("exclusive",))


def _dips(rng, s, share):
    """``s`` with a share of its steps pushed below zero (negative prices)."""
    vals = s.values.copy()
    idx = rng.choice(len(vals), size=max(1, int(round(share * len(vals)))), replace=False)
    vals[idx] = -np.round(rng.uniform(2, 40, idx.size), 2)
    return F.series(s.name, vals, s.quantity)


def _connection(rng, T, sl, name, limits, p_limit=0.7, p_exclusive=0.3):
    """A connection selling at its own prices (negative on some steps in 40 %
    of them) and buying at the same, with an adder, or at a series that is
    below the sell price on some steps; random limits and direction rule."""
    sell = f"{name}_sell"
    s = _prices(rng, T, sell)
    if rng.random() < 0.4:
        s = _dips(rng, s, rng.uniform(0.05, 0.25))
    sl.append(s)
    how = rng.choice(["same", "adder", "series"])
    if how == "same":
        buy = F.price(sell)
    elif how == "adder":
        buy = F.price(sell, float(rng.choice([1.0, 6.0, -2.0])))
    else:
        sl.append(F.series(f"{name}_buy", s.values + np.round(rng.normal(3, 4, T), 2), "price"))
        buy = F.price(f"{name}_buy")
    kw = {}
    for key in ("export_max", "import_max"):
        if rng.random() < p_limit:
            kw[key] = _r(rng.uniform(*limits), 2)
    if rng.random() < p_exclusive:
        kw["exclusive"] = True
    return F.connection(name, sell=F.price(sell), buy=buy, **kw)


def _nested_site(rng, name, conn, p=0.5, share=(0.4, 0.9)):
    """A site whose limits, when it has them, lie inside its connection's."""
    kw = {}
    for key in ("export_max", "import_max"):
        if rng.random() < p:
            outer = getattr(conn, key)
            kw[key] = _r((outer if outer is not None else 8.0) * rng.uniform(*share), 2)
    return F.site(name, conn.name, **kw)


def _site_extras(rng, T, dt, sl, site, stores, supplies, demands, p_pv, p_demand):
    """Maybe solar into the site and/or its chargeable stores (curtailable
    or not), and maybe a demand."""
    if rng.random() < p_pv:
        nm = f"{site}_pv"
        sl.append(_solar(rng, T, dt, f"{nm}_mw", _r(rng.uniform(0.5, 3))))
        own = [k.name for k in stores if k.site == site and k.charge_max > 0]
        targets = ["site"] if rng.random() < 0.7 or not own else []
        if own and (rng.random() < 0.5 or not targets):
            targets.append(str(rng.choice(own)))
        supplies.append(F.supply(nm, f"{nm}_mw", site=site, targets=targets,
                                curtail_allowed=bool(rng.random() < 0.7)))
    if rng.random() < p_demand:
        nm = f"{site}_load"
        sl.append(_flat(rng, T, f"{nm}_mw", 0.1, 1.0))
        demands.append(F.demand(nm, f"{nm}_mw", site=site))


def _cap(rng, conns, p_export=0.8, p_import=0.5):
    """A portfolio-wide cap below the sum of the connections' limits."""
    kw = {}
    for key, p in (("export_max", p_export), ("import_max", p_import)):
        if rng.random() < p:
            total = sum(getattr(c, key) or 8.0 for c in conns)
            kw[key] = _r(total * rng.uniform(0.4, 0.9), 2)
    return F.cap("total", **kw) if kw else None


def modes(seed: int) -> Portfolio:
    """One site, 1-3 storages of any kind; the first two draw rules from
    :data:`MODE_RULES` (minimum output, run, rest; exclusive modes as the
    front end makes them), some a ramp; steps of 1 h, 30 or 15 min."""
    rng = np.random.default_rng(20000 + seed)
    T = int(rng.integers(16, 37))
    dt = float(rng.choice([1.0, 0.5, 0.25]))
    sl: list = []
    conn = _connection(rng, T, sl, "grid", limits=(2.0, 8.0), p_limit=0.5)
    site = _nested_site(rng, "site", conn, p=0.3)
    stores, supplies, demands = [], [], []
    for j in range(int(rng.integers(1, 4))):
        kind = str(rng.choice(["battery", "thermal", "other", "reservoir"]))
        rules = MODE_RULES[int(rng.integers(len(MODE_RULES)))] if j < 2 else ()
        stores.append(_storage(rng, f"m{j}", "site", dt, T, sl, kind, can_charge=kind != "reservoir",
                               natural=kind == "reservoir" or rng.random() < 0.1, rules=rules,
                               front_end=True))
    _site_extras(rng, T, dt, sl, "site", stores, supplies, demands, p_pv=0.4, p_demand=0.4)
    return F.portfolio(T, step_hours=dt, storages=stores, supplies=supplies, demands=demands,
                       sites=[site], connections=[conn], series_list=sl, name=f"modes_{seed}")


def cascade(seed: int) -> Portfolio:
    """2-4 reservoirs in cascade over 1-3 sites on 1-2 connections: release and
    spill routes (delays up to 4 steps, factors, maxima, water in transit at
    the start), tributaries that skip a level, a few transfers, pumped
    storage below the top (a pump route from the pool below: :func:`_pumps`), turbines with a minimum output (and sometimes a
    run or rest rule), site limits inside the connections', sometimes a cap."""
    rng = np.random.default_rng(30000 + seed)
    T = int(rng.integers(24, 41))
    dt = float(rng.choice([1.0, 0.5]))
    sl: list = []
    n_conn = int(rng.choice([1, 1, 2]))
    conns = [_connection(rng, T, sl, f"c{c}", limits=(3.0, 10.0)) for c in range(n_conn)]
    n_res = int(rng.integers(2, 5))
    n_site = int(rng.integers(n_conn, min(n_res, 3) + 1))
    sites = [_nested_site(rng, f"site{s}", conns[s % n_conn]) for s in range(n_site)]
    stores, supplies, demands, routes = [], [], [], []
    ruled = 0
    for j in range(n_res):
        r = rng.random()
        rules = () if ruled >= 2 else (("discharge_min",) if r < 0.25 else
                                       ("min_run", "discharge_min") if r < 0.35 else
                                       ("min_rest", "discharge_min") if r < 0.4 else ())
        ruled += bool(rules)
        natural = j == 0 or rng.random() < 0.3
        stores.append(_storage(rng, f"r{j}", sites[j * n_site // n_res].name, dt, T, sl, "reservoir",
                               can_charge=j > 0 and rng.random() < 0.25, natural=natural,
                               spill=rng.random() < (0.9 if natural else 0.5), rules=rules,
                               front_end=True))
    for j, src in enumerate(stores[:-1]):
        dst = stores[j + 2] if j + 2 < n_res and rng.random() < 0.3 else stores[j + 1]
        if rng.random() < 0.9:
            routes.append(_route(rng, src, "release", dst, max_delay=4))
        if src.spill_allowed and rng.random() < 0.8:
            routes.append(_route(rng, src, "spill", dst, max_delay=4))
        if rng.random() < 0.15:
            routes.append(_route(rng, src, "transfer", stores[int(rng.integers(j + 1, n_res))], max_delay=4))
    routes += _pumps(stores, routes)
    for s in sites:
        _site_extras(rng, T, dt, sl, s.name, stores, supplies, demands, p_pv=0.3, p_demand=0.3)
    cap = _cap(rng, conns) if rng.random() < (0.7 if n_conn > 1 else 0.2) else None
    return F.portfolio(T, step_hours=dt, storages=stores, supplies=supplies, demands=demands,
                       sites=sites, connections=conns, routes=routes, cap=cap, series_list=sl,
                       name=f"cascade_{seed}")


def _pumps(stores, routes) -> list:
    """A pump route into every reservoir that charges (its charge is its pump, and must
    say where the water comes from: P513), from the next store down the cascade, or the
    one above for the bottom store; the factor undoes the largest release or spill factor
    back down the pair, so no water goes round (P313).  No draw is made, so the rest of the portfolio is unchanged."""
    out = []
    for j, k in enumerate(stores):
        if k.kind != "reservoir" or k.charge_max <= 0:
            continue
        low = stores[j + 1] if j + 1 < len(stores) else stores[j - 1]
        back = [r.factor for r in routes if r.kind in ("release", "spill") and r.source == k.name
                and r.target == low.name]
        factor = 1.0 / max(back) if back else 1.0
        out.append(F.route(f"{low.name}_pump_to_{k.name}", low.name, k.name, "pump", factor=factor))
    return out


def limits(seed: int) -> Portfolio:
    """2-4 sites on 1-3 connections, 1-2 storages a site: site limits inside
    their connection's (which together they may exceed), a portfolio-wide
    cap, the direction rule, buying below selling, negative prices, solar
    into stores and sites, demands, transfers between thermal stores (also
    across sites); few integer rules."""
    rng = np.random.default_rng(40000 + seed)
    T = int(rng.integers(24, 41))
    dt = float(rng.choice([1.0, 0.5]))
    sl: list = []
    n_conn = int(rng.integers(1, 4))
    conns = [_connection(rng, T, sl, f"c{c}", limits=(2.0, 8.0), p_limit=0.8, p_exclusive=0.5)
             for c in range(n_conn)]
    n_site = int(rng.integers(max(2, n_conn), 5))
    sites = [_nested_site(rng, f"site{s}", conns[s if s < n_conn else int(rng.integers(0, n_conn))],
                          p=0.6, share=(0.5, 1.0)) for s in range(n_site)]
    stores, supplies, demands, routes = [], [], [], []
    for s in sites:
        for j in range(int(rng.integers(1, 3))):
            kind = str(rng.choice(["battery", "thermal", "thermal", "other"]))
            stores.append(_storage(rng, f"{s.name}_{kind}{j}", s.name, dt, T, sl, kind,
                                   integer_rules=rng.random() < 0.3, front_end=True))
        _site_extras(rng, T, dt, sl, s.name, stores, supplies, demands, p_pv=0.6, p_demand=0.4)
    for a, src in enumerate(stores):
        for dst in stores[a + 1:]:
            if src.kind == dst.kind == "thermal" and rng.random() < 0.5:
                routes.append(_route(rng, src, "transfer", dst))
            elif src.kind == dst.kind == "other" and rng.random() < 0.3:
                routes.append(_route(rng, src, str(rng.choice(["release", "transfer"])), dst))
    cap = _cap(rng, conns) if rng.random() < 0.7 else None
    return F.portfolio(T, step_hours=dt, storages=stores, supplies=supplies, demands=demands,
                       sites=sites, connections=conns, routes=routes, cap=cap, series_list=sl,
                       name=f"limits_{seed}")


FAMILIES = {"single": single_site, "linked": linked,
            "single_fe": functools.partial(single_site, front_end=True),
            "linked_fe": functools.partial(linked, front_end=True),
            "modes": modes, "cascade": cascade, "limits": limits}

# The slow group (tests/test_oracle_wide.py): about 300 portfolios.  The
# single and linked generators run on seeds the fast tests do not use, with
# exclusive modes wherever a rule needs mode binaries (``front_end=True``).
WIDE_SEEDS = {"single_fe": range(100, 170), "linked_fe": range(100, 160), "modes": range(60),
              "cascade": range(55), "limits": range(55)}


def make(family: str, seed: int) -> Portfolio:
    return _make(family, seed)


@functools.lru_cache(maxsize=None)
def _make(family: str, seed: int) -> Portfolio:
    return FAMILIES[family](seed)


def features(p: Portfolio) -> Set[str]:
    """The rules and shapes ``p`` exercises (names as in :data:`RULES`)."""
    seen: Set[str] = set()
    dt = p.horizon.step_hours
    for k in p.storages.values():
        seen |= {n for n, on in (
            ("exclusive", k.exclusive), ("charge_min", k.charge_min > 0),
            ("discharge_min", k.discharge_min > 0), ("min_run", k.min_run_h > 0),
            ("min_rest", k.min_rest_h > 0), ("ramp", k.ramp_mw_per_h is not None),
            ("loss", k.loss_per_h > 0), ("wear", k.wear > 0), ("spill", k.spill_allowed),
            ("spill_max", k.spill_max is not None), ("natural", k.supply is not None),
            ("end_equal", k.end_rule == "equal"), ("end_at_least", k.end_rule == "at_least"),
            ("run_with_min", k.min_run_h > 0 and (k.charge_min > 0 or k.discharge_min > 0)),
            ("run_and_rest", k.min_run_h > 0 and k.min_rest_h > 0),
            ("pumped", k.kind == "reservoir" and k.charge_max > 0
             and any(r.target == k.name and r.kind == "pump" for r in p.routes))) if on}
    for i in p.supplies.values():
        seen |= {n for n, on in (("into_site", "site" in i.targets),
                                 ("into_store", any(t != "site" for t in i.targets)),
                                 ("curtail", i.curtail_allowed),
                                 ("no_curtail", not i.curtail_allowed)) if on}
    seen |= {"demand"} if p.demands else set()
    for c in p.connections.values():
        buy, sell = p.price(c.buy), p.price(c.sell)
        sites = [x for x in p.sites.values() if x.connection == c.name]
        seen |= {n for n, on in (("conn_export_max", c.export_max is not None),
                                 ("conn_import_max", c.import_max is not None),
                                 ("direction_exclusive", c.exclusive),
                                 ("buy_below_sell", bool(np.any(buy < sell))),
                                 ("buy_above_sell", bool(np.any(buy > sell))),
                                 ("negative_price", bool(np.any(sell < 0))),
                                 ("sites_exceed_connection", c.export_max is not None and len(sites) > 1
                                  and all(s.export_max is not None for s in sites)
                                  and sum(s.export_max for s in sites) > c.export_max)) if on}
    for st in p.sites.values():
        outer = p.connections[st.connection]
        seen |= {n for n, on in (("site_export_max", st.export_max is not None),
                                 ("site_import_max", st.import_max is not None),
                                 ("nested_limit", st.export_max is not None and outer.export_max is not None
                                  and st.export_max < outer.export_max)) if on}
    for rt in p.routes:
        seen |= {rt.kind}
        seen |= {n for n, on in (("delay", rt.delay_steps > 0), ("factor", rt.factor != 1),
                                 ("max_mw", rt.max_mw is not None),
                                 ("in_transit", rt.in_transit > 0),
                                 ("cross_site", p.storages[rt.source].site != p.storages[rt.target].site),
                                 ("chain", any(r.source == rt.target for r in p.routes))) if on}
    if p.cap is not None:
        seen.add("cap")
    if len(p.connections) > 1:
        seen.add("two_connections")
    if dt == 0.25:
        seen.add("quarter_hour")
    return seen


# What the fast families' seeds must exercise between them (tests/test_oracle.py),
# and what the wide ones must (tests/test_oracle_wide.py).
RULES = frozenset({
    "exclusive", "charge_min", "discharge_min", "min_run", "min_rest", "ramp", "loss", "wear",
    "spill", "spill_max", "natural", "end_equal", "end_at_least", "run_with_min", "into_site",
    "into_store", "curtail", "no_curtail", "demand", "conn_export_max", "conn_import_max",
    "direction_exclusive", "buy_below_sell", "buy_above_sell", "site_export_max",
    "site_import_max", "release", "transfer", "delay", "factor", "max_mw", "in_transit",
    "cross_site", "cap", "two_connections"})
WIDE_RULES = RULES | {"run_and_rest", "pumped", "negative_price", "sites_exceed_connection",
                      "nested_limit", "chain", "quarter_hour"}


def front_end_errors(p: Portfolio) -> List[str]:
    """What the front end would refuse in ``p``, or read differently from it.

    The graph checks themselves (:func:`topology_errors`), the route rules of
    the checker (its own table of route kinds), and a restatement of its
    value rules for storages: whole-step run and rest rules no longer than
    the horizon, minimum outputs within the maxima, soc limits in order.  A
    storage with a minimum output, run or rest rule must have exclusive
    modes (the checker makes them so for a run or rest rule; a file states
    them for a minimum output).
    """
    from portfolio.check import ROUTE_RULES
    from portfolio.model import KNOWN_KINDS
    out = topology_errors(p)
    T, dt, eps = p.horizon.steps, p.horizon.step_hours, 1e-9
    for k in p.storages.values():
        if (k.charge_min > 0 or k.discharge_min > 0 or k.min_run_h > 0 or k.min_rest_h > 0) \
                and not k.exclusive:
            out.append(f"{k.name}: a minimum output, run or rest rule without exclusive modes")
        for what, h in (("run", k.min_run_h), ("rest", k.min_rest_h)):
            n = h / dt
            if h < 0 or abs(n - round(n)) > 1e-6 or n > T:
                out.append(f"{k.name}: the minimum {what} of {h} h is not a whole number of steps "
                           f"within the horizon")
        if k.charge_min > k.charge_max + eps or k.discharge_min > k.discharge_max + eps:
            out.append(f"{k.name}: a minimum output above its maximum")
        if not (0 <= k.soc_min <= k.soc_start + eps and k.soc_start <= k.soc_max + eps
                and k.soc_max <= k.energy + eps):
            out.append(f"{k.name}: soc limits out of order")
        if k.end_rule != END_FREE and (k.end_value > k.soc_max + eps or
                                       (k.end_rule == END_EQUAL and k.end_value < k.soc_min - eps)):
            out.append(f"{k.name}: end value outside the soc limits")
    seen = set()
    for r in p.routes:
        src, dst = p.storages[r.source], p.storages[r.target]
        kinds = tuple(x.kind if x.kind in KNOWN_KINDS else "other" for x in (src, dst))
        if kinds not in ROUTE_RULES[r.kind]:
            out.append(f"{r.name}: a {r.kind} route cannot join a {src.kind} to a {dst.kind}")
        if r.source == r.target:
            out.append(f"{r.name}: routes to itself")
        if r.kind not in ("transfer", "pump") and (r.source, r.kind) in seen:
            out.append(f"{r.name}: a second {r.kind} route from {r.source}")
        seen.add((r.source, r.kind))
        if r.kind == "spill" and not src.spill_allowed:
            out.append(f"{r.name}: a spill route from a storage that may not spill")
        if r.in_transit > 0 and r.delay_steps == 0:
            out.append(f"{r.name}: in transit on a route without delay")
        if r.delay_steps > T:
            out.append(f"{r.name}: a delay longer than the horizon")
        if r.kind == "pump" and (r.delay_steps or r.in_transit or r.max_mw is not None or r.efficiency != 1):
            out.append(f"{r.name}: a pump route with a delay, in transit, max or efficiency (ignored)")
    # docs/language.md, pumping: a reservoir's charge is its pump, fed by one pump route
    pumped = [r.target for r in p.routes if r.kind == "pump"]
    for k in p.storages.values():
        if k.kind == "reservoir" and k.charge_max > 0 and k.name not in pumped:
            out.append(f"{k.name}: a reservoir charges with no pump route into it (water from nothing)")
        if pumped.count(k.name) > 1:
            out.append(f"{k.name}: pumped along two routes")
    for r in p.routes:
        for b in p.routes:
            if r.kind == "pump" and b.kind in ("release", "spill") and (b.source, b.target) == (r.target, r.source) \
                    and r.factor * b.factor > 1 + 1e-9:
                out.append(f"{r.name}: its factor and {b.name}'s make water going round the pair")
    return out


def topology_errors(p: Portfolio) -> List[str]:
    """Errors the front end's graph checks would report for ``p``."""
    from portfolio.diagnostics import Sink
    from portfolio.graph import check_topology, network
    sink = Sink()
    check_topology(p, network(p), sink)
    return [f"{d.span}: {d.message}" for d in sink.errors]


@functools.lru_cache(maxsize=None)
def dispatched(family: str, seed: int):
    """The engine's dispatch of one random portfolio at zero gap (cached).

    No re-solve with slacks when infeasible: these tests only need the status.
    """
    from portfolio.dispatch import dispatch
    from portfolio.solve import SolveOptions
    return dispatch(make(family, seed), SolveOptions(mip_gap=0.0, explain_infeasible=False))
