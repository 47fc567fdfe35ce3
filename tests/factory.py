"""Build checked :class:`portfolio.model.Portfolio` objects in Python.

Tests of the engine use these instead of ``.folio`` text so that they do
not depend on the front end.  Defaults are sensible: one site ``site`` on
one connection ``grid`` (no limits), hourly steps from 2027-03-01 UTC.

Every declaration gets a synthetic Span in the file ``factory.folio`` (one
line per declaration, in creation order) unless one is given, and settings
passed in ``at=`` get their own spans, so tests can check that an
infeasibility points at the right setting.
"""

from __future__ import annotations

import itertools
from typing import Dict, Iterable, Optional, Sequence

import numpy as np
import pandas as pd

from portfolio.model import (END_AT_LEAST, END_EQUAL, END_FREE, Cap, Connection, Demand, Horizon,
                             Portfolio, PriceExpr, Route, Series, Site, Storage, Supply,
                             rules_make_exclusive)
from portfolio.spans import Span

PATH = "factory.folio"
_lines = itertools.count(1)

__all__ = ["END_AT_LEAST", "END_EQUAL", "END_FREE", "span", "series", "price", "storage",
           "site", "connection", "supply", "demand", "route", "cap", "portfolio", "market"]


def span(line: Optional[int] = None, col: int = 1) -> Span:
    """A span in the synthetic file (next free line when ``line`` is None)."""
    line = next(_lines) if line is None else line
    return Span(PATH, line, col, line, col + 10)


def _decl_kw(at: Optional[Dict[str, int]], where: Optional[Span]) -> dict:
    spans = {f: span(line) for f, line in (at or {}).items()}
    return {"span": where or span(), "spans": spans}


def series(name: str, values: Sequence[float], quantity: str = "power") -> Series:
    return Series(name=name, values=np.asarray(values, dtype=float), quantity=quantity,
                  origin=f"factory series {name}", span=span())


def price(name: Optional[str] = None, adder: float = 0.0) -> PriceExpr:
    return PriceExpr(series=name, adder=adder, span=span())


def storage(name: str = "store", site: str = "site", energy: float = 1.0,
            power: Optional[float] = 1.0, *, at: Optional[Dict[str, int]] = None,
            where: Optional[Span] = None, **kw) -> Storage:
    """A storage; ``power`` sets both charge_max and discharge_max unless given.

    soc_max defaults to ``energy``; the end rule defaults to free; ``exclusive``
    defaults to what the checker would set (a minimum output, run or rest makes
    the modes exclusive).
    """
    kw.setdefault("charge_max", power if power is not None else 0.0)
    kw.setdefault("discharge_max", power if power is not None else 0.0)
    kw.setdefault("soc_max", energy)
    kw.setdefault("end_rule", END_FREE)
    kw.setdefault("exclusive", rules_make_exclusive(kw.get("charge_min", 0.0), kw.get("discharge_min", 0.0),
                                                    kw.get("min_run_h", 0.0), kw.get("min_rest_h", 0.0)))
    return Storage(name=name, site=site, energy=energy, **kw, **_decl_kw(at, where))


def site(name: str = "site", connection: str = "grid", *, at=None, where=None, **kw) -> Site:
    return Site(name=name, connection=connection, **kw, **_decl_kw(at, where))


def connection(name: str = "grid", *, sell: Optional[PriceExpr] = None,
               buy: Optional[PriceExpr] = None, at=None, where=None, **kw) -> Connection:
    return Connection(name=name, sell=sell, buy=buy, **kw, **_decl_kw(at, where))


def supply(name: str, profile: str, site: str = "site", targets: Iterable[str] = ("site",),
           *, at=None, where=None, **kw) -> Supply:
    return Supply(name=name, site=site, profile=profile, targets=tuple(targets), **kw,
                  **_decl_kw(at, where))


def demand(name: str, profile: str, site: str = "site", *, at=None, where=None) -> Demand:
    return Demand(name=name, site=site, profile=profile, **_decl_kw(at, where))


def route(name: str, source: str, target: str, kind: str = "release", *, at=None, where=None,
          **kw) -> Route:
    return Route(name=name, source=source, target=target, kind=kind, **kw, **_decl_kw(at, where))


def cap(name: str = "cap", *, at=None, where=None, **kw) -> Cap:
    return Cap(name=name, **kw, **_decl_kw(at, where))


def portfolio(steps: int, *, step_hours: float = 1.0, start: str = "2027-03-01T00:00:00",
              zone: str = "UTC", storages: Sequence[Storage] = (), supplies: Sequence[Supply] = (),
              demands: Sequence[Demand] = (), sites: Optional[Sequence[Site]] = None,
              connections: Optional[Sequence[Connection]] = None, routes: Sequence[Route] = (),
              cap: Optional[Cap] = None, series_list: Sequence[Series] = (),
              name: str = "test") -> Portfolio:
    """A Portfolio from declarations (one default site and connection if none)."""
    ts = pd.Timestamp(start)
    ts = ts.tz_localize(zone) if ts.tzinfo is None else ts.tz_convert(zone)
    hz = Horizon(start=ts, steps=steps, step_hours=step_hours, zone=zone, span=span())
    if sites is None:
        sites = [site()]
    if connections is None:
        connections = [connection()]
    for s in series_list:
        if len(s.values) != steps:
            raise ValueError(f"series {s.name} has {len(s.values)} values for {steps} steps")
    return Portfolio(
        name=name, path=PATH, horizon=hz,
        series={s.name: s for s in series_list},
        connections={c.name: c for c in connections},
        sites={s.name: s for s in sites},
        storages={s.name: s for s in storages},
        supplies={i.name: i for i in supplies},
        demands={d.name: d for d in demands},
        routes=tuple(routes), cap=cap, span=span(),
    )


def market(prices: Sequence[float], storages: Sequence[Storage] = (), *,
           buy: Optional[Sequence[float]] = None, step_hours: float = 1.0,
           connection_kw: Optional[dict] = None, site_kw: Optional[dict] = None,
           extra_series: Sequence[Series] = (), supplies: Sequence[Supply] = (),
           demands: Sequence[Demand] = (), routes: Sequence[Route] = (),
           start: str = "2027-03-01T00:00:00", zone: str = "UTC") -> Portfolio:
    """One site on one connection selling at ``prices`` and buying at ``buy``
    (same as ``prices`` when None)."""
    n = len(prices)
    sl = [series("sell_price", prices, "price")]
    if buy is not None:
        sl.append(series("buy_price", buy, "price"))
    conn = connection(sell=price("sell_price"), buy=price("buy_price" if buy is not None else "sell_price"),
                      **(connection_kw or {}))
    return portfolio(n, step_hours=step_hours, storages=storages, supplies=supplies, demands=demands,
                     routes=routes, sites=[site(**(site_kw or {}))], connections=[conn],
                     series_list=sl + list(extra_series), start=start, zone=zone)
