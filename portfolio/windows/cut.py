"""One window's portfolio, made from the checked model and the schedule committed so far.

:func:`window_model` slices the horizon and every series, and carries in,
per storage, what the committed schedule did before the window:

* ``soc_start``: its state of charge at the end of the step before;
* ``prior_mode`` / ``prior_h`` / ``prior_net_mw`` (the language's ``was ...
  for ... at ...``): the mode it was in, for how long (joined to the
  portfolio's own carried-in state when the run or rest began before the
  horizon) and its net output, for minimum run and rest and for the ramp;
* ``arriving``: water released before the window on a delayed route that
  arrives inside it (the route's own ``in_transit`` is then zero);
* ``cycles_days`` / ``cycles_drawn_mwh``: for cycle limits, what was drawn
  for discharge before the window, per calendar day and in all;
* its end: the last window keeps the portfolio's end rule; any other ends
  free, with what is left valued at the whole-horizon LP's marginal value
  (``stored_value``; water still on a delayed route at the LP's value in
  the route's target, ``Route.transit_value``), or, in target mode, at least the LP's state of charge,
  or, pinned, exactly the LP's state of charge; with limited foresight it
  ends with at least the level the portfolio's own end asks for, or, when
  that is free, what the portfolio started with (``hold``), free
  (``free``) or valued at a declared price per MWh, and never reads the
  whole-horizon LP; in each of these it keeps at least enough to still
  meet the portfolio's own end at full charge power (:func:`reach_floor`).

The values may also be the whole-horizon LP's rather than a committed
schedule: a parallel window's guess at its start (``run._parallel``), kept
only when the committed schedule turns out to leave the very same state.

Everything is read from the FULL compiled portfolio's columns (the committed
vector), so the window's carried-in state is exactly what the full model's
rows will see when the stitched schedule is checked.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Dict, Optional

import numpy as np
import pandas as pd

from ..compile import expressions as E
from ..model import (END_AT_LEAST, END_EQUAL, END_FREE, PRIOR_CHARGE, PRIOR_DISCHARGE, PRIOR_IDLE,
                     Portfolio, Storage)
from .spec import END_PIN, END_TARGET, END_VALUE, FREE, HOLD, OPEN

TOL = 1e-6     # MW: a flow below this is no flow (as schedule.MODE_TOL)
_CODE = {0: PRIOR_IDLE, 1: PRIOR_CHARGE, 2: PRIOR_DISCHARGE}


def window_model(p: Portfolio, full, values: Dict[str, np.ndarray], start: int, length: int,
                 end, relaxed) -> Portfolio:
    """The portfolio of the window ``start .. start + length - 1``.

    ``full``: the compiled whole portfolio; ``values``: its committed vector
    by variable family (steps before ``start`` are the committed schedule);
    ``end``: ``spec.END_VALUE``, ``END_TARGET``, ``END_PIN``, or with limited
    foresight ``HOLD``, ``FREE`` or a number; ``relaxed``: the whole-horizon LP
    (:class:`~.bound.Relaxed`; None with limited foresight).
    """
    h = p.horizon
    T = h.steps
    stop = start + length
    horizon, series = sliced(p, start, length)
    acc = E.Values(full, values)
    arriving = _arriving(p, full, acc, start, length) if start > 0 else {}
    storages = {}
    for k, s in p.storages.items():
        kw: dict = {}
        if start > 0:
            kw["soc_start"] = float(acc(E.SOC, k)[start - 1])
            kw.update(_prior(full, acc, k, s, start))
            kw["arriving"] = tuple(arriving.get(k, ()))
            kw.update(_cycles(p, acc, k, s, start, stop))
        if stop < T:
            kw.update(_end(end, s, k, stop, relaxed, h.step_hours, T - stop,
                           kw.get("soc_start", s.soc_start), length))
        storages[k] = replace(s, **kw)
    routes = p.routes if start == 0 else tuple(replace(r, in_transit=0.0) for r in p.routes)
    if stop < T:
        routes = tuple(replace(r, transit_value=_transit_value(end, r, relaxed, stop))
                       for r in routes)
    return replace(p, horizon=horizon, series=series, storages=storages, routes=routes)


def sliced(p: Portfolio, start: int, length: int):
    """(horizon, series) of the steps ``start .. start + length - 1`` of ``p``."""
    h = p.horizon
    begin = (pd.Timestamp(h.start).tz_convert("UTC")
             + pd.Timedelta(hours=start * h.step_hours)).tz_convert(h.zone)
    series = {n: replace(s, values=np.asarray(s.values)[start:start + length])
              for n, s in p.series.items()}
    return replace(h, start=begin, steps=length), series


def _end(end, s: Storage, k: str, stop: int, relaxed, dt: float, after: int, soc0: float,
         steps: int) -> dict:
    """The end of a window that is not the last (``stop``: the step after it; ``after``: steps
    from there to the horizon's end; ``soc0``: the window's start; ``steps``: its length);
    ``s`` is the portfolio's own storage."""
    def within(v: float) -> float:
        return min(max(float(v), s.soc_min), s.soc_max)

    if end == END_VALUE:
        return {"end_rule": END_FREE, "end_value": 0.0,
                "stored_value": float(relaxed.value[k][stop - 1])}
    if end == END_TARGET:
        return {"end_rule": END_AT_LEAST, "end_value": within(relaxed.soc[k][stop - 1])}
    if end == END_PIN:
        return {"end_rule": END_EQUAL, "end_value": within(relaxed.soc[k][stop - 1])}
    if end == OPEN:
        return {"end_rule": END_FREE, "end_value": 0.0, "stored_value": 0.0}
    # keep enough to still meet the portfolio's own end, but never ask more than charging at
    # full power from the window's start can reach (a store fed only by its river keeps at
    # least what it had, and waits for the water)
    ceiling = reach_ceiling(s, dt, steps, soc0)
    floor = min(reach_floor(s, dt, after), ceiling)
    if end == HOLD:      # the level the portfolio's own end asks for, else what it started with
        level = s.end_value if s.end_rule in (END_AT_LEAST, END_EQUAL) else s.soc_start
        return {"end_rule": END_AT_LEAST, "end_value": within(max(min(level, ceiling), floor))}
    price = 0.0 if end == FREE else float(end)
    if floor > s.soc_min:
        return {"end_rule": END_AT_LEAST, "end_value": within(floor), "stored_value": price}
    return {"end_rule": END_FREE, "end_value": 0.0, "stored_value": price}


