"""Dispatch by windows (portfolio/windows/, docs/windows.md).

On small portfolios the monolith solves to optimality, so the order
stitched objective <= monolith optimum <= whole-horizon LP bound must hold,
and the auditor (tests/audit.py, which never imports the engine) re-checks
every stitched schedule from the written files.  Boundary rules are tested
on cases built so that the rule really crosses a window boundary.
"""

from __future__ import annotations

import json
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))
import factory as F  # noqa: E402
import random_portfolios as RP  # noqa: E402
from audit import audit  # noqa: E402

from portfolio.cli import main  # noqa: E402
from portfolio.compile import build  # noqa: E402
from portfolio.dispatch import dispatch  # noqa: E402
from portfolio.facade import LoadedPortfolio  # noqa: E402
from portfolio.solve import SolveOptions  # noqa: E402
from portfolio.windows import Windows, WindowsError, dispatch_windows, parse, plan  # noqa: E402
from portfolio.windows.bound import relax  # noqa: E402

REL = 1e-6


def _close_below(a, b, rel=REL):
    """a <= b within a relative tolerance."""
    return a <= b + rel * max(1.0, abs(b))


def _audited(p, result, tmp_path):
    out = tmp_path / "out"
    result.write(out)
    problems = audit(p, out)
    assert not problems, problems[:5]
    return out


# -- the order stitched <= monolith <= bound, on generated portfolios ------------------

CASES = [("modes", s) for s in range(8)] + [("cascade", s) for s in range(6)] + \
        [("linked", s) for s in range(3)]


