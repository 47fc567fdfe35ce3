"""Charging from sources only and cycle limits (docs/language.md, docs/model.md).

Each optimum below is derived by hand beside its case ("analytic"), checked
against the independent PuLP/CBC formulation (tests/oracle_pulp.py), and
every written schedule is re-checked by the auditor (tests/audit.py), which
must also catch a schedule that breaks either rule.
"""

from pathlib import Path

import pytest

from audit import audit
from oracle_pulp import OPTIMAL, solve_oracle
from portfolio import load

GRID = 'connection grid { export max 10 MW import max 10 MW sell at spot buy at spot }\n'


def _text(prices, start="2027-03-01T00:00", zone="UTC", store="", supplies=""):
    values = " ".join(str(x) for x in prices)
    return (f'horizon start {start} length {len(prices)} h step 1 h zone "{zone}"\n'
            f"price spot values [{values}] per MWh\n" + GRID
            + f"site yard at grid {{\n{supplies}  storage cells {{ kind battery energy 1 MWh charge max 1 MW "
              f"discharge max 1 MW {store} }}\n}}\n")


def _load(tmp_path: Path, text: str, name: str = "case"):
    path = tmp_path / f"{name}.folio"
    path.write_text(text, encoding="utf-8")
    return load(path)


def _dispatch(tmp_path, text, name="case"):
    loaded = _load(tmp_path, text, name)
    r = loaded.dispatch()
    assert r.status == "optimal", r.message
    out = r.write(tmp_path / f"{name}_out")
    assert audit(loaded.model, out) == []
    o = solve_oracle(loaded.model)
    assert o.status == OPTIMAL
    assert r.objective == pytest.approx(o.objective, abs=1e-6), "engine and CBC oracle disagree"
    return loaded, r, out


# Two price peaks a day: cheap at hours 0 and 2, dear at 1 and 3, flat between.
DAY = [10, 100, 10, 100] + [50] * 20


def test_analytic_one_cycle_a_day_takes_exactly_one_peak(tmp_path):
    # analytic: a lossless 1 MWh / 1 MW store starting empty. Unlimited it buys at 10
    # and sells at 100 twice: 2 x 90 = 180, two cycles. With 'cycles max 1 per day' it
    # may draw 1 MWh (one usable capacity) that day: one round, 90.
    _, free, _ = _dispatch(tmp_path, _text(DAY), "free")
    assert free.objective == pytest.approx(180.0, abs=1e-6)
    assert free.summary["storages"]["cells"]["equivalent_full_cycles"] == pytest.approx(2.0, abs=1e-6)
    _, one, _ = _dispatch(tmp_path, _text(DAY, store="cycles max 1 per day"), "one")
    assert one.objective == pytest.approx(90.0, abs=1e-6)
    assert one.summary["storages"]["cells"]["equivalent_full_cycles"] == pytest.approx(1.0, abs=1e-6)


def test_analytic_horizon_limit_and_daily_limit_together(tmp_path):
    # analytic: two days of the same prices. 1 per day alone: 2 x 90 = 180. Adding
    # 'max 1.5' over the horizon leaves 1.5 MWh to draw: 90 + 0.5 x 90 = 135.
    _, r, _ = _dispatch(tmp_path, _text(DAY * 2, store="cycles max 1 per day"), "daily")
    assert r.objective == pytest.approx(180.0, abs=1e-6)
    _, r, _ = _dispatch(tmp_path, _text(DAY * 2, store="cycles max 1 per day max 1.5"), "both")
    assert r.objective == pytest.approx(135.0, abs=1e-6)
    assert r.summary["storages"]["cells"]["equivalent_full_cycles"] == pytest.approx(1.5, abs=1e-6)


def test_analytic_part_days_get_the_daily_limit_pro_rata(tmp_path):
    # analytic: a 24 h horizon from 12:00 covers half of two calendar days, each with
    # two peaks at its start. Pro rata each half day allows 0.5 cycle: 2 x 0.5 x 90 = 90
    # (a whole-day rule would allow 180, unlimited 360).
    half = [10, 100, 10, 100] + [50] * 8
    _, r, _ = _dispatch(tmp_path, _text(half * 2, start="2027-03-01T12:00", store="cycles max 1 per day"), "part")
    assert r.objective == pytest.approx(90.0, abs=1e-6)


