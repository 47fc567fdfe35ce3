"""Pumping (`route LOWER pump -> UPPER`, docs/language.md and docs/model.md): checks
from outside the code.

* Round trip: pumping E MWh of grid energy up and releasing all of it through
  the turbine gives back eta_charge * eta_discharge * E (analytic: the round-trip
  efficiency of two conversions in series is the product of the one-way
  efficiencies, by their definition), and the water comes back to the lower pool.
* A two-price day with an optimum derived by hand (comments beside each case),
  once limited by the upper pool and once by the water in the lower one (which
  a pump that made water from nothing would miss).
* The CBC oracle (tests/oracle_pulp.py, an independent formulation) on
  generated cascades with pumps (tests/random_portfolios.py, ``cascade``).
* Lint cases good and bad, the graph's pump edge, and the reversible machine:
  with exclusive modes it never pumps and generates in one step, and its
  minimum run holds.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pytest

import random_portfolios as RP
from audit import audit
from oracle_pulp import INFEASIBLE, OPTIMAL, solve_oracle
from portfolio import lint_text, load
from portfolio.graph import network

GRID = "connection grid { export max 50 MW import max 50 MW sell at spot buy at spot }\n"


def _text(prices, upper="", lower="", pump="", release="route upper release -> lower",
          upper_end="free", lower_mwh=20, extra=""):
    values = " ".join(str(x) for x in prices)
    return (f'horizon start 2027-05-03T00:00 length {len(prices)} h step 1 h zone "UTC"\n'
            f"price spot values [{values}] per MWh\n" + GRID
            + "site station at grid {\n"
              "  storage upper { kind reservoir energy 6 MWh charge max 5 MW discharge max 5 MW\n"
              f"                  efficiency charge 80% discharge 90% soc start 0 MWh end {upper_end} {upper} }}\n"
              f"  storage lower {{ kind reservoir energy {lower_mwh} MWh soc start {lower_mwh} MWh end free {lower} }}\n"
              f"{extra}  route lower pump -> upper {pump}\n  {release}\n}}\n")


def _dispatch(tmp_path: Path, text: str, name: str = "case", oracle: bool = True):
    path = tmp_path / f"{name}.folio"
    path.write_text(text, encoding="utf-8")
    loaded = load(path)
    r = loaded.dispatch()
    assert r.status == "optimal", r.message
    out = r.write(tmp_path / f"{name}_out")
    assert audit(loaded.model, out) == []
    if oracle:
        o = solve_oracle(loaded.model)
        assert o.status == OPTIMAL
        # as tests/test_oracle.py: 1e-6 relative plus 1e-6 absolute (CBC reports ~7 digits)
        assert r.objective == pytest.approx(o.objective, rel=1e-6, abs=1e-6), "engine and CBC oracle disagree"
    return loaded, r


# -- round trip -------------------------------------------------------------------------

@pytest.mark.parametrize("eta_c, eta_d, factor", [(0.8, 0.9, 1.0), (0.87, 0.91, 1.25), (0.75, 0.95, 0.8)])
def test_round_trip_is_the_product_of_the_two_efficiencies(tmp_path, eta_c, eta_d, factor):
    # analytic: E MWh drawn to pump store eta_c * E in the upper pool; releasing all of
    # it ('end equal start' from empty) delivers eta_d * eta_c * E.  The pump takes
    # eta_c * E / factor from the lower pool and the release (factor 1 / factor) brings
    # eta_c * E / factor back, so the lower pool ends where it began.
    text = (_text([10, 10, 10, 100, 100, 100], upper_end="equal start", pump=f"factor {factor}",
                  release=f"route upper release -> lower factor {1 / factor:.12g}")
            .replace("efficiency charge 80% discharge 90%",
                     f"efficiency charge {eta_c * 100:g}% discharge {eta_d * 100:g}%"))
    _, r = _dispatch(tmp_path, text)
    up, low = r.tables["upper"], r.tables["lower"]
    pumped_in = float(up["pump_mw"].sum())          # 1 h steps: MW = MWh
    delivered = float(up["discharge_mw"].sum())
    assert pumped_in > 1.0                          # it did pump
    assert delivered / pumped_in == pytest.approx(eta_c * eta_d, rel=1e-9)
    assert low["soc_mwh"].iloc[-1] == pytest.approx(20.0, abs=1e-9)
    flow = r.tables["lower_pump_to_upper"]
    assert float(flow["flow_mw"].sum()) == pytest.approx(eta_c * pumped_in / factor, rel=1e-9)


# -- a two-price day ---------------------------------------------------------------------

def test_two_price_day_limited_by_the_upper_pool(tmp_path):
    # Hand-derived: buy at 20 for two hours, sell at 90 for two (round trip 0.8 x 0.9 =
    # 0.72; 90 x 0.72 > 20, so pumping pays).  The upper pool (6 MWh, empty) binds before
    # the pump (2 h x 5 MW = 10 MWh of grid energy): it takes 6 / 0.8 = 7.5 MWh, stores
    # 6, and the turbine delivers 6 x 0.9 = 5.4 MWh within its 2 h x 5 MW.  The lower
    # pool (20 MWh) has water to spare.  Optimum: 90 x 5.4 - 20 x 7.5 = 486 - 150 = 336.
    _, r = _dispatch(tmp_path, _text([20, 20, 90, 90]))
    assert r.objective == pytest.approx(336.0, abs=1e-6)
    assert float(r.tables["upper"]["pump_mw"].sum()) == pytest.approx(7.5, abs=1e-6)


@pytest.mark.parametrize("factor, want", [(1.0, 168.0), (1.5, 252.0)])
def test_two_price_day_limited_by_the_water_below(tmp_path, factor, want):
    # Hand-derived: the lower pool holds only 3 MWh and nothing is released back into it
    # (no release route: the turbine's water leaves the pair).  The pump can lift at most 3 x factor
    # MWh into the upper pool (6 MWh, so it does not bind): factor 1: 3 MWh stored from
    # 3 / 0.8 = 3.75 MWh bought, 2.7 MWh sold; 90 x 2.7 - 20 x 3.75 = 243 - 75 = 168.
    # factor 1.5: 4.5 MWh stored from 5.625 bought, 4.05 sold; 364.5 - 112.5 = 252.
    # A pump that made water from nothing would earn 336 in both.
    text = _text([20, 20, 90, 90], lower_mwh=3, pump=f"factor {factor}", release="")
    _, r = _dispatch(tmp_path, text)
    assert r.objective == pytest.approx(want, abs=1e-6)
    assert r.tables["lower"]["soc_mwh"].iloc[-1] == pytest.approx(0.0, abs=1e-9)


# -- the reversible machine ----------------------------------------------------------------

# Negative prices: importing earns, so once the upper pool is full a free machine pumps
# and generates at once to go on importing (charge 5 MW, release 3.6 MW: net import 1.4 MW).
NEGATIVE = [-40, -40, -40, 60, -40, 60, 60, 60]


def test_a_free_machine_pumps_and_generates_at_once_where_it_pays(tmp_path):
    _, r = _dispatch(tmp_path, _text(NEGATIVE), "free")
    assert "both" in set(r.tables["upper"]["mode"])      # what the exclusive rule must stop


def test_an_exclusive_machine_never_pumps_and_generates_in_one_step(tmp_path):
    _, free = _dispatch(tmp_path, _text(NEGATIVE), "free")
    _, excl = _dispatch(tmp_path, _text(NEGATIVE, upper="modes exclusive"), "excl")
    up = excl.tables["upper"]
    both = (up["charge_mw"] > 1e-6) & (up["discharge_mw"] > 1e-6)
    assert not both.any()
    assert excl.objective < free.objective - 1e-6        # the rule binds here


def test_the_machines_minimum_output_and_run_hold_when_pumping(tmp_path):
    rules = "charge max 5 MW min 2 MW when running run at least 2 h"
    text = _text([20, 90, 20, 90, 20, 90, 20, 90], upper=rules).replace(
        "charge max 5 MW discharge max 5 MW", "discharge max 5 MW")
    _, r = _dispatch(tmp_path, text)
    up = r.tables["upper"]
    c, d = up["charge_mw"].to_numpy(), up["discharge_mw"].to_numpy()
    assert not ((c > 1e-6) & (d > 1e-6)).any()          # a run rule makes the modes exclusive
    assert (c[c > 1e-6] >= 2.0 - 1e-6).all()            # minimum pumping power when running
    assert c.sum() > 1.0
    # every pumping run lasts at least two steps (a run cut by the horizon's end may be shorter)
    runs, t = [], 0
    while t < len(c):
        if c[t] > 1e-6:
            s = t
            while t < len(c) and c[t] > 1e-6:
                t += 1
            runs.append((s, t))
        else:
            t += 1
    assert runs and all(e - s >= 2 or e == len(c) for s, e in runs), runs


# -- the CBC oracle on generated cascades with pumps -------------------------------------------

PUMPED_SEEDS = [s for s in range(20) if any(r.kind == "pump" for r in RP.make("cascade", s).routes)][:4]


@pytest.mark.parametrize("seed", PUMPED_SEEDS)
def test_generated_cascades_with_pumps_match_the_oracle(seed, tmp_path):
    p = RP.make("cascade", seed)
    assert RP.front_end_errors(p) == []
    with ThreadPoolExecutor(1) as pool:
        fut = pool.submit(solve_oracle, p)
        r = RP.dispatched("cascade", seed)
        o = fut.result()
    if r.status == "infeasible" or o.status == INFEASIBLE:
        assert (r.status, o.status) == ("infeasible", INFEASIBLE)
        pytest.skip("both infeasible")
    assert o.status == OPTIMAL and r.status == "optimal"
    assert r.objective == pytest.approx(o.objective, rel=1e-6, abs=1e-6)
    out = r.write(tmp_path / "out")
    assert audit(p, out) == []


def test_the_pumped_seeds_pump():
    assert len(PUMPED_SEEDS) == 4
    pumped = [RP.dispatched("cascade", s) for s in PUMPED_SEEDS]
    assert any(float(r.tables[k]["pump_mw"].sum()) > 1e-6 for r in pumped for k in
               [n for n, t in r.tables.items() if "pump_mw" in t.columns])


# -- lint, good and bad, and the graph --------------------------------------------------------

def _codes(text):
    return sorted(d.code for d in lint_text(text).diagnostics)


def test_a_pumped_pair_lints_clean_and_the_graph_has_its_pump_edge(tmp_path):
    text = _text([20, 20, 90, 90])
    assert _codes(text) == []
    path = tmp_path / "pair.folio"
    path.write_text(text, encoding="utf-8")
    g = network(load(path).model)
    assert g.has_edge("lower", "upper", "pump")
    topo = g.topology()
    assert topo.pump_into("upper").source == "lower"
    assert topo.pump_into("lower") is None


def test_a_lower_pool_with_no_turbine_reaches_the_grid_through_its_pump():
    # 'lower' cannot discharge: only the pump edge joins it to the grid (else P501)
    assert "P501" not in _codes(_text([20, 90]))
    alone = _text([20, 90], release="").replace("  route lower pump -> upper \n", "")
    alone = alone.replace("charge max 5 MW ", "")
    assert "P501" in _codes(alone)


def test_a_reservoir_charging_without_a_pump_is_water_from_nothing():
    text = _text([20, 90]).replace("  route lower pump -> upper \n", "")
    diags = [d for d in lint_text(text).diagnostics if d.code == "P513"]
    assert len(diags) == 1
    assert any("route LOWER pump -> upper" in n for n in diags[0].notes)


def test_a_pumped_pair_with_a_release_back_is_no_zero_delay_cycle():
    assert "P502" not in _codes(_text([20, 90]))
    loop = _text([20, 90]).replace("route lower pump -> upper", "route lower transfer -> upper")
    loop = loop.replace("charge max 5 MW ", "")
    assert "P502" in _codes(loop)      # a transfer back at zero delay is still refused


@pytest.mark.parametrize("pump, back, codes", [(1.25, 0.8, []), (1.5, 0.8, ["P313"]), (1.0, 0.8, [])])
def test_factors_round_a_pair_may_not_make_water(pump, back, codes):
    # 1 MWh of the upper pool released is worth `back` MWh below; pumped up again it is
    # worth pump x back MWh: above 1 it would grow going round (before any losses)
    text = _text([20, 90], pump=f"factor {pump}", release=f"route upper release -> lower factor {back}")
    assert _codes(text) == codes


def test_a_battery_charging_from_the_grid_is_not_water_from_nothing():
    text = ('horizon start 2027-05-03T00:00 length 2 h step 1 h zone "UTC"\n'
            "price spot values [20 90] per MWh\n" + GRID
            + "site yard at grid { storage cells { kind battery energy 2 MWh charge max 1 MW "
              "discharge max 1 MW } }\n")
    assert _codes(text) == []


def test_schedule_columns_on_stores_without_a_pump_are_zero(tmp_path):
    _, r = _dispatch(tmp_path, _text([20, 20, 90, 90]), oracle=False)
    assert np.all(r.tables["lower"]["pump_mw"].to_numpy() == 0.0)
    assert np.allclose(r.tables["upper"]["pump_mw"], r.tables["upper"]["charge_mw"])
