"""The network's declarations: grid connections and their prices, the 'total'
caps, sites with their demands and supplies, and routes between stores.

Paths through the network (what can reach what) are checked later, on the
graph (:func:`portfolio.graph.check_topology`).
"""

from __future__ import annotations

import math
from typing import Dict, List, Optional, Tuple

from .. import model as M
from .. import units as U
from ..diagnostics import (DelayNotWhole, DuplicateName, DuplicateSetting, NameCaseClash, ExportUnpriced, Implausible,
                           ImportUnpriced, OutOfRange, RouteDuplicate, RouteKindMismatch, RouteToSelf,
                           SourceChargeMismatch, SpillNotAllowed, UnusedSetting, WaterFromNothing)
from .context import Context
from .horizon import MAX_STEPS
from .names import a, listed_once
from .quantities import fmt
from .sources import series_spec
from .storage import check_storage
from .tree import Block, PriceExpr, Route, Setting, said

# What a route kind may join: (source kind, target kind).  docs/language.md
ROUTE_RULES = {
    M.ROUTE_RELEASE: {(M.KIND_RESERVOIR, M.KIND_RESERVOIR), ("other", "other")},
    M.ROUTE_SPILL: {(M.KIND_RESERVOIR, M.KIND_RESERVOIR), ("other", "other")},
    M.ROUTE_PUMP: {(M.KIND_RESERVOIR, M.KIND_RESERVOIR), ("other", "other")},
    M.ROUTE_TRANSFER: {(M.KIND_THERMAL, M.KIND_THERMAL), (M.KIND_RESERVOIR, M.KIND_RESERVOIR),
                       ("other", "other")},
}


def settings(ck: Context, nodes, what: str) -> Dict[str, Setting]:
    """Settings by key; a second one with the same key is reported and left out."""
    out: Dict[str, Setting] = {}
    for n in nodes:
        if n.key in out:
            ck.sink.add(DuplicateSetting, n.span, f"'{said(n.key)}' is given twice in {what}",
                        f"note: first given at {out[n.key].span}")
            continue
        out[n.key] = n
    return out


def _limits(ck: Context, s: Dict[str, Setting], what: str):
    """The export and import limits among ``s``: (values, spans); ``what`` names them in messages."""
    vals, spans = {}, {}
    for key in ("export_max", "import_max"):
        if key in s:
            vals[key] = ck.units.power(s[key].value, what.format(said(key)))
            spans[key] = s[key].span
    return vals, spans


# -- connections and caps ----------------------------------------------------------------

def check_connection(ck: Context, st: Block) -> M.Connection:
    name = st.name.text
    s = settings(ck, st.settings, f"connection '{name}'")
    vals, spans = _limits(ck, s, f"the {{}} of '{name}'")
    for key in ("sell", "buy"):
        if key in s:
            vals[key] = price_expr(ck, s[key].value, name)
            spans[key] = s[key].span
    if "direction_exclusive" in s:
        vals["exclusive"] = True
        spans["exclusive"] = s["direction_exclusive"].span
    _check_prices(ck, st, s, vals)
    return M.Connection(name=name, span=st.span, spans=spans, **vals)


def _check_prices(ck: Context, st: Block, s: Dict[str, Setting], vals: dict) -> None:
    """Every direction a connection can carry needs a price: a missing buy price
    would make imports free (an error), a missing sell price makes exports worthless."""
    name, sp = st.name.text, st.name.span
    if "buy" not in s and vals.get("import_max", 1.0) != 0:
        ck.sink.add(ImportUnpriced, sp, f"connection '{name}' can import but has no 'buy at' price: "
                    "imported energy would be free; write 'buy at 0 per MWh' if that is really meant",
                    "note: give the price it buys at, e.g. 'buy at spot plus 9.5 per MWh'",
                    "note: or write 'import max 0 MW' if the connection cannot import")
    if "sell" not in s and vals.get("export_max", 1.0) != 0:
        ck.sink.add(ExportUnpriced, sp, f"connection '{name}' can export but has no 'sell at' price: "
                    "exported energy earns nothing",
                    "note: write 'sell at 0 per MWh' if exports really earn nothing",
                    "note: or 'export max 0 MW' if the connection cannot export")


