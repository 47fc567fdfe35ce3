"""Published and analytic dispatch cases (engine only; portfolios built in Python)."""

import itertools

import highspy
import numpy as np
import pytest

import factory as F
from portfolio.dispatch import dispatch
from portfolio.solve import SolveOptions

EXACT = SolveOptions(mip_gap=0.0)


def test_gurobi_battery_arbitrage_example():
    # Source: the battery-scheduling notebook in Gurobi's open modeling-examples
    # collection (Apache-2.0): 13.5 kWh, 5 kW, 0.96/0.96, start 6 kWh, end >= 6 kWh.
    buy = [.16, .15, .14, .14, .15, .17, .18, .17, .16, .16, .15, .15,
           .16, .18, .20, .22, .24, .26, .30, .34, .38, .40, .38, .34]
    sell = [.10] * 12 + [.14, .16, .18, .20, .22, .24, .29, .30, .30, .40, .30, .30]
    assert all(b >= s for b, s in zip(buy, sell))   # so no exclusive direction is needed
    bat = F.storage("bat", energy=0.0135, power=0.005, eta_charge=0.96, eta_discharge=0.96,
                    soc_start=0.006, end_rule=F.END_AT_LEAST, end_value=0.006)
    p = F.market([x * 1000 for x in sell], [bat], buy=[x * 1000 for x in buy])  # EUR/kWh -> EUR/MWh
    r = dispatch(p)
    assert r.status == "optimal"
    assert r.objective == pytest.approx(1.56625, abs=1e-7)          # notebook's optimum
    t = r.tables["bat"]
    assert t["soc_mwh"].iloc[3] == pytest.approx(0.0135, abs=1e-9)   # full after hour 3 (notebook)
    assert t["discharge_mw"].iloc[21] == pytest.approx(0.005, abs=1e-9)  # 5 kW in hour 21 (notebook)
    # the direction binary is not needed: buy >= sell everywhere
    assert r.built.var("export_on") is None


def test_lossless_unlimited_store_earns_every_rise():
    prices = [3, 1, 4, 1, 5, 9, 2, 6]
    E = 10.0
    st = F.storage("s", energy=E, power=1e4, end_rule=F.END_EQUAL, end_value=0.0)
    r = dispatch(F.market(prices, [st]))
    # analytic: profit = E * sum max(0, p[t+1] - p[t])
    expected = E * sum(max(0.0, b - a) for a, b in zip(prices, prices[1:]))
    assert expected == 150.0
    assert r.status == "optimal"
    assert r.objective == pytest.approx(expected, abs=1e-7)


@pytest.mark.parametrize("prices, expected", [
    ([40.0, 40.0 / 0.81], 0.0),   # analytic: break-even spread 1/(0.9*0.9)
    ([40.0, 50.0], 0.5),          # analytic: 0.81 MWh sold at 50 for 1 MWh bought at 40
])
def test_break_even_with_losses(prices, expected):
    st = F.storage("s", energy=1.0, power=1.0, eta_charge=0.9, eta_discharge=0.9,
                   end_rule=F.END_EQUAL, end_value=0.0)
    r = dispatch(F.market(prices, [st]))
    assert r.status == "optimal"
    assert r.objective == pytest.approx(expected, abs=1e-7)


@pytest.mark.parametrize("exclusive, expected", [(False, 1.9), (True, 0.0)])  # analytic
def test_exclusive_modes_at_negative_price(exclusive, expected):
    # one hour at -10 per MWh: without the rule, charging 1 MW while discharging
    # 0.81 MW keeps the content and imports 0.19 MWh for 10 each -> 1.9.
    st = F.storage("s", energy=10.0, power=1.0, eta_charge=0.9, eta_discharge=0.9,
                   soc_start=5.0, end_rule=F.END_EQUAL, end_value=5.0, exclusive=exclusive)
    r = dispatch(F.market([-10.0], [st]), EXACT)
    assert r.status == "optimal"
    assert r.objective == pytest.approx(expected, abs=1e-7)
    assert r.tables["s"]["mode"].iloc[0] == ("idle" if exclusive else "both")


# --- minimum run, checked against brute force ---------------------------------

RUN_PRICES = [10, 50, 10, 50, 10, 50, 90, 20]