def _transit_value(end, r, relaxed, stop: int) -> float:
    """What a MWh still on its way along ``r`` at a window's end is worth: with ends valued,
    the LP's value of stored energy in the route's target at the window's end; with limited
    foresight and a price, that price; else nothing (a target or a pinned level counts only
    what is in store)."""
    if int(r.delay_steps) <= 0:
        return 0.0
    if end == END_VALUE:
        return float(relaxed.value[r.target][stop - 1])
    if end not in (END_TARGET, END_PIN, HOLD, FREE, OPEN):
        return float(end)
    return 0.0


def _charging(s: Storage, dt: float, n: int):
    """(retention over n steps, MWh gained in n steps at full charge power from empty)."""
    a = (1.0 - s.loss_per_h) ** dt
    g = s.charge_max * s.eta_charge * dt
    gained = g * n if a == 1.0 else g * (1.0 - a ** n) / (1.0 - a)
    return a ** n, gained


def reach_floor(s: Storage, dt: float, n: int) -> float:
    """The least a store must hold ``n`` steps before the horizon's end to still meet the
    portfolio's own end (``end at least`` / ``end exactly`` X) by charging at full power
    from there (with its losses): ``(X - gained) / retention`` (soc_min when its end is
    free).  Only declared limits enter it, never a price or an inflow to come, so a window of
    limited foresight may use it; water or heat that will flow in is not counted, which errs
    on the side of keeping too much."""
    if s.end_rule not in (END_AT_LEAST, END_EQUAL):
        return s.soc_min
    keep, gained = _charging(s, dt, n)
    return max(s.soc_min, (s.end_value - gained) / keep if keep > 0 else s.soc_max)