def price_expr(ck: Context, node: PriceExpr, owner: str) -> Optional[M.PriceExpr]:
    if node.series is None:
        got = ck.units.quantity(node.quantity, (U.PRICE,), f"the price of '{owner}'")
        return M.PriceExpr(series=None, adder=got[1], span=node.span) if got else None
    series = ck.names.ref(node.series, ("price",), "price series")
    adder = 0.0
    if node.sign is not None:
        got = ck.units.quantity(node.quantity, (U.PRICE,), f"the price adder of '{owner}'")
        if got is None:
            return None
        adder = got[1] if node.sign.text == "plus" else -got[1]
    return M.PriceExpr(series=series, adder=adder, span=node.span) if series else None


def check_cap(ck: Context, st: Block) -> M.Cap:
    s = settings(ck, st.settings, "the 'total' limits")
    vals, spans = _limits(ck, s, "the total {}")
    if not s:
        ck.sink.add(UnusedSetting, st.span, "'total' declares no limit")
    return M.Cap(name="total", span=st.span, spans=spans, **vals)


# -- sites ----------------------------------------------------------------------------------

def check_site(ck: Context, st: Block, found: dict) -> None:
    """Add the site, and what it holds, to ``found`` (the portfolio's collections by field name)."""
    name = st.name.text
    conn = ck.names.ref(st.other, ("connection",), "connection")
    limits = settings(ck, [i for i in st.settings if i.key in ("export_max", "import_max")], f"site '{name}'")
    vals, spans = _limits(ck, limits, f"the {{}} of site '{name}'")
    found["sites"][name] = M.Site(name=name, connection=conn or "", span=st.span, spans=spans, **vals)
    for item in st.settings:
        if item.key == "demand":
            series_spec(ck.units, ck.specs, item.name, item.source, "power", item.span)
            found["demands"][item.name.text] = M.Demand(name=item.name.text, site=name, profile=item.name.text,
                                                        span=item.span)
        elif item.key == "storage":
            s = check_storage(ck, item, name)
            if s is not None:
                found["storages"][s.name] = s
        elif item.key == "supply":
            i = check_supply(ck, item, name)
            found["supplies"][i.name] = i
        elif item.key == "route":
            r = route_syntax(ck, item)
            if r:
                found["routes"].append(r)


def check_supply(ck: Context, node: Block, site: str) -> M.Supply:
    nm = node.name.text
    series_spec(ck.units, ck.specs, node.name, node.other, "power", node.span)
    s = settings(ck, node.settings, f"supply '{nm}'")
    targets: List[str] = []
    spans = {}
    if "into" in s:
        spans["targets"] = s["into"].span
        targets = listed_once(ck.sink, (("site" if t.name is None else ck.names.ref(t.name, ("storage",), "storage"),
                                         t.span) for t in s["into"].value))
    else:
        targets = ["site"]
    curtail = False
    if "curtail" in s:
        curtail = s["curtail"].value.text == "allowed"
        spans["curtail_allowed"] = s["curtail"].span
    return M.Supply(name=nm, site=site, profile=nm, targets=tuple(targets), curtail_allowed=curtail,
                    span=node.span, spans=spans)


# -- charging sources ------------------------------------------------------------------------

def check_charging_sources(ck: Context, storages: Dict[str, M.Storage], supplies: Dict[str, M.Supply]) -> None:
    """A store's charging sources agree with the supplies fed into it (``P512``).

    * ``charge off`` (or no ``charge max``) with a supply ``into`` the store: that supply
      could never charge it; a store that is to charge from its own sources alone says
      ``charge max P  charge only from SUPPLY``.
    * ``charge only from A``: A is a supply whose ``into`` names the store (its power goes
      straight in; what a supply gives its site pools with the grid and cannot be told
      apart), and every supply fed into the store is named.
    """
    feeding: Dict[str, List[M.Supply]] = {}
    for i in supplies.values():
        for t in i.targets:
            if t != "site":
                feeding.setdefault(t, []).append(i)
    for k, s in storages.items():
        into = feeding.get(k, [])
        if s.charge_sources is None:
            if s.charge_max <= 0:
                for i in into:
                    ck.sink.add(SourceChargeMismatch, i.where("targets"),
                                f"supply '{i.name}' is fed into '{k}', which cannot charge: it would never take any of it",
                                f"note: '{k}' has no charge power ('charge off', the default)",
                                f"fix: to charge '{k}' from '{i.name}' and never from the grid, write "
                                f"'charge max P  charge only from {i.name}' in '{k}'")
            continue
        named = set(s.charge_sources)
        for n in s.charge_sources:
            i = supplies.get(n)
            if i is not None and k not in i.targets:
                ck.sink.add(SourceChargeMismatch, s.where("charge_sources"),
                            f"'{k}' charges only from '{n}', but '{n}' is not fed into it",
                            f"note: '{n}' goes into {', '.join(i.targets)} (declared at {i.span})",
                            f"fix: add '{k}' to the 'into' of supply '{n}'")
        for i in into:
            if i.name not in named:
                ck.sink.add(SourceChargeMismatch, i.where("targets"),
                            f"supply '{i.name}' is fed into '{k}', which charges only from "
                            f"{', '.join(repr(n) for n in s.charge_sources)}",
                            f"fix: add '{i.name}' to the 'charge only from' of '{k}', or take '{k}' out of its 'into'")


