"""The hourly sketch (portfolio/sketch.py): a first schedule for short steps.

What must hold: the coarse portfolio is the fine one on longer steps (series
averaged, water on its way summed, delays and carried-in runs in coarse steps,
never crediting a run with more than it lasted); a sketch's start is a
schedule of the FINE model (checked against its matrix) and never worth more
than the fine optimum; where the fine data are themselves hourly and nothing
rewards changing mode inside an hour, the sketch's start IS the fine optimum
(an averaging argument, below); a sketch that leads nowhere is dropped and the
answer is the same as without it.
"""

from __future__ import annotations

import numpy as np
import pytest

import factory as F
from portfolio import sketch
from portfolio.compile import build
from portfolio.dispatch import dispatch
from portfolio.model import PRIOR_CHARGE, PRIOR_DISCHARGE
from portfolio.solve import SolveOptions, new_highs, to_highs_lp, warmstart
from portfolio.solve.certify import check_vector
from portfolio.windows import dispatch_windows, parse
from audit import audit


def _fleet(seed: int, n: int = 3, hours: int = 8, within_hour: float = 6.0, **kw):
    """Batteries on quarter-hours: exclusive modes, minimum output, a 1 h minimum run,
    prices with an hourly shape plus noise of ``within_hour`` inside each hour."""
    rng = np.random.default_rng(seed)
    steps = 4 * hours
    prices = (np.repeat(50 + 25 * np.sin(np.arange(hours) / 1.5), 4)
              + rng.normal(0, within_hour, steps) if within_hour else
              np.repeat(50 + 25 * np.sin(np.arange(hours) / 1.5), 4))
    stores = []
    for j in range(n):
        power = float(rng.uniform(1, 3))
        opts = dict(eta_charge=0.92, eta_discharge=0.92, exclusive=True, soc_start=0.5 * power,
                    end_rule=F.END_AT_LEAST, end_value=0.5 * power, wear=1.0, min_run_h=1.0,
                    charge_min=0.4 * power, discharge_min=0.4 * power)
        opts.update(kw)
        stores.append(F.storage(f"b{j}", site=f"site{j % 2}", energy=2.0 * power, power=power,
                                **opts))
    sites = [F.site(f"site{i}", import_max=3.0, export_max=3.0) for i in range(2)]
    conn = F.connection(sell=F.price("p"), buy=F.price("p", adder=2.0))
    return F.portfolio(steps, step_hours=0.25, storages=stores, sites=sites, connections=[conn],
                       series_list=[F.series("p", prices, "price")])


# -- the coarse portfolio ---------------------------------------------------------------

@pytest.mark.parametrize("step_hours, steps, factor", [
    (0.25, 96, 4), (0.5, 48, 2), (1 / 3, 72, 3), (1.0, 24, 1), (0.4, 30, 1),  # 24 min: no
    (0.25, 98, 1),                                                          # not whole hours
    (5 / 60, 120, 12)])
def test_factor_is_whole_steps_per_hour(step_hours, steps, factor):
    p = F.portfolio(steps, step_hours=step_hours, storages=[F.storage("s", exclusive=True)])
    assert sketch.factor_for(p) == factor


def test_coarse_portfolio_averages_series_and_keeps_limits():
    p = _fleet(1, hours=6)
    c = sketch.coarsened(p, 4)
    assert c.horizon.steps == 6 and c.horizon.step_hours == pytest.approx(1.0)
    assert c.horizon.start == p.horizon.start
    fine = np.asarray(p.series["p"].values)
    assert np.allclose(c.series["p"].values, fine.reshape(6, 4).mean(axis=1))
    for k, s in p.storages.items():
        cs = c.storages[k]
        assert (cs.energy, cs.charge_max, cs.min_run_h, cs.end_value) == (
            s.energy, s.charge_max, s.min_run_h, s.end_value)


