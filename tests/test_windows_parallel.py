"""Windows in parallel and limited foresight (portfolio/windows/, docs/windows.md).

Parallel windows start from the whole-horizon LP's state and end pinned to
it; each is kept only when the schedule committed before it leaves exactly
the problem it was solved from, else solved again from there.  So a
parallel dispatch must give the very schedule an in-order dispatch with
pinned ends gives — checked here on generated cases, on a process pool of
this test's own and on the pool the dispatch starts itself.

Limited foresight must never read what lies beyond a window's sight:
perturbing every price after it leaves the window's committed hours as
they were.  Its revenue is at most the perfect-foresight optimum.
"""

from __future__ import annotations

import json
import multiprocessing
import os
import sys
from concurrent.futures import Future, ProcessPoolExecutor
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))
import factory as F  # noqa: E402
import random_portfolios as RP  # noqa: E402
from audit import audit  # noqa: E402

from portfolio.cli import main  # noqa: E402
from portfolio.facade import LoadedPortfolio  # noqa: E402
from portfolio.solve import SolveOptions  # noqa: E402
from portfolio.windows import (Foresight, Windows, WindowsError, dispatch_windows,  # noqa: E402
                               foresight, parse, plan)

EXACT = SolveOptions(mip_gap=0.0)
DEMO = Path(__file__).resolve().parents[1] / "examples" / "kestrel_bay" / "kestrel_bay.folio"


@pytest.fixture(scope="module")
def pool():
    with ProcessPoolExecutor(2, mp_context=multiprocessing.get_context("spawn")) as ex:
        yield ex