def _oracle(prices, e_max, p_min, p_max, admissible):
    """Best profit over all charge/discharge/idle sequences; one LP each (highspy)."""
    T = len(prices)
    h = highspy.Highs()
    h.setOptionValue("output_flag", False)
    inf = highspy.kHighsInf
    # columns: c_0..c_{T-1}, d_0..d_{T-1}; rows: soc_t = sum_{tau<=t} (c - d) in [0, e_max]
    for t in range(T):
        h.addVar(0.0, 0.0)
        h.changeColCost(t, prices[t])           # minimise cost of charging ...
    for t in range(T):
        h.addVar(0.0, 0.0)
        h.changeColCost(T + t, -prices[t])      # ... minus revenue of discharging
    for t in range(T):
        idx = list(range(t + 1)) + [T + tau for tau in range(t + 1)]
        val = [1.0] * (t + 1) + [-1.0] * (t + 1)
        h.addRow(0.0, e_max, len(idx), np.array(idx, dtype=np.int32), np.array(val))
    best = -inf
    for seq in itertools.product("icd", repeat=T):
        if not admissible(seq):
            continue
        lo = np.array([p_min if s == "c" else 0.0 for s in seq] + [p_min if s == "d" else 0.0 for s in seq])
        hi = np.array([p_max if s == "c" else 0.0 for s in seq] + [p_max if s == "d" else 0.0 for s in seq])
        h.changeColsBounds(2 * T, np.arange(2 * T, dtype=np.int32), lo, hi)
        h.run()
        if h.getModelStatus() == highspy.HighsModelStatus.kOptimal:
            best = max(best, -h.getInfo().objective_function_value)
    return best


def _runs_ok(seq, R=2):
    """Every run not cut by the horizon end has length >= R."""
    for mode, group in itertools.groupby(enumerate(seq), key=lambda x: x[1]):
        steps = [t for t, _ in group]
        if mode != "i" and steps[-1] != len(seq) - 1 and len(steps) < R:
            return False
    return True


@pytest.fixture(scope="module")
def run_oracle():
    free = _oracle(RUN_PRICES, 2.0, 0.5, 1.0, lambda s: True)
    ruled = _oracle(RUN_PRICES, 2.0, 0.5, 1.0, _runs_ok)
    return free, ruled


@pytest.mark.parametrize("variant", ["tight", "plain"])
def test_minimum_run_matches_brute_force(run_oracle, variant):
    free, ruled = run_oracle
    assert (free, ruled) == pytest.approx((160.0, 100.0), abs=1e-7)   # brute-force oracle above
    opts = SolveOptions(mip_gap=0.0, variant=variant)
    # exclusive: the oracle's steps are charge OR discharge OR idle (without
    # the rule, charging and discharging at once keeps both runs alive: 140)
    base = dict(energy=2.0, power=1.0, charge_min=0.5, discharge_min=0.5, exclusive=True)
    r0 = dispatch(F.market(RUN_PRICES, [F.storage("s", **base)]), opts)
    r2 = dispatch(F.market(RUN_PRICES, [F.storage("s", min_run_h=2.0, **base)]), opts)
    assert r0.status == r2.status == "optimal"
    assert r0.objective == pytest.approx(free, abs=1e-6)
    assert r2.objective == pytest.approx(ruled, abs=1e-6)
    modes = "".join({"charge": "c", "discharge": "d", "idle": "i"}[m] for m in r2.tables["s"]["mode"])
    assert _runs_ok(modes)


@pytest.mark.parametrize("k", [0, 3, 7])
def test_self_discharge_convention(k):
    # Convention: the loss applies to the content carried into a step, so
    # 1 MWh sold in 0-based step k (dt = 1 h) has become 0.99 ** (k + 1).
    prices = [0.0] * 8
    prices[k] = 100.0
    st = F.storage("s", energy=1.0, power=None, discharge_max=5.0, soc_start=1.0,
                   loss_per_h=0.01, eta_discharge=1.0)
    r = dispatch(F.market(prices, [st]))
    assert r.status == "optimal"
    assert r.objective == pytest.approx(100.0 * 0.99 ** (k + 1), rel=1e-9)  # analytic
