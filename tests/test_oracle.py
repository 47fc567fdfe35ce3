"""The engine against an independent formulation (PuLP + its bundled CBC).

Seeded random portfolios (tests/random_portfolios.py) are solved by the
engine (HiGHS, mip_gap=0) and by tests/oracle_pulp.py (CBC, gapRel=0); the
two proven optima must agree within 1e-6 relative (plus 1e-6 absolute for
optima near zero).  A seed is skipped only when both say infeasible.

A few small cases with analytic optima check the oracle itself, so that
agreement means both are right rather than both wrong in the same way.
"""

from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest

import factory as F
import random_portfolios as RP
from oracle_pulp import INFEASIBLE, OPTIMAL, solve_oracle
from portfolio.dispatch import dispatch
from portfolio.solve.polish import TIE_ABS, TIE_TOL
from portfolio.solve import SolveOptions

REL, ABS = 1e-6, 1e-6


def _both(family, seed):
    p = RP.make(family, seed)
    assert RP.topology_errors(p) == [], "the generator made a portfolio the front end would refuse"
    # CBC runs in its own process: let it work while HiGHS solves in this one.
    with ThreadPoolExecutor(1) as pool:
        fut = pool.submit(solve_oracle, p)
        r = RP.dispatched(family, seed)
        o = fut.result()
    return p, r, o


def _agree(r, o, label):
    if r.status == "infeasible" or o.status == INFEASIBLE:
        assert (r.status, o.status) == ("infeasible", INFEASIBLE), label
        pytest.skip(f"{label}: both infeasible")
    assert r.status == "optimal", (label, r.status, r.message)
    assert o.status == OPTIMAL, (label, o.status)
    # proven at gap 0, less what the spill tie-break may give up (portfolio/solve/polish.py)
    allowance = 2 * max(TIE_TOL * abs(r.objective), TIE_ABS) + 1e-6
    assert r.best_bound is not None and r.best_bound - r.objective <= allowance, \
        (label, r.objective, r.best_bound)
    diff = abs(r.objective - o.objective)
    assert diff <= REL * max(abs(r.objective), abs(o.objective)) + ABS, \
        f"{label}: engine {r.objective!r} vs oracle {o.objective!r} (diff {diff:.3g})"


@pytest.mark.parametrize("seed", RP.SINGLE_SEEDS)
def test_random_single_site_matches_oracle(seed):
    p, r, o = _both("single", seed)
    _agree(r, o, p.name)


@pytest.mark.parametrize("seed", RP.LINKED_SEEDS)
def test_random_linked_portfolio_matches_oracle(seed):
    p, r, o = _both("linked", seed)
    _agree(r, o, p.name)


def test_the_families_cover_the_rules():
    """The seeds exercise every rule the comparison is meant to cover."""
    seen = set().union(*(RP.features(RP.make(fam, s))
                         for fam, seeds in (("single", RP.SINGLE_SEEDS), ("linked", RP.LINKED_SEEDS))
                         for s in seeds))
    assert RP.RULES <= seen, sorted(RP.RULES - seen)


# -- the oracle on cases with known optima ------------------------------------------

@pytest.mark.parametrize("k, loss", [(0, 0.1), (2, 0.1), (3, 0.05)])
def test_self_discharge_convention(k, loss):
    # analytic (docs/model.md): from 1 MWh, no charging, selling at 0-based step k
    # earns price * (1 - loss)^(k + 1) with dt = 1 h
    prices = [0.0] * 5
    prices[k] = 100.0
    st = F.storage("s", energy=1.0, power=None, charge_max=0.0, discharge_max=5.0, soc_start=1.0,
                   loss_per_h=loss)
    p = F.market(prices, [st])
    o = solve_oracle(p)
    r = dispatch(p, SolveOptions(mip_gap=0.0))
    want = 100.0 * (1 - loss) ** (k + 1)
    assert o.status == OPTIMAL and o.objective == pytest.approx(want, rel=1e-9)
    assert r.objective == pytest.approx(want, rel=1e-9)


def test_buy_below_sell_needs_a_direction_binary():
    # analytic: buying at 5 and selling at 10 at once would pay without end; with
    # the automatic direction binary the store can only buy 1 MWh in step 0 and
    # sell it in step 1: 10 - 5 = 5
    st = F.storage("s", energy=1.0, power=1.0)
    p = F.market([10.0, 10.0], [st], buy=[5.0, 5.0])
    o = solve_oracle(p)
    assert o.status == OPTIMAL and o.objective == pytest.approx(5.0, abs=1e-9)
    assert o.binaries == 2
    r = dispatch(p, SolveOptions(mip_gap=0.0))
    assert r.objective == pytest.approx(5.0, abs=1e-9)


def test_route_delay_in_transit_and_factor():
    # analytic: "up" (4 MWh stored, a 1 MW turbine of 80 %: 1.25 MWh of store a
    # step) releases into "low" with delay 2 and factor 0.5; 0.6 MWh are in
    # transit at the start (0.3 arrives in each of steps 0 and 1).  Prices are
    # 1 in steps 0..3 and 100 in step 4.  A MWh of up's store earns 0.8 x 100 =
    # 80 if up itself runs in step 4 (at most 1.25 MWh), or 0.8 x 1 + 0.5 x 100
    # = 50.8 if released in steps 0..2 (it reaches low by step 4; at most 3.75
    # MWh).  So: 1.25 x 80 + 2.75 x 50.8 + 0.6 x 100 = 100 + 139.7 + 60 = 299.7.
    up = F.storage("up", kind="reservoir", energy=10.0, power=None, discharge_max=1.0,
                   soc_start=4.0, eta_discharge=0.8)
    low = F.storage("low", kind="reservoir", energy=10.0, power=None, discharge_max=5.0)
    rt = F.route("r", "up", "low", delay_steps=2, factor=0.5, in_transit=0.6)
    p = F.market([1, 1, 1, 1, 100], [up, low], routes=[rt])
    o = solve_oracle(p)
    assert o.status == OPTIMAL and o.objective == pytest.approx(299.7, abs=1e-7)
    assert dispatch(p, SolveOptions(mip_gap=0.0)).objective == pytest.approx(299.7, abs=1e-7)


def test_min_run_with_min_output():
    # analytic: one 3 MWh store, 1 MW, must discharge >= 1 MW for 3 steps once
    # it starts (min run 3, min output 1 MW); price 100 only in step 1, 0
    # elsewhere, so the best run is steps 0..2 or 1..3: 100.  Without the run
    # rule the answer would be the same, so add wear 10: a 3-step run costs
    # 30 -> 70, where a free single step would earn 90.
    st = F.storage("s", energy=3.0, power=None, discharge_max=1.0, discharge_min=1.0,
                   min_run_h=3.0, soc_start=3.0, wear=10.0)
    p = F.market([0, 100, 0, 0, 0], [st])
    o = solve_oracle(p)
    assert o.status == OPTIMAL and o.objective == pytest.approx(70.0, abs=1e-7)
    assert dispatch(p, SolveOptions(mip_gap=0.0)).objective == pytest.approx(70.0, abs=1e-7)


def test_both_infeasible_is_agreed():
    # a demand above the import limit, nothing to serve it
    p = F.portfolio(2, sites=[F.site(import_max=1.0)], demands=[F.demand("load", "L")],
                    series_list=[F.series("L", [2.0, 2.0])])
    assert solve_oracle(p).status == INFEASIBLE
    assert dispatch(p).status == "infeasible"