def _quarter(p) -> float:
    return max(1, p.horizon.steps // 4) * p.horizon.step_hours


def _audited(p, result, tmp_path):
    out = tmp_path / "out"
    result.write(out)
    problems = audit(p, out)
    assert not problems, problems[:5]


CASES = [("modes", 0), ("modes", 3), ("modes", 5), ("cascade", 1), ("cascade", 4), ("linked", 0)]


@pytest.mark.parametrize("family, seed", CASES, ids=[f"{f}-{s}" for f, s in CASES])
def test_parallel_windows_give_the_in_order_schedule(family, seed, pool, tmp_path):
    p = RP.make(family, seed)
    c = _quarter(p)
    alone = dispatch_windows(p, Windows(c, None, "pin", 1), EXACT)
    together = dispatch_windows(p, Windows(c, None, "pin", 2), EXACT, executor=pool)
    assert alone.status in ("optimal", "feasible"), alone.message
    assert together.status == alone.status, together.message
    assert together.objective == pytest.approx(alone.objective, rel=1e-9, abs=1e-9)
    for name, table in alone.tables.items():
        other = together.tables[name]
        for col in table.columns:
            if np.issubdtype(table[col].dtype, np.number):
                assert np.allclose(table[col].to_numpy(), other[col].to_numpy(), atol=1e-7, equal_nan=True), \
                    (name, col)
    w = together.summary["windows"]
    assert w["workers"] == 2 and w["max_violation"] <= 1e-6
    if any("solved again" in x["message"] for x in w["windows"]):
        assert w["resolved"] >= 1
    mono = RP.dispatched(family, seed)
    if mono.status == "optimal":
        assert together.objective <= mono.objective + 1e-6 * max(1.0, abs(mono.objective))
    assert mono.objective <= w["lp_bound"] + 1e-6 * max(1.0, abs(w["lp_bound"]))
    _audited(p, together, tmp_path)


class InThisProcess:
    """An executor that runs each task when it is submitted (no processes): the parallel
    path's bookkeeping, quickly."""

    def submit(self, fn, *args):
        f = Future()
        f.set_result(fn(*args))
        return f


@pytest.mark.parametrize("family, seed", [("modes", 0), ("cascade", 1), ("linked", 0)])
def test_windows_whose_guess_was_wrong_are_solved_again(family, seed):
    """In these generated cases the LP's state at some seams (its mode, how long it has run,
    water arriving) is not the one the committed schedule leaves: those windows must be
    solved again, and the schedule is still the in-order one."""
    p = RP.make(family, seed)
    c = _quarter(p)
    seq = dispatch_windows(p, Windows(c, None, "pin", 1), EXACT)
    par = dispatch_windows(p, Windows(c, None, "pin", 2), EXACT, executor=InThisProcess())
    w = par.summary["windows"]
    again = [x for x in w["windows"] if "solved again" in x["message"]]
    assert w["resolved"] >= max(1, len(again))   # a window solved again may then merge with its
    #                                              predecessor, and the merged one says that instead
    assert par.objective == pytest.approx(seq.objective, rel=1e-12)


def test_the_dispatch_starts_and_stops_its_own_pool():
    """A minimum run forced across the boundary, two processes started by the dispatch."""
    prices = [0, 0, 0, 0, 100, 100, 1, 1, 1, 1, 1, 1]
    st = F.storage("b", energy=4, power=1, soc_start=4.0, discharge_min=1.0, min_run_h=4,
                   charge_max=0.0)
    p = F.market(prices, [st])
    seq = dispatch_windows(p, Windows(6, 0, "pin", 1), EXACT)
    before = set(multiprocessing.active_children())
    par = dispatch_windows(p, Windows(6, 0, "pin", 2), EXACT)
    assert set(multiprocessing.active_children()) <= before
    assert par.objective == pytest.approx(seq.objective, rel=1e-12)
    d = par.tables["b"]["discharge_mw"].to_numpy() > 1e-6
    assert d[4:8].all()        # the run that began in the first window went on in the second


def test_pinned_ends_keep_a_lossless_store_at_the_analytic_optimum():
    """As tests/test_windows.py's analytic case (E times the sum of the price rises): the LP's
    state at each boundary is on an optimal path, so pinning to it loses nothing."""
    rng = np.random.default_rng(11)
    prices = np.round(rng.uniform(5, 120, 48), 2)
    E = 3.0
    p = F.market(prices, [F.storage("b", energy=E, power=1000.0)])
    want = E * float(np.maximum(np.diff(prices), 0.0).sum())
    r = dispatch_windows(p, Windows(12, None, "pin", 1), EXACT)
    assert r.objective == pytest.approx(want, rel=1e-9)


# -- limited foresight ---------------------------------------------------------------

@pytest.mark.parametrize("end", ["hold", "free", 25.0])
@pytest.mark.parametrize("family, seed", [("modes", 1), ("cascade", 2), ("linked", 1)])
def test_foresight_never_reads_beyond_its_sight(family, seed, end):
    """Every price after the first window's sight multiplied by -3 and shifted: the first
    window's committed hours stay exactly as they were (and later ones do change)."""
    p = RP.make(family, seed)
    T, dt = p.horizon.steps, p.horizon.step_hours
    commit = max(1, T // 5)
    spec = Foresight(2 * commit * dt, commit * dt, end)
    seen = 2 * commit
    changed = dict(p.series)
    for name, s in p.series.items():
        if s.quantity != "price":
            continue
        v = np.array(s.values, dtype=float)
        v[seen:] = -3.0 * v[seen:] + 40.0
        changed[name] = type(s)(**{**s.__dict__, "values": v})
    q = type(p)(**{**p.__dict__, "series": changed})
    a = dispatch_windows(p, spec, EXACT)
    b = dispatch_windows(q, spec, EXACT)
    assert a.status in ("optimal", "feasible") and b.status in ("optimal", "feasible")
    for name, table in a.tables.items():
        for col in table.columns:
            if np.issubdtype(table[col].dtype, np.number) and col != "price":
                x = table[col].to_numpy()[:commit]
                y = b.tables[name][col].to_numpy()[:commit]
                assert np.allclose(x, y, atol=1e-9, equal_nan=True), (name, col)
    assert any(not np.allclose(np.asarray(a.tables[n][c])[seen:], np.asarray(b.tables[n][c])[seen:], equal_nan=True)
               for n in a.tables for c in a.tables[n].columns
               if np.issubdtype(a.tables[n][c].dtype, np.number)), "the perturbation changed nothing"


@pytest.mark.parametrize("family, seed", [("modes", 2), ("modes", 4), ("cascade", 0), ("cascade", 3),
                                          ("linked", 2)])
def test_foresight_earns_at_most_the_perfect_foresight_optimum(family, seed, tmp_path):
    p = RP.make(family, seed)
    mono = RP.dispatched(family, seed)
    c = _quarter(p)
    r = dispatch_windows(p, Foresight(2 * c, c, "hold"), EXACT)
    w = r.summary["windows"]
    if r.status == "infeasible":
        # a reservoir filled by its river only, with an end above its start: no window sees
        # enough water coming to keep for the end (cascade-0); it must say so, not guess
        assert "limited foresight" in r.message and w["windows"][-1]["status"] == "infeasible"
        assert family == "cascade"
        return
    assert r.status in ("optimal", "feasible"), r.message
    if mono.status == "optimal":
        assert r.objective <= mono.objective + 1e-6 * max(1.0, abs(mono.objective))
    assert w["foresight_h"] == 2 * c and w["workers"] == 1
    if w["lp_bound"] > 0:
        assert w["ratio_to_bound"] == pytest.approx(r.objective / w["lp_bound"])
    _audited(p, r, tmp_path)


def test_foresight_end_rules_on_a_hand_made_case():
    """One lossless 1 MWh store starting empty, two 'days' of 2 steps: prices 10, 50, 10, 50.
    Seeing one day at a time (commit 2 h, foresight 2 h) the store is filled and emptied each
    day, 2 x (50 - 10) = 80 (analytic), with 'hold' (end free: ends at least as it started,
    empty), 'free' and a value of 0.  Valued at 1000 per MWh the first window buys at 10 and keeps it; the last window
    (the portfolio's own free end) sells it at 50 and cannot buy more while full: 40."""
    st = F.storage("b", energy=1, power=1, soc_start=0.0, end_rule=F.END_FREE)
    p = F.market([10, 50, 10, 50], [st])
    for end in ("hold", "free", 0.0):
        r = dispatch_windows(p, Foresight(2, 2, end), EXACT)
        assert r.objective == pytest.approx(80.0), end
    # a price per MWh above every later price: a window keeps what it holds at its end
    r = dispatch_windows(p, Foresight(2, 2, 1000.0), EXACT)
    assert r.objective == pytest.approx(-10.0 + 50.0)


# -- settings and their messages ------------------------------------------------------

@pytest.mark.parametrize("make, code", [
    (lambda: Foresight(12, 24), "W006"),                 # sees less than it commits
    (lambda: Foresight(100, 24), "W006"),                # sees beyond the 48 h horizon
    (lambda: Foresight(36, 1.75), "W001"),
    (lambda: Foresight(48, 24, "both"), "W005"),
    (lambda: Windows(24, None, "value", 2), "W007"),     # parallel without pinned ends
    (lambda: Windows(24, 12, "pin", 1), "W007"),         # pinned with an overlap
    (lambda: Windows(24, None, "pin", 0), "W003"),
    (lambda: Foresight(48, 24, float("nan")), "W005"),
])
def test_foresight_and_parallel_settings_are_checked_with_codes(make, code):
    with pytest.raises(WindowsError) as e:
        plan(make(), 48, 1.0)
    assert e.value.code == code and str(e.value).startswith(code)


def test_foresight_text_reads_durations_and_rules():
    assert foresight("48h") == Foresight(48.0, 24.0, "hold")
    assert foresight("2d", "12h", "free") == Foresight(48.0, 12.0, "free")
    assert foresight("2d", None, "31.5").end == 31.5
    with pytest.raises(WindowsError) as e:
        foresight("2d", None, "later")
    assert e.value.code == "W005"
    assert parse("1d", "pin", 2).overlap == 0.0


@pytest.mark.parametrize("args, code", [
    (["--foresight", "12h", "--commit", "1d"], "W006"),
    (["--foresight", "100d"], "W006"),
    (["--foresight", "2d", "--commit", "7min"], "W001"),
    (["--foresight", "2d", "--window-end", "later"], "W005"),
    (["--windows", "1d/1d", "--workers", "2"], "W007"),
    (["--windows", "1d", "--foresight", "2d"], "choose one"),
    (["--foresight", "2d", "--workers", "2"], "one at a time"),
    (["--workers", "2"], "needs --windows or --foresight"),
    (["--windows", "1d", "--commit", "12h"], "--commit goes with --foresight"),
])
def test_the_cli_refuses_bad_foresight_and_parallel_settings(tmp_path, capsys, args, code):
    out = tmp_path / "out"
    rc = main(["dispatch", str(DEMO), "--out", str(out)] + args)
    err = capsys.readouterr().err
    assert rc == 2 and code in err and "Traceback" not in err and "nothing was" in err
    assert not out.exists()


def test_the_cli_dispatches_with_limited_foresight(tmp_path, capsys):
    out = tmp_path / "out"
    rc = main(["dispatch", str(DEMO), "--out", str(out), "--foresight", "12h", "--commit", "6h",
               "--window-end", "free", "--quiet"])
    text = capsys.readouterr().out
    assert rc == 0, text
    assert "limited foresight:" in text and "of the perfect-foresight LP bound" in text
    w = json.loads((out / "summary.json").read_text())["windows"]
    assert w["foresight_h"] == 12 and w["commit_h"] == 6 and w["end"] == "free"
    assert w["ratio_to_bound"] <= 1.0 + 1e-9


def test_the_cli_dispatches_windows_in_parallel(tmp_path, capsys):
    out = tmp_path / "out"
    rc = main(["dispatch", str(DEMO), "--out", str(out), "--windows", "6h", "--workers", "2",
               "--quiet"])
    text = capsys.readouterr().out
    assert rc == 0, text
    assert "2 at once" in text
    w = json.loads((out / "summary.json").read_text())["windows"]
    assert w["workers"] == 2 and w["end"] == "pin" and w["overlap_h"] == 0


def test_the_facade_takes_foresight():
    p = F.market([10, 40, 5, 60, 20, 70], [F.storage("b", energy=1, power=1)])
    lp = LoadedPortfolio(p, "x.folio")
    r = lp.dispatch(foresight=Foresight(4, 2, "free"), mip_gap=0.0)
    assert r.summary["windows"]["foresight_h"] == 4
    with pytest.raises(WindowsError):
        lp.dispatch(foresight="1h", mip_gap=0.0)          # shorter than the default commit (1d)
    with pytest.raises(ValueError):
        lp.dispatch(foresight="4h", windows="2h")


def test_a_loaded_portfolio_pickles_as_a_task_must():
    import pickle

    import portfolio
    p = portfolio.load(DEMO).model
    q = pickle.loads(pickle.dumps(p))
    assert q.name == p.name and list(q.series) == list(p.series)
    assert all(np.array_equal(q.series[n].values, p.series[n].values) for n in p.series)


def test_hold_keeps_the_level_the_portfolio_ends_at():
    """'hold' with the portfolio's own 'end at least 0.5': every window's end (as seen) keeps
    0.5 MWh, so a window never empties the store at its dear last hour."""
    st = F.storage("b", energy=1, power=1, soc_start=0.0, end_rule=F.END_AT_LEAST, end_value=0.5)
    p = F.market([10, 50, 10, 50, 10, 50], [st])
    r = dispatch_windows(p, Foresight(2, 2, "hold"), EXACT)
    soc = r.tables["b"]["soc_mwh"].to_numpy()
    assert soc[1] == pytest.approx(0.5) and soc[3] == pytest.approx(0.5)
    assert r.objective == pytest.approx(-10 * 1 + 50 * 0.5 + (-10 + 50) * 0.5 * 2)


# -- cycle limits across windows --------------------------------------------------------

@pytest.mark.parametrize("spec", [Windows(6, 3), Windows(6, None, "pin"), Foresight(12, 6, "free")],
                         ids=["value", "pin", "foresight"])
def test_cycle_limits_hold_across_windows(spec, tmp_path):
    """Two peaks a day for three days (hourly): a 1 MWh lossless store would cycle twice a
    day; 'cycles max 1 per day' and 'max 2' over the horizon (so one day gets none) must hold
    on the stitched schedule, windows of 6 h cutting every day in four (analytic optimum:
    two single cycles, 2 x (100 - 10) = 180)."""
    day = [10, 10, 100, 100, 10, 10, 100, 100] + [50] * 16
    prices = np.array(day * 3, dtype=float)
    st = F.storage("b", energy=1, power=1, soc_start=0.0, cycles_per_day=1.0, cycles_horizon=2.0)
    p = F.market(prices, [st])
    r = dispatch_windows(p, spec, EXACT)
    assert r.status in ("optimal", "feasible"), r.message
    assert r.summary["windows"]["max_violation"] <= 1e-6
    d = r.tables["b"]["discharge_mw"].to_numpy()
    per_day = d.reshape(3, 24).sum(axis=1)
    assert (per_day <= 1.0 + 1e-6).all() and d.sum() <= 2.0 + 1e-6
    # each window starting inside a day still has that whole day's cycle, less what the
    # windows before drew in it (not a pro-rata share of its own cut): the optimum is reached;
    # pinned ends follow the LP's state of charge, one of many optimal LP paths here (two
    # thirds of a cycle a day), which the whole MWh cycles cannot always follow
    if spec.end == "pin":
        assert r.objective <= 180.0 + 1e-6
    else:
        assert r.objective == pytest.approx(180.0, abs=1e-6)
    _audited(p, r, tmp_path)


# -- windows by default ---------------------------------------------------------------

def _days(n_days, **kw):
    prices = 50 + 30 * np.sin(np.arange(24 * n_days) * 2 * np.pi / 24)
    return F.market(np.round(prices, 2), [F.storage("b", energy=2, power=1, **kw)])


def test_windows_are_the_default_above_31_days_with_binary_rules():
    from portfolio.windows import AUTO_DAYS, binary_rules, by_default
    assert AUTO_DAYS == 31
    assert by_default(_days(32, exclusive=True)) == Windows()
    assert by_default(_days(32, min_run_h=2.0, discharge_min=0.5)) == Windows()
    assert by_default(_days(31, exclusive=True)) is None           # not above 31 days
    assert by_default(_days(32)) is None                            # no binary rule: one LP
    assert binary_rules(_days(32, exclusive=True)) == ['storage "b"']
    lp = LoadedPortfolio(_days(32, exclusive=True), "x.folio")
    r = lp.dispatch(mip_gap=1e-6)
    assert r.windows is not None and r.summary["windows"]["count"] == 32
    whole = lp.dispatch(windows=False, mip_gap=1e-6)
    assert whole.windows is None and "windows" not in whole.summary
    assert r.objective <= whole.objective + 1e-6 * abs(whole.objective)


def test_the_cli_says_when_windows_are_the_default_and_whole_turns_them_off(tmp_path, capsys):
    sys.path.insert(0, str(Path(__file__).parent / "bench"))
    import re

    from bench_scaling import make_text
    text = make_text(1)
    steps = 24 * 32
    values = "[" + ", ".join(f"{50 + 30 * np.sin(t * 2 * np.pi / 24):.2f}" for t in range(steps)) + "]"
    text = text.replace("length 24 h", f"length {steps} h").replace("step 15 min", "step 1 h")
    text = re.sub(r"(price \w+ values )\[[^\]]*\]", lambda m: m.group(1) + values, text)
    src = tmp_path / "long.folio"
    src.write_text(text)
    out = tmp_path / "out"
    assert main(["dispatch", str(src), "--out", str(out), "--gap", "1e-3"]) == 0
    cap = capsys.readouterr()
    assert "the default for a horizon longer than 31 days" in cap.err
    summary = json.loads((out / "summary.json").read_text())
    assert summary["windows"]["count"] == 32 and (out / "windows.csv").exists()
    assert any("--whole for one MILP" in n for n in summary["notes"])
    rc = main(["dispatch", str(src), "--out", str(tmp_path / "whole"), "--whole", "--gap", "1e-3",
               "--time-limit", "60"])
    assert rc == 0 and not (tmp_path / "whole" / "windows.csv").exists()
    assert main(["dispatch", str(src), "--out", str(tmp_path / "x"), "--whole", "--windows"]) == 2


# -- water in transit at a window's end --------------------------------------------------

def test_water_on_its_way_at_a_window_end_is_valued(tmp_path):
    """An upper reservoir (1 MWh, its turbine 1 MW at a wear of 1 per MWh) releasing to a
    lower plant three steps downstream, where the same water is worth twice as much (route
    factor 2, a higher head); the price is 0 but in the last step, 100.  The best: release
    at step 4 or before (0 - 1), the lower plant sells 2 MWh in step 7 (200): 199
    (analytic).  Windows of two steps see no arrival of what they release: unless water on
    its way is worth the LP's value at the lower store, the window holding step 4 keeps the
    water (worth 99 upstream: sold there in step 7) and the schedule earns 99."""
    T = 8
    up = F.storage("up", energy=1, power=1, soc_start=1.0, charge_max=0.0, kind="reservoir",
                   wear=1.0)
    low = F.storage("low", energy=5, power=2, soc_start=0.0, charge_max=0.0, kind="reservoir")
    rt = F.route("up_to_low", "up", "low", delay_steps=3, factor=2.0)
    p = F.market([0.0] * (T - 1) + [100.0], [up, low], routes=[rt])
    r = dispatch_windows(p, Windows(2, 0, "value"), EXACT)
    assert r.status in ("optimal", "feasible"), r.message
    assert r.objective == pytest.approx(199.0, abs=1e-6)
    _audited(p, r, tmp_path)


def test_ctrl_c_stops_parallel_windows_cleanly(tmp_path):
    """As tests/test_interrupts.py: SIGINT to the whole process group of a running
    ``portfolio dispatch --windows 1d --workers 2`` (the pool's processes too) gives 130,
    no traceback from any process, the previous output folder as it was, and no process
    of the group left behind."""
    import signal
    import subprocess
    import time

    import test_interrupts as TI

    out = tmp_path / "out"
    assert main(["dispatch", str(DEMO), "--out", str(out), "--quiet"]) == 0
    before = {q.name: q.read_bytes() for q in out.iterdir()}
    src = TI._month_of_quarter_hours(tmp_path)
    proc = subprocess.Popen([TI._command(), "dispatch", str(src), "--out", str(out), "--windows",
                             "1d", "--workers", "2"], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, start_new_session=True,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    time.sleep(8.0)
    os.killpg(proc.pid, signal.SIGINT)
    try:
        _, err = proc.communicate(timeout=TI.STOP_WITHIN + 60)
    except subprocess.TimeoutExpired:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.communicate()
        pytest.fail("the command did not stop after Ctrl-C")
    assert proc.returncode == 130, (proc.returncode, err)
    assert "Traceback" not in err and "KeyboardInterrupt" not in err and "interrupted" in err
    assert {q.name: q.read_bytes() for q in out.iterdir()} == before
    for _ in range(50):        # the pool's processes are stopped, not left to finish a window
        left = subprocess.run(["pgrep", "-g", str(proc.pid)], capture_output=True, text=True)
        if not left.stdout.split():
            break
        time.sleep(0.1)
    assert not left.stdout.split(), left.stdout