@pytest.mark.parametrize("family, seed", CASES, ids=[f"{f}-{s}" for f, s in CASES])
@pytest.mark.parametrize("end", ["value", "target"])
def test_stitched_is_below_the_optimum_which_is_below_the_bound(family, seed, end, tmp_path):
    p = RP.make(family, seed)
    mono = RP.dispatched(family, seed)
    if mono.status != "optimal":
        pytest.skip(f"the monolith is {mono.status}")
    dt, T = p.horizon.step_hours, p.horizon.steps
    commit = max(1, T // 4)
    r = dispatch_windows(p, Windows(commit * dt, (commit // 2) * dt, end), SolveOptions(mip_gap=0.0))
    w = r.summary["windows"]
    assert r.status in ("optimal", "feasible"), (r.status, r.message)
    assert w["count"] == len(plan(Windows(commit * dt, (commit // 2) * dt), T, dt)) >= 4
    assert w["max_violation"] <= 1e-6
    assert _close_below(r.objective, mono.objective)
    assert _close_below(mono.objective, w["lp_bound"])
    assert r.best_bound == w["lp_bound"] and r.objective == w["stitched_objective"]
    assert w["gap"] == pytest.approx((w["lp_bound"] - r.objective) / max(abs(r.objective), 1.0))
    out = _audited(p, r, tmp_path)
    assert (out / "windows.csv").read_text().count("\n") == len(w["windows"]) + 1
    assert sum(x["commit_steps"] for x in w["windows"]) == T
    assert json.loads((out / "summary.json").read_text())["windows"]["count"] == w["count"]


def test_the_generated_cases_cover_the_binary_rules_and_delayed_routes():
    """The cases above are only worth their names if they hold these features."""
    seen = set()
    for family, seed in CASES:
        if RP.dispatched(family, seed).status == "optimal":
            seen |= RP.features(RP.make(family, seed))
    p_delayed = any(r.delay_steps > 0 for f, s in CASES if f == "cascade"
                    for r in RP.make(f, s).routes)
    assert p_delayed
    for want in ("exclusive", "min_run", "min_rest", "discharge_min"):
        assert any(want in f for f in seen), (want, sorted(seen))


# -- analytic optimum -----------------------------------------------------------------

def test_a_lossless_store_with_unlimited_power_reaches_the_analytic_optimum():
    """Capacity E, power enough to fill or empty it in one step, no losses, starting
    empty, end free: sum_t p_t (d_t - c_t) = sum_t soc_t (p_{t+1} - p_t) - p_{T-1} soc_{T-1}
    (summation by parts), so with soc in [0, E] the optimum is E times the sum of the
    price rises: buy at each low before the high that follows it."""
    rng = np.random.default_rng(7)
    prices = np.round(rng.uniform(5, 120, 60), 2)
    E = 3.0
    p = F.market(prices, [F.storage("b", energy=E, power=1000.0)])
    want = E * float(np.maximum(np.diff(prices), 0.0).sum())
    r = dispatch_windows(p, Windows(12, 6), SolveOptions(mip_gap=0.0))
    assert r.objective == pytest.approx(want, rel=1e-9)
    assert r.summary["windows"]["lp_bound"] == pytest.approx(want, rel=1e-7)


def test_the_value_of_stored_energy_has_the_sign_and_size_of_a_finite_difference():
    """bound.relax's value of one more MWh in store against the LP optimum moved by it."""
    p = F.market([10, 50, 20, 80, 30, 5, 90, 40],
                 [F.storage("s", energy=2, power=1, soc_start=1.0, loss_per_h=0.1, eta_charge=0.9)])
    r0 = relax(build(p))
    eps = 1e-3
    p1 = replace(p, storages={"s": replace(p.storages["s"], soc_start=1.0 + eps)})
    r1 = relax(build(p1))
    assert r0.start_value["s"] > 0
    assert (r1.bound - r0.bound) / eps == pytest.approx(r0.start_value["s"], rel=1e-6)


# -- rules across a boundary ----------------------------------------------------------

def _runs(on: np.ndarray):
    """(start, length) of each run of True."""
    out, t = [], 0
    while t < len(on):
        if on[t]:
            s = t
            while t < len(on) and on[t]:
                t += 1
            out.append((s, t - s))
        else:
            t += 1
    return out


def test_a_minimum_run_crossing_a_window_boundary_is_honoured(tmp_path):
    """Two dear hours at the end of the first window; a 4 h minimum run must then go on
    into the second window (2 h at 1 per MWh): 100 + 100 + 1 + 1 beats an earlier run."""
    prices = [0, 0, 0, 0, 100, 100, 1, 1, 1, 1, 1, 1]
    st = F.storage("b", energy=4, power=1, soc_start=4.0, discharge_min=1.0, min_run_h=4,
                   charge_max=0.0)
    p = F.market(prices, [st])
    r = dispatch_windows(p, Windows(6, 0), SolveOptions(mip_gap=0.0))
    assert r.status in ("optimal", "feasible"), r.message
    d = r.tables["b"]["discharge_mw"].to_numpy() > 1e-6
    runs = _runs(d)
    assert any(s < 6 <= s + n - 1 for s, n in runs), runs      # the case crosses the boundary
    assert all(n >= 4 for s, n in runs if s + n < len(prices)), runs
    assert r.objective == pytest.approx(202.0)
    _audited(p, r, tmp_path)


def test_water_in_transit_longer_than_the_overlap_is_carried_not_lost(tmp_path):
    """A release delayed 5 steps, windows of 3 steps seeing 1 more: what leaves the
    upper store arrives at the lower one, or is still on its way at the end."""
    T = 16
    up = F.storage("up", energy=10, power=2, soc_start=10.0, charge_max=0.0, kind="reservoir")
    low = F.storage("low", energy=30, power=5, soc_start=0.0, charge_max=0.0, kind="reservoir")
    rt = F.route("up_to_low", "up", "low", delay_steps=5, factor=0.8)
    p = F.market([100.0] * 3 + [50.0] * (T - 3), [up, low], routes=[rt])   # dear early: release then
    r = dispatch_windows(p, Windows(3, 1), SolveOptions(mip_gap=0.0))
    assert r.status in ("optimal", "feasible"), r.message
    flow = r.tables["up_to_low"]["flow_mw"].to_numpy()
    arrive = r.tables["up_to_low"]["arriving_mw"].to_numpy()
    assert flow[:3].sum() > 0 and arrive[5:8].sum() > 0        # released in window 1, arriving later
    left = r.summary["routes"]["up_to_low"]["in_transit_end_mwh"]
    assert 0.8 * flow.sum() == pytest.approx(arrive.sum() + left, abs=1e-9)
    low_t = r.tables["low"]
    assert low_t["soc_mwh"].iloc[-1] == pytest.approx(arrive.sum() - low_t["discharge_mw"].sum(),
                                                      abs=1e-6)
    mono = dispatch(p, SolveOptions(mip_gap=0.0))
    assert _close_below(r.objective, mono.objective)
    _audited(p, r, tmp_path)


# -- settings and their messages ------------------------------------------------------

@pytest.mark.parametrize("text, code", [
    ("7min", "W001"), ("1d/30min", "W001"), ("100w", "W002"), ("0h", "W003"), ("1d/-1h", "W003"),
    ("abc", "W004"), ("24", "W004"), ("1d/", None), ("24h/12h", None), ("1d", None)])
def test_window_settings_are_checked_with_codes(text, code):
    def check():
        plan(parse(text), 48, 1.0)
    if code is None:
        check()
    else:
        with pytest.raises(WindowsError) as e:
            check()
        assert e.value.code == code and str(e.value).startswith(code)


def test_unknown_end_rule_is_coded():
    with pytest.raises(WindowsError) as e:
        plan(Windows(end="both"), 48, 1.0)
    assert e.value.code == "W005"


def test_plan_covers_the_horizon_once():
    pieces = plan(Windows(5, 3), 23, 1.0)
    kept = [t for s, c, n in pieces for t in range(s, s + c)]
    assert kept == list(range(23))
    assert all(n == min(8, 23 - s) for s, c, n in pieces)


def test_the_facade_takes_windows():
    p = F.market([10, 40, 5, 60, 20, 70], [F.storage("b", energy=1, power=1)])
    lp = LoadedPortfolio(p, "x.folio")
    r = lp.dispatch(windows="2h/2h", mip_gap=0.0)
    assert r.summary["windows"]["count"] == 3 and r.windows is not None
    with pytest.raises(WindowsError):
        lp.dispatch(windows="5h/1h30min")


DEMO = Path(__file__).resolve().parents[1] / "examples" / "kestrel_bay" / "kestrel_bay.folio"


@pytest.mark.parametrize("flag, code", [("7min", "W001"), ("1000w", "W002"), ("1d/-2h", "W003"),
                                        ("soon", "W004")])
def test_the_cli_refuses_bad_windows_and_writes_nothing(tmp_path, capsys, flag, code):
    out = tmp_path / "out"
    rc = main(["dispatch", str(DEMO), "--out", str(out), f"--windows={flag}"])
    err = capsys.readouterr().err
    assert rc == 2 and code in err and "Traceback" not in err
    assert not out.exists()


def test_the_cli_dispatches_by_windows(tmp_path, capsys):
    out = tmp_path / "out"
    rc = main(["dispatch", str(DEMO), "--out", str(out), "--windows", "12h/6h", "--quiet"])
    text = capsys.readouterr().out
    assert rc == 0, text
    assert "windows:" in text and (out / "windows.csv").exists()
    summary = json.loads((out / "summary.json").read_text())
    w = summary["windows"]
    assert w["commit_h"] == 12 and w["overlap_h"] == 6 and w["max_violation"] <= 1e-6
    assert summary["objective"] == pytest.approx(w["stitched_objective"])


def test_ctrl_c_between_or_inside_windows_stops_cleanly(tmp_path):
    """As tests/test_interrupts.py does for a single dispatch: SIGINT to a running
    ``portfolio dispatch --windows`` gives 130, one line, no traceback, and leaves the
    previous output folder as it was (nothing half-written beside it)."""
    import test_interrupts as TI

    demo = DEMO
    out = tmp_path / "out"
    assert main(["dispatch", str(demo), "--out", str(out), "--quiet"]) == 0
    before = {q.name: q.read_bytes() for q in out.iterdir()}
    src = TI._month_of_quarter_hours(tmp_path)
    code, _, err, _took = TI._interrupt(
        [TI._command(), "dispatch", str(src), "--out", str(out), "--windows", "1d/1d"], 6.0)
    assert code == 130, (code, err)
    assert "Traceback" not in err and "interrupted" in err
    assert {q.name: q.read_bytes() for q in out.iterdir()} == before
    assert sorted(q.name for q in tmp_path.iterdir() if q.name.startswith(".out")) == []


@pytest.mark.parametrize("status, code", [("no_schedule", 5), ("infeasible", 3), ("unbounded", 4)])
def test_a_window_without_a_schedule_ends_the_dispatch_with_its_own_status(status, code):
    """A window that found no schedule within its limit stops the dispatch as one MILP
    would (exit 5: a longer limit may find one), not as a solver failure (exit 6)."""
    from portfolio.dispatch import exit_code
    from portfolio.windows.task import WindowOutcome
    p = F.market([0, 0, 0, 0, 100, 100, 1, 1, 1, 1, 1, 1], [F.storage("b", energy=4, power=1)])

    def stuck(task):
        return WindowOutcome(task.number, task.start, task.commit, task.portfolio.horizon.steps,
                             task.end, status, message="stopped")
    r = dispatch_windows(p, Windows(6, 0), SolveOptions(mip_gap=0.0), runner=stuck)
    assert r.status == status and "window 1 of 2" in r.message
    assert exit_code(r.status) == code