def reach_ceiling(s: Storage, dt: float, n: int, soc0: float) -> float:
    """The most a store can hold after ``n`` steps from ``soc0``, charging at full power."""
    keep, gained = _charging(s, dt, n)
    return min(s.soc_max, keep * soc0 + gained)


def _cycles(p: Portfolio, acc, k: str, s: Storage, start: int, stop: int) -> dict:
    """What a store with cycle limits drew for discharge before ``start``: per calendar day
    the window touches (with the whole horizon's share of it), and in all."""
    if s.cycles_per_day is None and s.cycles_horizon is None:
        return {}
    drawn = acc.of(E.drawn_for_discharge(p, k)) * p.horizon.step_hours
    days = []
    if s.cycles_per_day is not None:
        for day, steps, share in E.calendar_days(p.horizon):
            if steps[0] < stop and steps[-1] >= start:
                before = float(sum(drawn[t] for t in steps if t < start))
                days.append((day, share, before))
    return {"cycles_days": tuple(days), "cycles_drawn_mwh": float(drawn[:start].sum())}


def _net(full, acc, k: str, start: int) -> float:
    """Net output (discharge +, charge -) in the step before ``start``, MW."""
    d = acc(E.DISCHARGE, k)
    c = acc.of(E.total_charge(full.topology, k))
    return float(d[start - 1] - c[start - 1])


def _arriving(p: Portfolio, full, acc, start: int, length: int) -> Dict[str, list]:
    """Per target storage: (route, MWh per step) released before ``start`` that arrives
    at or after it (as :func:`portfolio.compile.expressions.route_arriving_terms`)."""
    out: Dict[str, list] = {}
    dt = full.step_hours
    for r in full.topology.routes:
        D = int(r.delay_steps)
        if D <= 0:
            continue
        flow = acc.route_flow(p, r)
        mwh = []
        for t in range(min(D, length)):
            src = start + t - D
            mwh.append(E.route_gain(r) * float(flow[src]) * dt if src >= 0 else r.in_transit / D)
        out.setdefault(r.target, []).append((r.name, tuple(mwh)))
    return out


def _states(full, acc, k: str) -> Optional[np.ndarray]:
    """Per step 0 idle, 1 charge, 2 discharge, from the mode binaries (None: the store has
    no run or rest binaries, so its mode is read from its flows)."""
    bins = full.expr.get("mode_bins", {}).get(k)
    if not bins or "one" in bins:
        return None
    state = np.zeros(full.steps, dtype=np.int8)
    if bins.get("charge"):
        state[np.round(acc(bins["charge"], k)) >= 1] = 1
    if bins.get("discharge"):
        state[np.round(acc(bins["discharge"], k)) >= 1] = 2
    return state


def _prior(full, acc, k: str, s: Storage, start: int) -> dict:
    """``prior_mode``, ``prior_h``, ``prior_net_mw`` at ``start`` from the committed schedule."""
    net = _net(full, acc, k, start)
    state = _states(full, acc, k)
    if state is None:
        if s.ramp_mw_per_h is None:
            return {}
        mode = PRIOR_DISCHARGE if net > TOL else PRIOR_CHARGE if net < -TOL else PRIOR_IDLE
        return {"prior_mode": mode, "prior_h": None, "prior_net_mw": net}
    now = int(state[start - 1])
    other = np.nonzero(state[:start] != now)[0]
    steps = start - 1 - int(other[-1]) if other.size else start
    hours: Optional[float] = steps * full.step_hours
    if not other.size:                # the same state since the horizon began: join what came before
        before = s.prior_mode or PRIOR_IDLE
        if before == _CODE[now]:
            hours = None if s.prior_h is None else s.prior_h + hours
        # an undeclared state is idle and rested: a run since step 0 began at step 0
    return {"prior_mode": _CODE[now], "prior_h": hours, "prior_net_mw": net}
