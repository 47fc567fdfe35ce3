"""The schedule auditor (tests/audit.py) on written output folders.

It finds nothing wrong in the engine's dispatch of every random portfolio
(both families) and of every example, and it does find faults planted in a
written folder.
"""

import json
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import factory as F
import random_portfolios as RP
from audit import _run_rest_unexplained, audit
from portfolio import load
from portfolio.dispatch import dispatch
from portfolio.solve import SolveOptions

EXAMPLES = sorted(Path(__file__).resolve().parent.parent.glob("examples/*/*.folio"))


def _written(r, tmp_path, name="out"):
    if r.status != "optimal":
        pytest.skip(f"{r.portfolio.name}: {r.status}, nothing to audit")
    return r.write(tmp_path / name)


@pytest.mark.parametrize("seed", RP.SINGLE_SEEDS)
def test_random_single_site_schedules_pass(seed, tmp_path):
    r = RP.dispatched("single", seed)
    assert audit(r.portfolio, _written(r, tmp_path)) == []


@pytest.mark.parametrize("seed", RP.LINKED_SEEDS)
def test_random_linked_schedules_pass(seed, tmp_path):
    r = RP.dispatched("linked", seed)
    assert audit(r.portfolio, _written(r, tmp_path)) == []


def test_there_are_examples():
    assert len(EXAMPLES) >= 3, EXAMPLES


@pytest.mark.parametrize("path", EXAMPLES, ids=[p.stem for p in EXAMPLES])
def test_example_schedules_pass(path, tmp_path):
    loaded = load(path)
    r = loaded.dispatch()
    assert r.status == "optimal", r.message
    assert audit(loaded.model, _written(r, tmp_path)) == []


# -- the auditor can fail ---------------------------------------------------------------

def _tamper_case():
    """Exclusive battery whose discharge runs at least 2 h at >= 1 MW, a cascade
    with a delay, solar that may not be curtailed, a demand."""
    T = 12
    prices = [20, 15, 10, 12, 60, 70, 20, 18, 80, 75, 15, 30]
    bat = F.storage("bat", energy=4.0, power=2.0, eta_charge=0.9, eta_discharge=0.9,
                    discharge_min=1.0, min_run_h=2.0, exclusive=True, soc_start=1.0)
    up = F.storage("up", kind="reservoir", energy=6.0, power=None, discharge_max=1.5,
                   soc_start=4.0, spill_allowed=True)
    low = F.storage("low", kind="reservoir", energy=6.0, power=None, discharge_max=2.0)
    rt = F.route("up_release_to_low", "up", "low", delay_steps=1, factor=0.8, in_transit=0.4)
    pv = F.supply("pv", "pv_mw")
    load_ = F.demand("load", "load_mw")
    solar = np.round(np.clip(np.sin((np.arange(T) - 2) / 8 * np.pi), 0, None) * 1.5, 3)
    return F.market(prices, [bat, up, low], supplies=[pv], demands=[load_], routes=[rt],
                    connection_kw=dict(export_max=6.0, import_max=4.0),
                    extra_series=[F.series("pv_mw", solar), F.series("load_mw", [0.5] * T)])


@pytest.fixture(scope="module")
def clean(tmp_path_factory):
    p = _tamper_case()
    r = dispatch(p, SolveOptions(mip_gap=0.0))
    assert r.status == "optimal"
    out = r.write(tmp_path_factory.mktemp("clean") / "out")
    assert audit(p, out) == []
    return p, out


@pytest.fixture
def copy(clean, tmp_path):
    p, out = clean
    dst = tmp_path / "out"
    shutil.copytree(out, dst)
    return p, dst


def _read(path):
    return pd.read_csv(path, dtype=str, keep_default_na=False)


def _set(folder, name, column, row, value):
    path = folder / f"{name}.csv"
    df = _read(path)
    df.loc[row, column] = str(value)
    df.to_csv(path, index=False, lineterminator="\n")


def _get(folder, name, column):
    return _read(folder / f"{name}.csv")[column]


def _found(problems, *words):
    return [x for x in problems if all(w in x for w in words)]


def test_raised_soc_is_caught(copy):
    p, out = copy
    soc = _get(out, "bat", "soc_mwh").astype(float)
    _set(out, "bat", "soc_mwh", 5, soc[5] + 0.01)
    problems = audit(p, out)
    assert _found(problems, "bat", "energy balance"), problems