# -- routes ---------------------------------------------------------------------------------

def route_syntax(ck: Context, st: Route) -> Optional[Tuple[M.Route, float]]:
    """A route as written, with its delay in hours (made steps in :func:`check_routes`)."""
    src = ck.names.ref(st.source, ("storage",), "storage")
    kind = st.kind.text
    dst = ck.names.ref(st.target, ("storage",), "storage")
    opts = settings(ck, st.options, "the route")
    spans = {"source": st.source.span, "target": st.target.span}
    vals = {}
    delay_h = 0.0
    if "delay" in opts:
        got = ck.units.quantity(opts["delay"].value, (U.TIME,), "the delay")
        if got is not None:
            delay_h = got[1]
            if delay_h < 0:
                ck.sink.add(OutOfRange, opts["delay"].span, "the delay cannot be negative")
                delay_h = 0.0
        spans["delay_steps"] = opts["delay"].span
    if "factor" in opts:
        vals["factor"] = _factor(ck, opts["factor"])
        spans["factor"] = opts["factor"].span
    if "route_max" in opts:
        vals["max_mw"] = ck.units.power(opts["route_max"].value, "the route's max")
        spans["max_mw"] = opts["route_max"].span
    if "route_efficiency" in opts:
        _route_efficiency(ck, opts["route_efficiency"], kind, vals, spans)
    if "in_transit" in opts:
        got = ck.units.quantity(opts["in_transit"].value, (U.ENERGY,), "what is in transit at the start")
        if got is not None:
            if got[1] < 0:
                ck.sink.add(OutOfRange, opts["in_transit"].span, "what is in transit cannot be negative")
            vals["in_transit"] = got[1]
        spans["in_transit"] = opts["in_transit"].span
    if kind == M.ROUTE_PUMP:
        delay_h = _pump_options(ck, opts, vals, spans)
    if src is None or dst is None:
        return None
    r = M.Route(name=f"{src}_{kind}_to_{dst}", source=src, kind=kind, target=dst, span=st.span,
                spans=spans, **vals)
    return r, delay_h  # the delay in steps is settled in check_routes, once the horizon is known


def _factor(ck: Context, opt: Setting) -> float:
    f = float(opt.value.text)
    if not (f > 0 and math.isfinite(f)):
        ck.sink.add(OutOfRange, opt.span, f"the factor must be above zero, found {fmt(f)}")
    elif f > U.FACTOR_PLAUSIBLE:
        ck.sink.add(Implausible, opt.span, f"the factor {fmt(f)} is beyond any "
                    f"plausible conversion (at most {U.FACTOR_PLAUSIBLE:g})")
    return f


def _route_efficiency(ck: Context, opt: Setting, kind: str, vals: dict, spans: dict) -> None:
    got = ck.units.quantity(opt.value, (U.FRACTION,), "the route's efficiency")
    if got is not None:
        if not 0 < got[1] <= 1:
            ck.sink.add(OutOfRange, opt.span,
                        f"the route's efficiency must be above 0 % and at most 100 %, found {fmt(got[1] * 100)} %")
        vals["efficiency"] = got[1]
    spans["efficiency"] = opt.span
    if kind == M.ROUTE_PUMP:
        vals.pop("efficiency", None)   # _pump_options says where a pump's efficiency is declared
    elif kind != M.ROUTE_TRANSFER:
        ck.sink.add(UnusedSetting, opt.span,
                    f"an efficiency applies to 'transfer' routes; a {kind} route loses nothing on the way (use 'factor')")