def test_days_are_calendar_days_of_the_horizons_zone(tmp_path):
    # The same hours in UTC+01:00 (Berlin, winter): the horizon from 00:00 local covers
    # one whole local day, so the limit allows one cycle: 90, as in UTC.
    _, r, _ = _dispatch(tmp_path, _text(DAY, zone="Europe/Berlin", store="cycles max 1 per day"), "berlin")
    assert r.objective == pytest.approx(90.0, abs=1e-6)


PV = '  supply pv values [{}] MW {{ into cells  curtail allowed }}\n'


def test_analytic_sources_only_forbids_grid_charging_that_would_pay(tmp_path):
    # analytic: prices [10, 100], the store starts empty, solar gives 0.5 MW in the first
    # hour straight into it. Free: charge 1 MW (0.5 solar + 0.5 grid at 10), sell 1 MWh
    # at 100: 100 - 5 = 95. Sources only: 0.5 MWh from solar, sold at 100: 50.
    supplies = PV.format("0.5 0")
    _, free, _ = _dispatch(tmp_path, _text([10, 100], store="soc end free", supplies=supplies), "grid")
    assert free.objective == pytest.approx(95.0, abs=1e-6)
    loaded, only, out = _dispatch(tmp_path, _text([10, 100], store="soc end free charge only from pv",
                                                  supplies=supplies), "solar")
    assert only.objective == pytest.approx(50.0, abs=1e-6)
    assert only.tables["cells"]["charge_mw"].tolist() == pytest.approx([0.5, 0.0], abs=1e-9)
    # the auditor, given the free schedule against the sources-only rule, sees the grid charge
    faults = audit(loaded.model, tmp_path / "grid_out")
    assert any("charge only from" in f and "from the grid" in f for f in faults), faults


def test_mode_rules_apply_to_charging_from_sources(tmp_path):
    # analytic: full store (1 MWh), prices [100, 100], solar 1 MW each hour into the store
    # only. Free modes: discharge 1 MW and take the solar at once in both hours: 200.
    # Exclusive modes: discharge in one hour, charge from solar in the other: 100.
    supplies = PV.format("1 1")
    store = "soc start 100% end free charge only from pv"
    _, r, _ = _dispatch(tmp_path, _text([100, 100], store=store, supplies=supplies), "free_modes")
    assert r.objective == pytest.approx(200.0, abs=1e-6)
    _, r, _ = _dispatch(tmp_path, _text([100, 100], store=store + " modes exclusive", supplies=supplies), "excl")
    assert r.objective == pytest.approx(100.0, abs=1e-6)


def test_the_auditor_catches_a_schedule_over_its_cycle_limits(tmp_path):
    _dispatch(tmp_path, _text(DAY * 2), "unlimited")
    daily = _load(tmp_path, _text(DAY * 2, store="cycles max 1 per day"), "daily_rule")
    faults = audit(daily.model, tmp_path / "unlimited_out")
    assert any("daily limit" in f for f in faults), faults
    total = _load(tmp_path, _text(DAY * 2, store="cycles max 3"), "total_rule")
    faults = audit(total.model, tmp_path / "unlimited_out")
    assert any("over the horizon above the limit" in f for f in faults), faults


def test_cycles_are_reported_only_for_stores_that_charge(tmp_path):
    # A reservoir filled by its river alone ('charge off') does not cycle; its river
    # inflow is in supply_in_mw so its water can be traced.
    text = ('horizon start 2027-03-01T00:00 length 3 h step 1 h zone "UTC"\n'
            "price spot values [10 100 10] per MWh\n" + GRID
            + "site dam at grid {\n  storage lake { kind reservoir energy 10 MWh charge off discharge max 2 MW "
              "soc start 1 MWh end free spill allowed  supply river values [1 2 3] MW }\n}\n")
    loaded, r, _ = _dispatch(tmp_path, text, "dam")
    assert r.summary["storages"]["lake"]["equivalent_full_cycles"] is None
    assert r.tables["lake"]["supply_in_mw"].tolist() == [1.0, 2.0, 3.0]