def test_soc_above_its_max_is_caught(copy):
    p, out = copy
    _set(out, "low", "soc_mwh", 11, 6.5)
    assert _found(audit(p, out), "low", "soc above soc max")


def test_flipped_mode_is_caught(copy):
    p, out = copy
    modes = list(_get(out, "bat", "mode"))
    t = modes.index("idle")
    _set(out, "bat", "mode", t, "charge")
    problems = audit(p, out)
    assert _found(problems, "bat", "mode at", "flows say 'idle'"), problems


def test_a_run_cut_short_is_caught(copy):
    p, out = copy
    modes = list(_get(out, "bat", "mode"))
    runs = [t for t in range(1, len(modes) - 1)
            if modes[t] == "discharge" and modes[t - 1] == "discharge" and modes[t + 1] != "discharge"]
    assert runs, modes                           # the case is built to run the battery
    t = runs[0]
    _set(out, "bat", "discharge_mw", t, 0.0)
    _set(out, "bat", "mode", t, "idle")
    problems = audit(p, out)
    # the run before t may be longer than 2; cut it down to a single step
    if not _found(problems, "bat", "min run"):
        start = t - 1
        while start > 0 and modes[start - 1] == "discharge":
            start -= 1
        for u in range(start + 1, t):
            _set(out, "bat", "discharge_mw", u, 0.0)
            _set(out, "bat", "mode", u, "idle")
        problems = audit(p, out)
    assert _found(problems, "bat", "min run 2 step(s)"), problems


def test_charge_above_max_is_caught(copy):
    p, out = copy
    _set(out, "bat", "charge_mw", 0, 2.5)
    _set(out, "bat", "mode", 0, "charge")
    assert _found(audit(p, out), "bat", "charge above charge max")


def test_curtailment_where_forbidden_is_caught(copy):
    p, out = copy
    used = _get(out, "pv", "used_mw").astype(float)
    t = int(np.argmax(used.to_numpy()))
    _set(out, "pv", "used_mw", t, used[t] - 0.2)
    _set(out, "pv", "curtailed_mw", t, 0.2)
    problems = audit(p, out)
    assert _found(problems, "pv", "curtailed although curtailment is not allowed"), problems


def test_route_arrival_is_checked(copy):
    p, out = copy
    arr = _get(out, "up_release_to_low", "arriving_mw").astype(float)
    _set(out, "up_release_to_low", "arriving_mw", 0, arr[0] + 0.1)   # in transit at the start is 0.4
    assert _found(audit(p, out), "up_release_to_low", "arriving_mw")


def test_connection_limit_and_balance_are_checked(copy):
    p, out = copy
    _set(out, "grid", "export_mw", 4, 6.5)
    _set(out, "grid", "import_mw", 4, 0.0)
    problems = audit(p, out)
    assert _found(problems, "grid", "export above the connection's export max"), problems
    assert _found(problems, "grid", "net flow = sum of its sites' net flows"), problems


def test_cashflow_is_checked(copy):
    p, out = copy
    cash = _get(out, "grid", "cashflow").astype(float)
    _set(out, "grid", "cashflow", 3, cash[3] + 1.0)
    assert _found(audit(p, out), "grid", "cashflow")


def test_summary_objective_and_net_value_are_checked(copy):
    p, out = copy
    s = json.loads((out / "summary.json").read_text())
    s["objective"] += 0.5
    s["storages"]["bat"]["net_value"] -= 0.25
    (out / "summary.json").write_text(json.dumps(s))
    problems = audit(p, out)
    assert _found(problems, "objective (sum of cashflows - wear)"), problems
    assert _found(problems, "bat", "summary net value (attribution)"), problems


def test_wide_table_is_compared_with_the_asset_files(copy):
    p, out = copy
    wide = _read(out / "schedule.csv")
    wide.loc[2, "low.discharge_mw"] = "1.2345"
    wide.to_csv(out / "schedule.csv", index=False, lineterminator="\n")
    assert _found(audit(p, out), "schedule.csv", "low.discharge_mw")