# What a pump route ignores, and where the pump's own figure is declared instead.
PUMP_IGNORES = {
    "delay": "pumped water reaches the upper store in the step it is pumped",
    "in_transit": "pumped water reaches the upper store in the step it is pumped",
    "route_max": "the pump's power is the upper store's 'charge max' (MW drawn from the grid)",
    "route_efficiency": "the pump's efficiency is the upper store's charge efficiency "
                        "('efficiency charge X% discharge Y%' or 'efficiency round trip Z%')",
}


def _pump_options(ck: Context, opts: dict, vals: dict, spans: dict) -> float:
    """A pump route takes a factor only: its power, efficiency and modes are the upper
    store's charge settings, and it has no delay.  Anything else is warned and dropped."""
    for key, why in PUMP_IGNORES.items():
        if key in opts:
            ck.sink.add(UnusedSetting, opts[key].span, f"a pump route ignores this: {why}",
                        "note: a pump route takes only a 'factor' (MWh in the upper store per MWh "
                        "taken from the lower one)")
            spans.pop({"route_max": "max_mw", "route_efficiency": "efficiency",
                       "delay": "delay_steps"}.get(key, key), None)
    for field in ("max_mw", "efficiency", "in_transit"):
        vals.pop(field, None)
    return 0.0


def check_pumps(ck: Context, routes: List[Tuple[M.Route, float]], storages: Dict[str, M.Storage]) -> None:
    """Charging a reservoir moves water: it must say where from (``P513``).

    A reservoir's charge is its pump (``route LOWER pump -> RESERVOIR``): MW drawn
    from its site, or from supplies fed into it, lift water from the lower store at
    the charge efficiency.  A reservoir that charges with no pump route into it would
    make water from nothing; so would a pump factor whose product with the factor of
    a release or spill back down the same pair is above 1 (``P313``).  The other way
    round, a pump route into a store that cannot charge never moves anything (``P308``).
    """
    pumped = {}
    for r, _ in routes:
        if r.kind == M.ROUTE_PUMP:
            pumped.setdefault(r.target, r)
    for k, s in storages.items():
        if s.kind == M.KIND_RESERVOIR and s.charge_max > 0 and k not in pumped:
            ck.sink.add(WaterFromNothing, s.where("charge_max"),
                        f"reservoir '{k}' charges, but no pump route brings it water: "
                        "its charge would make water from nothing",
                        "note: a reservoir's charge is its pump; the water it lifts comes from a lower store",
                        f"fix: add 'route LOWER pump -> {k}' naming the store it pumps from, "
                        f"or write 'charge off' in '{k}'")
    for k, r in pumped.items():
        for back, _ in routes:
            if back.kind in (M.ROUTE_RELEASE, M.ROUTE_SPILL) and back.source == k and back.target == r.source \
                    and r.factor * back.factor > 1 + 1e-9:
                ck.sink.add(Implausible, r.where("factor"),
                            f"pumping from '{r.source}' to '{k}' (factor {fmt(r.factor)}) and the {back.kind} "
                            f"back (factor {fmt(back.factor)}) make water going round: each MWh pumped up "
                            f"comes back as {fmt(r.factor * back.factor)} MWh before any losses",
                            f"note: the {back.kind} route is declared at {back.span}",
                            f"fix: for one pair of pools the factors are each other's inverse: "
                            f"'factor {fmt(1 / back.factor)}' on the pump route")
        s = storages.get(k)
        if s is not None and s.charge_max <= 0:
            ck.sink.add(UnusedSetting, r.span, f"'{k}' cannot charge, so nothing is ever pumped into it",
                        f"note: the pump's power is the charge of '{k}': give it a 'charge max'")


def check_routes(ck: Context, routes: List[Tuple[M.Route, float]], storages: Dict[str, M.Storage]) -> List[M.Route]:
    """Routes in steps of the horizon, each joining stores it may join, under a name of its own."""
    check_pumps(ck, routes, storages)
    out = []
    taken: set = set()
    seen: Dict[Tuple[str, str], M.Route] = {}
    for r, delay_h in routes:
        d = _delay_steps(ck, r, delay_h)
        if d is None:
            continue
        steps, ok = d
        if r.in_transit > 0 and steps == 0:
            ck.sink.add(UnusedSetting, r.where("in_transit"), "nothing can be in transit on a route with no delay")
        ok = _joins(ck, r, storages, seen) and ok
        if ok and ck.horizon is not None and steps > ck.horizon.steps:
            ck.sink.add(UnusedSetting, r.where("delay_steps"),
                        f"the delay ({steps} steps) is longer than the horizon ({ck.horizon.steps} steps): "
                        "nothing sent down this route arrives within it")
        if not ok:
            continue
        name = _output_name(ck, r, taken)
        if name is None:
            continue
        taken.add(name)
        out.append(M.Route(name=name, source=r.source, kind=r.kind, target=r.target, delay_steps=steps,
                           factor=r.factor, efficiency=r.efficiency, max_mw=r.max_mw,
                           in_transit=r.in_transit, span=r.span, spans=r.spans))
    return out


