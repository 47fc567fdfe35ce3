"""Expressions written once: for the compiler's rows and for a solution's values.

A quantity the model's rows use and the schedule tables report -- a store's
total charge, what a route carries away and what arrives after its delay, the
net flow through a site's or connection's meter -- is defined here once, as
which variable entries it sums and with what coefficients.  The constraint
families turn a definition into row terms at one step (``*_terms``, column
numbers from :class:`~.context.Ctx`); :mod:`portfolio.schedule` evaluates the
same definition on a solution's value arrays (``*_values``, through
:class:`Values`).

The variable families the compiler always declares are named here
(:data:`CHARGE_SITE` ...); a name the compiled model does not have is an
error when read (:class:`UnknownVariable`), never a column of zeros.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Dict, Hashable, List, Optional, Tuple

import numpy as np

from ..model import ROUTE_PUMP, Portfolio, Route
from ..topology import Topology

# The variable families declared for every portfolio (compile/__init__.py documents them).
CHARGE_SITE = "charge_site"
SUPPLY_TO = "supply_to"
SUPPLY_SITE = "supply_site"
CURTAILED = "curtailed"
DISCHARGE = "discharge"
SOC = "soc"
SPILL = "spill"
TRANSFER = "transfer"
PUMPED = "pumped"
SITE_IMPORT, SITE_EXPORT = "site_import", "site_export"
CONN_IMPORT, CONN_EXPORT = "conn_import", "conn_export"

# A linear expression at one step: (coefficient, variable family, asset) parts.
Part = Tuple[float, str, Hashable]


class UnknownVariable(KeyError):
    """A variable family the compiled model does not have (a misspelt name)."""


# -- definitions ---------------------------------------------------------------------

def total_charge(topo: Topology, k: str) -> List[Part]:
    """Total charge of store ``k``: its draw from the site plus the supplies fed straight in."""
    return [(1.0, CHARGE_SITE, k)] + [(1.0, SUPPLY_TO, (i, k)) for i in topo.supplies_into(k)]


def drawn_for_discharge(p: Portfolio, k: str) -> List[Part]:
    """MW drawn from store ``k``'s content to discharge (store side: discharge / eta_discharge).

    Equivalent full cycles count this (docs/model.md): MWh drawn for discharge over the
    usable capacity (``Storage.usable_mwh``), so emptying a store once from soc max to soc
    min is one cycle whatever its discharge efficiency.  Spill and routes other than
    release (transfers) are not discharge and are not counted.
    """
    return [(1.0 / p.storages[k].eta_discharge, DISCHARGE, k)]


def calendar_days(horizon) -> List[Tuple[str, Tuple[int, ...], float]]:
    """The calendar days of the horizon's zone it touches: (date, its steps, share).

    A step belongs to the day its start falls in; ``share`` is the hours of that day the
    horizon covers over the day's length (24 h; 23 or 25 on a daylight-saving change),
    at most 1: a first or last day cut by the horizon gets its limit pro rata.
    """
    import pandas as pd

    idx = horizon.index
    if len(idx) == 0:
        return []
    days = idx.normalize()
    out = []
    codes, uniques = pd.factorize(days)
    for j, day in enumerate(uniques):
        steps = tuple(int(t) for t in np.flatnonzero(codes == j))
        length_h = ((day + pd.DateOffset(days=1)) - day) / pd.Timedelta(hours=1)
        share = min(1.0, len(steps) * horizon.step_hours / length_h)
        out.append((day.strftime("%Y-%m-%d"), steps, share))
    return out


def supply_used(topo: Topology, i: str) -> List[Part]:
    """What supply ``i`` delivers: to its site and straight into its stores."""
    return [(1.0, SUPPLY_SITE, i)] + [(1.0, SUPPLY_TO, (i, k)) for k in topo.supply_targets(i)]


def meter(kind: str, name: str) -> List[Part]:
    """Net export through the meter of a ``site`` or a ``connection`` (export - import)."""
    exp, imp = (SITE_EXPORT, SITE_IMPORT) if kind == "site" else (CONN_EXPORT, CONN_IMPORT)
    return [(1.0, exp, name), (-1.0, imp, name)]


@dataclass(frozen=True)
class RouteFlow:
    """What leaves the source of a route, in the source's stored MW: ``variable[asset] / divisor``.

    release: the source's discharge over its discharge efficiency; spill: its
    spill; transfer: the route's own transfer variable; pump: the route's own
    pumped variable (the water the upper store's charge lifts, :func:`pump_lift`).
    """

    variable: str
    asset: Hashable
    divisor: float = 1.0


def route_flow(p: Portfolio, r: Route) -> RouteFlow:
    if r.kind == "release":
        return RouteFlow(DISCHARGE, r.source, p.storages[r.source].eta_discharge)
    if r.kind == "spill":
        return RouteFlow(SPILL, r.source)
    if r.kind == ROUTE_PUMP:
        return RouteFlow(PUMPED, r.name)
    return RouteFlow(TRANSFER, r.name)


def pump_lift(p: Portfolio, topo: Topology, r: Route) -> List[Part]:
    """MW of the lower store's content a pump route ``r`` lifts: what the upper store's
    charge stores, ``eta_charge[upper] * total_charge[upper]``, over the route's factor
    (MWh in the upper store per MWh taken from the lower one).  The ``pumping`` family
    sets the route's :data:`PUMPED` variable to it."""
    up = p.storages[r.target]
    return [(c * up.eta_charge / r.factor, var, asset) for c, var, asset in total_charge(topo, r.target)]


def route_gain(r: Route) -> float:
    """Arriving MWh per MWh that left (factor and efficiency)."""
    return r.factor * r.efficiency


def balance_routes(topo: Topology, k: str) -> Tuple[tuple, tuple]:
    """The routes store ``k``'s balance adds and subtracts: (arriving, leaving).

    Every route into ``k`` adds what arrives, except a pump route: what it lifts
    is already the store's charge (``eta_charge * c``).  Routes out of ``k`` whose
    flow no variable of ``k`` takes out already (a transfer; a pump, which takes
    the water the upper store's charge lifts) are subtracted; release and spill
    leave through ``k``'s discharge and spill.
    """
    arriving = tuple(r for r in topo.routes_into(k) if r.kind != ROUTE_PUMP)
    leaving = tuple(r for r in topo.routes_out_of(k) if r.kind in ("transfer", ROUTE_PUMP))
    return arriving, leaving


# -- rows: terms at one step ----------------------------------------------------------

def terms(ctx, parts: List[Part], t: int, coef: float = 1.0) -> List[Tuple[float, int]]:
    """``coef *`` an expression at step ``t`` as row terms (absent entries left out)."""
    out = []
    for c, var, asset in parts:
        v = ctx.v(var, asset, t)
        if v is not None:
            out.append((coef * c, v))
    return out


def route_out_terms(ctx, r: Route, t: int) -> List[Tuple[float, int]]:
    """MWh leaving along route ``r`` in step ``t`` (source units); none outside the horizon."""
    f = route_flow(ctx.p, r)
    if not (0 <= t < ctx.T) or not ctx.has(f.variable, f.asset):
        return []
    return [(ctx.dt / f.divisor, ctx.v(f.variable, f.asset, t))]


def route_arriving_terms(ctx, r: Route, t: int) -> Tuple[List[Tuple[float, int]], float]:
    """MWh arriving along ``r`` in step ``t``: (terms, constant).  Before the delay has
    passed, what was in transit at the start arrives, spread evenly."""
    D = int(r.delay_steps)
    if t >= D:
        gain = route_gain(r)
        return [(gain * c, v) for c, v in route_out_terms(ctx, r, t - D)], 0.0
    return [], (r.in_transit / D if D > 0 else 0.0)


# -- values: a solution's arrays --------------------------------------------------------

class Values:
    """A solution's values read by variable family and asset: ``T`` floats each.

    An asset the family has no entry for reads as zeros (e.g. the charge of a
    store that cannot charge); a family the compiled model does not have
    raises :class:`UnknownVariable`.
    """

    def __init__(self, built, values: Dict[str, np.ndarray]):
        self.built = built
        self.values = values
        self.steps = built.steps
        self.dt = built.step_hours

    def __call__(self, var: str, asset: Hashable) -> np.ndarray:
        return np.asarray(self.built.array(self.values, var, asset), dtype=float)

    def of(self, parts: List[Part]) -> np.ndarray:
        """An expression on every step (parts summed in order)."""
        out: Optional[np.ndarray] = None
        for c, var, asset in parts:
            x = self(var, asset)
            x = x if c == 1.0 else c * x
            out = x.copy() if out is None else out + x
        return np.zeros(self.steps) if out is None else out

    def route_flow(self, p: Portfolio, r: Route) -> np.ndarray:
        """MW leaving along route ``r`` on every step (source units)."""
        f = route_flow(p, r)
        return self(f.variable, f.asset) / f.divisor


def route_arriving_mwh(r: Route, flow: np.ndarray, dt: float) -> np.ndarray:
    """MWh arriving along ``r`` on every step, from its flow (MW): as :func:`route_arriving_terms`."""
    T = len(flow)
    D = int(r.delay_steps)
    arrive = np.zeros(T)
    if D > 0:
        arrive[:min(D, T)] = r.in_transit / D
    if D < T:
        arrive[D:] = route_gain(r) * flow[:T - D] * dt
    return arrive


def route_in_transit_end(r: Route, flow: np.ndarray, dt: float) -> float:
    """MWh still on its way along ``r`` at the end of the horizon (target units)."""
    T = len(flow)
    D = int(r.delay_steps)
    left = route_gain(r) * float(flow[max(T - D, 0):].sum()) * dt if D > 0 else 0.0
    if D > T:  # part of what was in transit at the start has not arrived by the end either
        left += r.in_transit * (D - T) / D
    return left