def test_missing_file_is_reported_not_raised(copy):
    p, out = copy
    (out / "load.csv").unlink()
    assert _found(audit(p, out), "load.csv is missing")


# -- the run/rest automaton on its own -----------------------------------------------

@pytest.mark.parametrize("modes, dmin, R, D, exclusive, bad", [
    # analytic cases; steps are 0-based, None = explainable
    (["idle", "discharge", "idle", "idle"], 1.0, 3, 0, False, 2),       # run of 1 with min output: stops too soon
    (["idle", "discharge", "idle", "idle"], 0.0, 3, 0, False, None),    # binary may stay on at zero flow
    (["idle", "idle", "discharge", "discharge"], 1.0, 3, 0, False, None),  # cut by the horizon end
    (["discharge", "discharge", "charge", "idle"], 0.0, 2, 1, True, 2),  # no rest between runs
    (["discharge", "discharge", "idle", "charge"], 0.0, 2, 1, True, None),
    (["discharge", "discharge", "idle", "charge"], 0.0, 2, 2, True, 3),  # rest of 2 needs two idle steps
    (["charge", "idle", "charge", "idle"], 0.0, 3, 0, True, None),      # charge binary stays on across the gap
    (["charge", "discharge", "charge", "idle"], 0.0, 2, 0, True, 1),    # exclusive: charge run cannot stay on
])
def test_run_rest_automaton(modes, dmin, R, D, exclusive, bad):
    st = F.storage("s", energy=5.0, power=1.0, discharge_min=dmin, min_run_h=float(R),
                   min_rest_h=float(D))   # the automaton is told separately whether modes are exclusive
    assert _run_rest_unexplained(modes, st, R, D, exclusive) == bad


def test_net_values_get_the_csv_rounding_allowance_for_tiny_flows_at_high_prices(tmp_path):
    """A flow under the CSVs' precision (docs/outputs.md "CSV precision": 6 decimals) is
    written as 0 but counted in summary.json's net value at full precision; at a high price
    that is more than the plain tolerance, and the auditor allows price x step hours x 5e-7
    per rounded MW (audit.ROUNDING) for it, no more."""
    import audit as A
    prices = [20000.0, 10.0, 50.0]     # the store starts empty: it cannot sell the first step
    r = dispatch(F.market(prices, [F.storage("bat", energy=1.0, power=1.0, soc_start=0.0)]),
                 SolveOptions(threads=1))
    out = _written(r, tmp_path)
    assert audit(r.portfolio, out) == []
    charge = _read(out / "bat.csv")["charge_mw"].to_numpy(float)
    assert charge[0] == 0.0
    # the schedule as the engine may hold it: a charge of 4.9e-7 MW in the first step, imported,
    # which the CSVs write as 0.0 MW (below their rounding) and the cashflow as its money rounded
    # to 6 decimals, while summary.json counts it at full precision
    tiny = 4.9e-7
    cost = tiny * prices[0] * r.portfolio.horizon.step_hours
    _set(out, "grid", "cashflow", 0, round(-cost, 6))
    _set(out, "schedule", "grid.cashflow", 0, round(-cost, 6))
    s = json.loads((out / "summary.json").read_text())
    for section, name in (("storages", "bat"), ("sites", "site"), ("connections", "grid")):
        s[section][name]["net_value"] -= cost
    s["objective"] -= cost
    s["storages"]["bat"]["energy_in_mwh"] += tiny * r.portfolio.horizon.step_hours
    (out / "summary.json").write_text(json.dumps(s))
    assert round(tiny, 6) == 0.0
    terms = np.abs(_read(out / "bat.csv")[["charge_mw", "discharge_mw"]].to_numpy(float)).sum(axis=1)
    scale = float(np.sum(np.asarray(prices) * terms))
    assert cost > A.TOL * max(1.0, scale, abs(s["storages"]["bat"]["net_value"]))   # the plain tolerance trips
    assert audit(r.portfolio, out) == []
    # beyond the rounding's reach it is still a fault
    reach = A.ROUNDING * 2 * sum(prices) * r.portfolio.horizon.step_hours
    s["storages"]["bat"]["net_value"] -= 2 * reach
    (out / "summary.json").write_text(json.dumps(s))
    assert _found(audit(r.portfolio, out), "bat", "summary net value (attribution)")