def _delay_steps(ck: Context, r: M.Route, delay_h: float) -> Optional[Tuple[int, bool]]:
    """(the delay in whole steps, whether it was whole); None when no horizon could hold it."""
    step = ck.horizon.step_hours if ck.horizon else None
    if not step:
        return 0, True
    d = delay_h / step
    if not d <= MAX_STEPS:
        ck.sink.add(OutOfRange, r.where("delay_steps"), f"the delay of {fmt(delay_h)} h is longer "
                    f"than any horizon can be ({MAX_STEPS} steps)")
        return None
    ok = True
    if abs(d - round(d)) > 1e-6:
        ck.sink.add(DelayNotWhole, r.where("delay_steps"),
                    f"the delay of {fmt(delay_h)} h is not a whole number of {fmt(step * 60)}-minute steps")
        ok = False
    return int(round(d)), ok


def _joins(ck: Context, r: M.Route, storages: Dict[str, M.Storage], seen: dict) -> bool:
    """The route joins two different stores of kinds its kind may join, the first of its kind from its source."""
    ok = True
    src, dst = storages.get(r.source), storages.get(r.target)
    if r.source == r.target:
        ck.sink.add(RouteToSelf, r.span, f"'{r.source}' cannot route to itself")
        ok = False
    key = (r.source, r.kind)
    if key in seen and r.kind not in (M.ROUTE_TRANSFER, M.ROUTE_PUMP):   # a pool may feed two pumps
        ck.sink.add(RouteDuplicate, r.span, f"'{r.source}' already has a {r.kind} route",
                    f"note: first declared at {seen[key].span}")
        ok = False
    seen.setdefault(key, r)
    if r.kind == M.ROUTE_PUMP:   # the upper store's charge draws from one lower store
        into = (r.target, "pump into")
        if into in seen:
            ck.sink.add(RouteDuplicate, r.span, f"'{r.target}' already has a pump route into it",
                        f"note: first declared at {seen[into].span}")
            ok = False
        seen.setdefault(into, r)
    if src is None or dst is None:
        return ok
    sk = src.kind if src.kind in M.KNOWN_KINDS else "other"
    tk = dst.kind if dst.kind in M.KNOWN_KINDS else "other"
    if (sk, tk) not in ROUTE_RULES[r.kind]:
        allowed = ", ".join(f"{x} -> {y}" for x, y in sorted(ROUTE_RULES[r.kind]))
        ck.sink.add(RouteKindMismatch, r.span, f"a {r.kind} route cannot join a {src.kind} to a {dst.kind}",
                    f"note: a {r.kind} route may join: {allowed}")
        ok = False
    if r.kind == M.ROUTE_SPILL and not src.spill_allowed:
        ck.sink.add(SpillNotAllowed, r.span, f"'{r.source}' does not allow spill, so nothing can flow down this spill route",
                    f"note: add 'spill allowed' to '{r.source}'")
        ok = False
    if r.kind == M.ROUTE_RELEASE and src.discharge_max <= 0:
        ck.sink.add(UnusedSetting, r.span, f"'{r.source}' cannot discharge, so it never releases anything")
    return ok


def _output_name(ck: Context, r: M.Route, taken: set) -> Optional[str]:
    """A unique output name: a second transfer between the same two stores gets a suffix."""
    name, n = r.name, 2
    while name in taken:
        name = f"{r.name}_{n}"
        n += 1
    if name in ck.names:
        ck.sink.add(DuplicateName, r.span, f"this route's output name '{name}' is already declared "
                    f"(as {a(ck.names[name].kind)})",
                    f"note: '{name}' is declared at {ck.names[name].span}; rename one of them")
        return None
    other = ck.names.same_but_case(name)
    if other is not None:
        ck.sink.add(NameCaseClash, r.span, f"this route's output name '{name}' differs from '{other}' only "
                    "in letter case; their output files would overwrite each other where file names ignore case",
                    f"note: '{other}' is declared at {ck.names[other].span}; rename one of them")
        return None
    return name