def test_a_carried_in_run_is_never_credited_with_more_than_it_lasted():
    # 45 min of a 2 h run: on hourly steps it counts as 0 h (rounded down), so the
    # sketch runs at least 2 more hours; rounded up it would count 1 h and the fine
    # schedule would run 1 h 45 min in all, too short
    st = F.storage("s", energy=4.0, power=1.0, exclusive=True, min_run_h=2.0,
                   prior_mode=PRIOR_DISCHARGE, prior_h=0.75, prior_net_mw=1.0, soc_start=3.0)
    p = F.portfolio(8, step_hours=0.25, storages=[st])
    assert sketch.coarsened(p, 4).storages["s"].prior_h == 0.0
    st2 = F.storage("s", energy=4.0, power=1.0, exclusive=True, min_run_h=2.0,
                    prior_mode=PRIOR_CHARGE, prior_h=1.5, prior_net_mw=-1.0)
    p2 = F.portfolio(8, step_hours=0.25, storages=[st2])
    assert sketch.coarsened(p2, 4).storages["s"].prior_h == pytest.approx(1.0)


def test_water_on_its_way_and_delays_in_coarse_steps():
    up = F.storage("up", energy=10.0, power=2.0, exclusive=True, soc_start=5.0,
                   arriving=(("r", (0.1, 0.2, 0.3, 0.4, 0.5, 0.6)),))
    down = F.storage("down", energy=10.0, power=2.0)
    p = F.portfolio(8, step_hours=0.25, storages=[up, down],
                    routes=[F.route("r", "up", "down", delay_steps=8)])
    c = sketch.coarsened(p, 4)
    assert c.routes[0].delay_steps == 2
    name, mwh = c.storages["up"].arriving[0]
    assert name == "r" and mwh == pytest.approx((1.0, 1.1))        # summed, 0.1+..+0.4, 0.5+0.6


def test_what_cannot_be_coarsened_says_why():
    p = F.portfolio(8, step_hours=0.25, storages=[F.storage("a", exclusive=True),
                                                  F.storage("b")],
                    routes=[F.route("r", "a", "b", delay_steps=3)])
    with pytest.raises(sketch.NotCoarsenable, match='route "r".*3 steps'):
        sketch.coarsened(p, 4)
    with pytest.raises(sketch.NotCoarsenable, match="whole groups"):
        sketch.coarsened(F.portfolio(6, step_hours=0.25, storages=[F.storage("a")]), 4)
    hint = sketch.mode_hint(p, SolveOptions(), 5.0)
    assert hint.values is None and 'route "r"' in hint.note


# -- the start it gives -----------------------------------------------------------------

def _start(p, seconds=30.0):
    built = build(p)
    lp, _ = to_highs_lp(built)
    hint = sketch.mode_hint(p, SolveOptions(), seconds)
    assert hint.values, hint.note
    return built, warmstart.with_modes(built, lp, lambda: new_highs(SolveOptions()), seconds,
                                       hint.values)


@pytest.mark.parametrize("seed", range(4))
def test_the_start_is_a_schedule_of_the_fine_model_and_no_better_than_its_optimum(seed):
    p = _fleet(seed)
    built, start = _start(p)
    assert start.x is not None, start.note
    assert check_vector(built.matrix, start.x)[0] <= 1e-6
    best = dispatch(p, SolveOptions(mip_gap=0.0, warm_start=False))
    assert best.status == "optimal"
    assert start.objective <= best.objective + 1e-6


@pytest.mark.parametrize("seed", range(3))
def test_on_hourly_data_the_start_is_the_fine_optimum(seed):
    # Analytic (an averaging argument): with prices constant inside each hour, no minimum
    # output and no losses, any fine schedule averaged over each hour is an hourly schedule
    # worth at least as much (charging and discharging in one hour at one price earns
    # nothing and pays wear), and runs of whole hours keep a 1 h minimum run.  So the hourly
    # optimum equals the fine optimum, and the sketch's start (its modes, the fine powers
    # solved again) reaches it, to the sketch's own gap (sketch.GAP).
    p = _fleet(seed, within_hour=0.0, eta_charge=1.0, eta_discharge=1.0, charge_min=0.0,
               discharge_min=0.0)
    built, start = _start(p)
    best = dispatch(p, SolveOptions(mip_gap=0.0, warm_start=False))
    assert best.status == "optimal" and best.objective > 1.0
    assert start.objective == pytest.approx(best.objective, rel=sketch.GAP, abs=1e-6)
    assert start.objective <= best.objective + 1e-6


