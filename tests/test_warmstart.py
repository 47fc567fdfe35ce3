"""The warm start (portfolio/solve/warmstart.py): a first schedule from the LP
relaxation's RENS neighbourhood, checked against the matrix, handed to HiGHS.

What must hold: the start is a schedule of the model (every bound, row and
binary), its objective lies below the LP bound and below the final optimum,
the optimum is the same with and without it (and matches the outside checks
in test_engine_published.py, which run with it on), and a failed start falls
back to the plain search.
"""

from __future__ import annotations

import io
import json

import numpy as np
import pytest

import factory as F
from portfolio.solve import warmstart
from portfolio.solve.certify import check_vector
from portfolio.cli import main
from portfolio.compile import build
from portfolio.dispatch import dispatch
from portfolio.solve import SolveOptions, new_highs, to_highs_lp


def _fleet(seed: int, n: int = 4, steps: int = 24):
    """Batteries with exclusive modes, minimum output and a 1 h minimum run on
    quarter-hours, two sites with import/export limits that bind."""
    rng = np.random.default_rng(seed)
    hourly = 50 + 25 * np.sin(np.arange(steps // 4) / 2.0) + rng.normal(0, 8, steps // 4)
    prices = np.repeat(hourly, 4)
    stores = []
    for j in range(n):
        power = float(rng.uniform(1, 3))
        stores.append(F.storage(
            f"b{j}", site=f"site{j % 2}", energy=float(rng.uniform(1, 3)) * power, power=power,
            eta_charge=0.92, eta_discharge=0.92, exclusive=True, soc_start=0.5 * power,
            end_rule=F.END_AT_LEAST, end_value=0.5 * power, wear=1.0, min_run_h=1.0,
            charge_min=0.4 * power, discharge_min=0.4 * power))
    sites = [F.site(f"site{i}", import_max=4.0, export_max=4.0) for i in range(2)]
    conn = F.connection(sell=F.price("p"), buy=F.price("p", adder=2.0))
    return F.portfolio(steps, step_hours=0.25, storages=stores, sites=sites, connections=[conn],
                       series_list=[F.series("p", prices, "price")])


def _find(p, seconds=30.0):
    built = build(p)
    lp, _ = to_highs_lp(built)
    return built, warmstart.find(built, lp, lambda: new_highs(SolveOptions()), seconds)


@pytest.mark.parametrize("seed", range(4))
def test_start_is_a_schedule_of_the_model_and_below_both_bounds(seed):
    p = _fleet(seed)
    built, start = _find(p)
    assert start.x is not None, start.note
    assert start.free > 0 and start.fixed > 0       # a real neighbourhood, not the whole MILP
    assert check_vector(built.matrix, start.x)[0] <= 1e-6
    assert start.objective <= start.lp_bound + 1e-6
    exact = dispatch(p, SolveOptions(mip_gap=0.0))
    assert exact.status == "optimal"
    assert start.objective <= exact.objective + 1e-6
    assert exact.objective <= start.lp_bound + 1e-6
    assert exact.summary["start_objective"] == pytest.approx(start.objective, abs=1e-6)


@pytest.mark.parametrize("seed", range(4))
def test_same_optimum_with_and_without_the_start(seed):
    p = _fleet(seed)
    on = dispatch(p, SolveOptions(mip_gap=0.0))
    off = dispatch(p, SolveOptions(mip_gap=0.0, warm_start=False))
    assert on.status == off.status == "optimal"
    assert on.objective == pytest.approx(off.objective, abs=1e-6)
    assert on.summary["warm_start"] is True and off.summary["warm_start"] is False
    assert off.summary["start_objective"] is None and off.summary["start_seconds"] == 0.0


def test_minimum_run_brute_force_optimum_with_and_without_the_start():
    # The analytic case of test_engine_published.py (minimum run, 100 with a
    # 2-step run rule, 160 without; brute-forced there over all 3^8 modes).
    prices = [10, 50, 10, 50, 10, 50, 90, 20]
    for run_h, expected in ((2.0, 100.0), (0.0, 160.0)):
        st = F.storage("s", energy=2.0, power=1.0, charge_min=0.5, discharge_min=0.5,
                       min_run_h=run_h, exclusive=True)
        p = F.market(prices, [st])
        for warm in (True, False):
            r = dispatch(p, SolveOptions(mip_gap=0.0, warm_start=warm))
            assert r.objective == pytest.approx(expected, abs=1e-6), (run_h, warm)


def test_the_check_catches_a_broken_bound_row_and_binary():
    p = _fleet(0)
    built, start = _find(p)
    mx = built.matrix
    assert check_vector(mx, start.x)[0] <= 1e-6
    b = int(np.nonzero(mx.integer)[0][0])
    x = start.x.copy()
    x[b] = 0.5                                    # a half-on binary
    viol, where = check_vector(mx, x)
    assert viol >= 0.49 and "mode_" in where      # the binary, or the row it switches
    x = start.x.copy()
    soc = mx.var_ranges["soc"][0]
    x[soc] = mx.col_upper[soc] + 1.0              # above the store's capacity
    viol, where = check_vector(mx, x)
    assert viol >= 1.0 / max(1.0, mx.col_upper[soc]) - 1e-9
    assert "soc" in where or "storage_balance" in where   # the bound, or the balance it breaks
    x = start.x.copy()
    x[mx.var_ranges["site_export"][0]] += 0.7     # a site balance that no longer holds
    viol, where = check_vector(mx, x)
    assert viol >= 0.69 / 4.0 and where.startswith("row ")
    assert check_vector(mx, start.x[:-1])[0] == np.inf


def test_when_the_relaxation_gives_nothing_the_idle_schedule_is_the_start(monkeypatch):
    p = _fleet(0)
    nothing = lambda *a, **k: warmstart.Start(None, None, None, 0.0, note="nothing")  # noqa: E731
    monkeypatch.setattr(warmstart, "find", nothing)
    monkeypatch.setattr(warmstart, "with_modes", nothing)     # nor the hourly sketch
    r = dispatch(p, SolveOptions(mip_gap=0.0))
    ref = dispatch(p, SolveOptions(mip_gap=0.0, warm_start=False))
    # standing still: every store keeps its content (soc start = end value here), earns 0
    assert r.summary["start_objective"] == pytest.approx(0.0, abs=1e-9)
    assert r.status == "optimal" and r.objective == pytest.approx(ref.objective, abs=1e-6)


def test_a_start_that_finds_nothing_leaves_the_search_as_it_was(monkeypatch):
    p = _fleet(0)
    nothing = lambda *a, **k: warmstart.Start(None, None, None, 0.0, note="nothing")  # noqa: E731
    monkeypatch.setattr(warmstart, "find", nothing)
    monkeypatch.setattr(warmstart, "idle", nothing)
    monkeypatch.setattr(warmstart, "with_modes", nothing)
    r = dispatch(p, SolveOptions(mip_gap=0.0))
    ref = dispatch(p, SolveOptions(mip_gap=0.0, warm_start=False))
    assert r.status == "optimal" and r.summary["start_objective"] is None
    assert r.objective == pytest.approx(ref.objective, abs=1e-6)


def test_no_start_for_a_linear_model():
    st = F.storage("s", energy=2.0, power=1.0)
    r = dispatch(F.market([10, 50, 20, 60], [st]))
    assert r.status == "optimal"
    assert r.summary["start_seconds"] == 0.0 and r.summary["lp_bound"] is None


def test_budget_is_a_share_of_the_time_limit_with_a_ceiling():
    assert warmstart.budget(None) == warmstart.MAX_SECONDS
    assert warmstart.budget(8.0) == pytest.approx(8.0 * warmstart.SHARE)
    assert warmstart.budget(1e6) == warmstart.MAX_SECONDS


def test_time_limit_covers_the_start_and_the_search(monkeypatch):
    # structural, not timed: the start is given its share of the limit, and
    # its time is part of the solve time reported (the hourly sketch, which
    # comes first and takes its own share, is left out here: test_sketch.py)
    import portfolio.sketch
    monkeypatch.setattr(portfolio.sketch, "needs_sketch", lambda p: False)
    given = []
    real = warmstart.find

    def spy(built, lp, new_highs, seconds):
        given.append(seconds)
        return real(built, lp, new_highs, seconds)

    monkeypatch.setattr(warmstart, "find", spy)
    r = dispatch(_fleet(2, n=8, steps=48), SolveOptions(time_limit=4.0))
    assert r.status in ("optimal", "feasible")
    # its share of what the build left of the limit
    assert len(given) == 1 and 4.0 * warmstart.SHARE - 0.5 < given[0] <= 4.0 * warmstart.SHARE
    assert 0 < r.summary["start_seconds"] <= r.solve_seconds


def test_progress_hears_of_the_start_first():
    p = _fleet(3)
    calls = []
    r = dispatch(p, SolveOptions(mip_gap=0.0), progress=lambda *a: calls.append(a))
    elapsed, best, bound, gap = calls[0]
    assert best == pytest.approx(r.summary["start_objective"])
    assert bound == pytest.approx(r.summary["lp_bound"])
    assert gap == pytest.approx(abs(bound - best) / abs(best))
    assert all(c[0] >= elapsed - 1e-9 for c in calls[1:])     # elapsed counts from the start


def _cli(*argv):
    out, err = io.StringIO(), io.StringIO()
    return main(list(map(str, argv)), out=out, err=err), out.getvalue(), err.getvalue()


def test_cli_no_warm_start(tmp_path):
    src = tmp_path / "duo.folio"
    src.write_text(
        'portfolio duo\n'
        'horizon start 2027-03-01T00:00 length 6 h step 1 h zone "UTC"\n'
        'price spot values [10, 50, 10, 50, 90, 20]\n'
        'connection grid { sell at spot buy at spot }\n'
        'site yard at grid {\n'
        '  storage cell { energy 2 MWh charge max 1 MW min 0.5 MW when running\n'
        '    discharge max 1 MW min 0.5 MW when running run at least 2 h }\n'
        '}\n')
    objectives = []
    for flag, expected in (((), True), (("--no-warm-start",), False)):
        out = tmp_path / f"out{len(flag)}"
        code, text, err = _cli("dispatch", src, "--out", out, "--quiet", *flag)
        assert code == 0, err
        summary = json.loads((out / "summary.json").read_text())
        assert summary["warm_start"] is expected
        objectives.append(summary["objective"])
    assert objectives[0] == pytest.approx(objectives[1], abs=1e-6)


@pytest.mark.parametrize("seed", range(3))
def test_a_start_within_the_gap_is_the_schedule_and_passes_the_audit(seed, tmp_path):
    from audit import audit

    p = _fleet(seed, n=6, steps=32)
    r = dispatch(p, SolveOptions(mip_gap=0.01))
    assert r.status == "optimal"
    lp_bound = r.summary["lp_bound"]
    # the LP relaxation's bound proves the start within 1 %: no search ran;
    # the polish may only have improved it
    assert r.summary["certificate"]["bound_source"] == "LP relaxation"
    assert r.objective >= r.summary["start_objective"] - 1e-6
    assert r.objective == pytest.approx(r.summary["start_objective"] + r.summary["polish"]["gained"]
                                        - r.summary["tie_break"]["objective_given_up"], abs=1e-6)
    assert r.best_bound == pytest.approx(lp_bound)
    assert r.objective >= (1 - 0.01) * lp_bound - 1e-9
    exact = dispatch(p, SolveOptions(mip_gap=0.0))
    assert r.objective <= exact.objective + 1e-6 <= lp_bound + 2e-6
    assert audit(p, r.write(tmp_path / "out")) == []


def test_highs_receives_the_start(monkeypatch):
    # Give the start all the time and HiGHS almost none: what comes back is
    # the start itself, with the LP relaxation's bound (HiGHS had none yet).
    # Were the start not handed over (or its columns misordered), HiGHS could
    # not return this objective so soon.
    p = _fleet(2, n=8, steps=48)      # its start is 1.8 % below the LP bound
    monkeypatch.setattr(warmstart, "budget", lambda time_limit: 60.0)
    built, start = _find(p)
    assert start.x is not None
    assert start.objective < start.lp_bound * (1 - 1e-3)    # not already proven: HiGHS must run
    r = dispatch(p, SolveOptions(time_limit=1e-3))
    assert r.status == "feasible"
    # the start, or what the polish made of it (never less)
    assert r.objective >= start.objective - 1e-6
    assert r.objective == pytest.approx(start.objective + r.summary["polish"]["gained"]
                                        - r.summary["tie_break"]["objective_given_up"], abs=1e-6)
    assert r.best_bound == pytest.approx(start.lp_bound, abs=1e-6)
    assert r.mip_gap == pytest.approx((start.lp_bound - r.objective) / abs(r.objective))


def test_a_progress_callable_that_raises_stops_the_dispatch_with_the_start_on():
    class Stop(Exception):
        pass

    def progress(*args):
        raise Stop("enough")

    with pytest.raises(Stop):
        dispatch(_fleet(0), SolveOptions(mip_gap=0.0), progress=progress)


def test_a_loss_making_horizon_with_the_start():
    # Every store must end full and buys at a flat price: the objective is a
    # cost (negative).  The gap arithmetic must hold for it too.
    stores = [F.storage(f"b{j}", site="site", energy=2.0 + j, power=1.0, eta_charge=0.9,
                        eta_discharge=0.9, exclusive=True, soc_start=0.5, end_rule=F.END_AT_LEAST,
                        end_value=2.0 + j, min_run_h=2.0, charge_min=0.5, discharge_min=0.5)
              for j in range(3)]
    p = F.market([40, 42, 41, 45, 44, 43, 46, 41, 40, 44, 47, 45], stores)
    loose = dispatch(p, SolveOptions(mip_gap=0.01))
    exact = dispatch(p, SolveOptions(mip_gap=0.0, warm_start=False))
    assert exact.status == loose.status == "optimal"
    assert exact.objective < 0
    assert loose.objective <= exact.objective + 1e-6
    assert loose.objective >= exact.objective - 0.01 * abs(exact.objective) - 1e-6
    assert loose.best_bound >= exact.objective - 1e-6


def test_a_tiny_time_limit_still_returns_the_idle_schedule():
    # far too little time for the relaxation or the search: standing still is a
    # schedule (worth 0 here), so the answer is "feasible", never "no schedule"
    r = dispatch(_fleet(2, n=8, steps=48), SolveOptions(time_limit=0.02))
    assert r.status in ("feasible", "optimal") and r.has_schedule
    assert r.objective >= -1e-6
    if r.best_bound is not None:       # a bound in hand: the gap is shown, however large
        assert r.best_bound >= r.objective - 1e-6 and r.mip_gap is not None


def test_the_start_counts_in_the_solve_time_when_no_search_runs():
    r = dispatch(_fleet(0, n=6, steps=32), SolveOptions(mip_gap=0.01))
    assert r.summary["certificate"]["bound_source"] == "LP relaxation"     # no search ran
    assert r.solve_seconds >= r.summary["start_seconds"] > 0