def _no_relaxation_start(monkeypatch):
    """The LP relaxation's start gives nothing (as when its LP outlasts a short limit):
    the only case in which a solve asks for the sketch."""
    monkeypatch.setattr(warmstart, "find",
                        lambda *a, **k: warmstart.Start(None, None, None, 0.0, note="nothing"))


def test_a_sketch_the_fine_steps_cannot_follow_is_dropped(monkeypatch):
    # a 2 MW minimum output under a 4 MW/h ramp: on hourly steps the store may step from
    # idle to 2 MW at once; on quarter-hours it may move 1 MW a step, so never start
    st = F.storage("s", energy=8.0, power=3.0, exclusive=True, soc_start=4.0,
                   discharge_min=2.0, charge_min=2.0, ramp_mw_per_h=4.0)
    prices = np.repeat([10.0, 90.0, 10.0, 90.0], 4)
    p = F.portfolio(16, step_hours=0.25, storages=[st],
                    connections=[F.connection(sell=F.price("p"), buy=F.price("p"))],
                    series_list=[F.series("p", prices, "price")])
    hint = sketch.mode_hint(p, SolveOptions(), 10.0)
    assert hint.values and hint.objective > 0          # hourly, it trades
    ref = dispatch(p, SolveOptions(mip_gap=0.0, warm_start=False))
    _no_relaxation_start(monkeypatch)
    r = dispatch(p, SolveOptions(mip_gap=0.0))
    assert r.status == ref.status == "optimal"
    assert r.objective == pytest.approx(ref.objective, abs=1e-9)
    assert any("no start from an hourly sketch" in n for n in r.summary["notes"])


def test_the_sketch_is_asked_only_when_the_relaxation_gives_no_start(monkeypatch):
    asked = []
    real = sketch.mode_hint

    def spy(p, options, seconds):
        asked.append(seconds)
        return real(p, options, seconds)

    monkeypatch.setattr(sketch, "mode_hint", spy)
    p = _fleet(1)
    plain = dispatch(p, SolveOptions(mip_gap=0.0))
    assert asked == [] and plain.summary["lp_bound"] is not None
    _no_relaxation_start(monkeypatch)
    r = dispatch(p, SolveOptions(mip_gap=0.0, time_limit=20.0))
    # asked once, with its share of what the limit left (and a cap)
    assert len(asked) == 1 and 0 < asked[0] <= 0.6 * 20.0
    assert r.status == "optimal" and r.objective == pytest.approx(plain.objective, abs=1e-6)
    assert any("came from the portfolio solved on hourly steps" in n for n in r.summary["notes"])
    # the start reported is the sketch's: the modes of the hint fixed, the rest solved
    built, start = _start(p)
    assert r.summary["start_objective"] == pytest.approx(start.objective, rel=1e-9, abs=1e-9)


def test_a_sketch_that_finds_nothing_says_why(monkeypatch):
    p = F.portfolio(8, step_hours=0.25, storages=[F.storage("a", exclusive=True, soc_start=0.5),
                                                  F.storage("b")],
                    routes=[F.route("r", "a", "b", delay_steps=3)],
                    connections=[F.connection(sell=F.price("p"), buy=F.price("p"))],
                    series_list=[F.series("p", [10, 80] * 4, "price")])
    _no_relaxation_start(monkeypatch)
    r = dispatch(p, SolveOptions(mip_gap=0.0))
    assert r.status == "optimal"
    assert any("no start from an hourly sketch" in n and 'route "r"' in n
               for n in r.summary["notes"]), r.summary["notes"]


@pytest.mark.parametrize("mode, prior_h", [(PRIOR_DISCHARGE, 0.75), (PRIOR_CHARGE, 0.5),
                                           (PRIOR_DISCHARGE, 0.25)])
def test_a_run_carried_in_is_kept_even_where_the_hourly_rule_is_one_step(mode, prior_h):
    # a 1 h minimum run is one hourly step: the hourly model has no rows for a run carried in
    # (any run is whole there), yet on quarter-hours the store must run 1 h - prior_h more;
    # the hint must keep that run, or its modes give no schedule of the fine model
    net = 1.0 if mode == PRIOR_DISCHARGE else -1.0
    st = F.storage("s", energy=6.0, power=2.0, exclusive=True, min_run_h=1.0, soc_start=3.0,
                   charge_min=1.0, discharge_min=1.0, prior_mode=mode, prior_h=prior_h,
                   prior_net_mw=net)
    prices = np.repeat([80.0, 10.0, 90.0, 20.0] if mode == PRIOR_CHARGE else [10.0, 80.0, 20.0, 90.0], 4)
    p = F.portfolio(16, step_hours=0.25, storages=[st],
                    connections=[F.connection(sell=F.price("p"), buy=F.price("p"))],
                    series_list=[F.series("p", prices, "price")])
    built, start = _start(p)
    assert start.x is not None, start.note
    assert check_vector(built.matrix, start.x)[0] <= 1e-6
    best = dispatch(p, SolveOptions(mip_gap=0.0, warm_start=False))
    assert start.objective <= best.objective + 1e-6


def test_modes_that_do_not_fit_the_model_give_no_start():
    p = _fleet(0)
    built = build(p)
    lp, _ = to_highs_lp(built)
    wrong = {"mode_charge": {"b0": np.zeros(3)}}
    s = warmstart.with_modes(built, lp, lambda: new_highs(SolveOptions()), 5.0, wrong)
    assert s.x is None and "do not fit" in s.note


def _audited(p, result, tmp_path):
    out = tmp_path / "out"
    result.write(out)
    problems = audit(p, out)
    assert not problems, problems[:5]


def test_a_dispatch_on_quarter_hours_keeps_its_optimum_with_the_sketch(tmp_path):
    p = _fleet(2, n=4, hours=12)
    r = dispatch(p, SolveOptions(mip_gap=0.0))
    ref = dispatch(p, SolveOptions(mip_gap=0.0, warm_start=False))
    assert r.status == ref.status == "optimal"
    assert r.objective == pytest.approx(ref.objective, abs=1e-6)
    assert r.summary["start_objective"] is not None
    assert r.summary["start_objective"] <= r.objective + 1e-6
    _audited(p, r, tmp_path)


def test_windows_on_quarter_hours_start_from_the_sketch_and_stitch(tmp_path):
    p = _fleet(3, n=3, hours=48)
    r = dispatch_windows(p, parse("12h/12h", "value"), SolveOptions(mip_gap=1e-4))
    assert r.status in ("optimal", "feasible") and r.objective is not None
    assert r.objective <= r.summary["windows"]["lp_bound"] + 1e-6
    _audited(p, r, tmp_path)


def test_the_sketchs_time_is_counted_in_the_starts(monkeypatch):
    # a lower bound only: the sketch sleeps 0.3 s inside the solve's clock, so the start's
    # time and the solve's include at least that (no upper bound is asserted)
    import time as _time
    real = sketch.mode_hint

    def slow(*a, **k):
        _time.sleep(0.3)
        return real(*a, **k)

    monkeypatch.setattr(sketch, "mode_hint", slow)
    _no_relaxation_start(monkeypatch)
    r = dispatch(_fleet(1), SolveOptions(mip_gap=0.0))
    assert any("hourly steps" in n for n in r.summary["notes"])
    assert r.summary["start_seconds"] >= 0.3
    assert r.summary["solve_seconds"] >= r.summary["start_seconds"]
