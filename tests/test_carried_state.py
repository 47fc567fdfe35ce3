"""The state carried in from before the horizon: 'was idle|charging|discharging [for D] [at P]'.

A minimum run begun yesterday binds today's first hours, a rest begun
yesterday blocks them, and the ramp limit binds the first step from the
declared output.  Small analytic cases (the reasoning is in the comments),
both formulations, the independent PuLP/CBC formulation on seeded random
cases, and the schedule auditor.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pandas as pd
import pytest

import factory as F
from audit import audit
from oracle_pulp import INFEASIBLE, OPTIMAL, solve_oracle
from portfolio import lint_text
from portfolio.dispatch import dispatch
from portfolio.model import PRIOR_CHARGE, PRIOR_DISCHARGE, PRIOR_IDLE
from portfolio.solve import SolveOptions

VARIANTS = ("tight", "plain")


def _solve(text, variant="tight"):
    r = lint_text(text, "case.folio")
    assert r.ok, [f"{d.span}: {d.message}" for d in r.errors]
    return r.portfolio, dispatch(r.portfolio, SolveOptions(mip_gap=0, variant=variant))


RUN = """
horizon start 2027-01-01T00:00 length 4 h step 1 h
price p values [-10, -10, 50, 50]
connection c {{ sell at p  buy at p }}
site s at c {{
  storage b {{ energy 10 MWh  charge off  discharge max 2 MW min 1 MW when running
    soc start 10 MWh end free  run at least 3 h
    {was} }}
}}
"""


@pytest.mark.parametrize("variant", VARIANTS)
@pytest.mark.parametrize("was, objective, first", [
    # Not declared (idle and rested): idle through the two negative hours, then 2 MW at 50
    # for two hours (a run the horizon cuts short may be shorter than 3 h): 200.
    ("", 200.0, [0.0, 0.0, 2.0, 2.0]),
    # Discharging for 1 h of a 3 h minimum run: it must go on for 2 more hours, at least at
    # its 1 MW minimum at -10 (cost 2 x 10 = 20), and then sells 2 MW at 50 twice: 200 - 20.
    ("was discharging for 1 h at 2 MW", 180.0, [1.0, 1.0, 2.0, 2.0]),
    # 30 min rounds up to one hourly step, as run rules do: the same as 1 h.
    ("was discharging for 30 min at 2 MW", 180.0, [1.0, 1.0, 2.0, 2.0]),
    # The run is 3 h old, or of no stated length (longer than any rule): free to stop.
    ("was discharging for 3 h at 2 MW", 200.0, [0.0, 0.0, 2.0, 2.0]),
    ("was discharging at 2 MW", 200.0, [0.0, 0.0, 2.0, 2.0]),
])
def test_a_minimum_run_begun_before_the_horizon_binds_its_first_steps(was, objective, first, variant):
    _, r = _solve(RUN.format(was=was), variant)
    assert r.status == "optimal"
    assert r.objective == pytest.approx(objective, abs=1e-6)
    assert list(r.tables["b"]["discharge_mw"]) == pytest.approx(first, abs=1e-6)


REST = """
horizon start 2027-01-01T00:00 length 4 h step 1 h
price p values [100, 100, 100, 0]
connection c {{ sell at p  buy at p }}
site s at c {{
  storage b {{ energy 2 MWh  charge max 1 MW  discharge max 1 MW  soc start 2 MWh end free
    rest at least 3 h
    {was} }}
}}
"""


@pytest.mark.parametrize("variant", VARIANTS)
@pytest.mark.parametrize("was, objective", [
    # Rested: sells its 2 MWh in two of the three hours at 100: 200.
    ("", 200.0),
    # Idle for 1 h of a 3 h rest: the first 2 steps stay idle, then one hour at 100: 100.
    ("was idle for 1 h", 100.0),
    ("was idle for 3 h", 200.0),
    # A discharge run that goes on is no stop: no rest is owed, 200.
    ("was discharging for 2 h at 1 MW", 200.0),
    # It was charging: to discharge it must stop, and stopping at step 0 starts a 3-step rest;
    # the only step left sells at 0: 0.
    ("was charging for 2 h at 1 MW", 0.0),
])
def test_a_rest_begun_before_the_horizon_blocks_the_first_steps(was, objective, variant):
    _, r = _solve(REST.format(was=was), variant)
    assert r.status == "optimal"
    assert r.objective == pytest.approx(objective, abs=1e-6)
    if was == "was idle for 1 h":
        assert list(r.tables["b"]["mode"])[:2] == ["idle", "idle"]


RAMP = """
horizon start 2027-01-01T00:00 length {T} h step 1 h
price p values {prices}
connection c {{ sell at p  buy at p }}
site s at c {{
  storage b {{ energy 20 MWh  charge max 4 MW  discharge max 4 MW  soc start 10 MWh end free
    ramp max 1 MW per h  {was} }}
}}
"""


@pytest.mark.parametrize("prices, was, objective, net0", [
    # Not declared: the first step is free: 4 MW at 50 twice (8 of its 10 MWh): 400.
    ([50, 50], "", 400.0, 4.0),
    # Idle before: at most 1 MW in the first step, 2 MW in the second: 3 MWh at 50 = 150.
    ([50, 50], "was idle", 150.0, 1.0),
    # Discharging at 3 MW before: the first step stays within 2..4 MW although the price is
    # -100 (at least 2 MWh at -100 = -200), the second at most 3 MW at 50 (+150): -50.
    ([-100, 50], "was discharging at 3 MW", -50.0, 2.0),
    # Charging at 2 MW before (net -2): the first step's net output is within -3..-1, so at
    # least 1 MW is charged at 100 although discharging would pay: -100.
    ([100], "was charging at 2 MW", -100.0, -1.0),
])
@pytest.mark.parametrize("variant", VARIANTS)
def test_the_ramp_binds_the_first_step_from_the_declared_output(prices, was, objective, net0, variant):
    p, r = _solve(RAMP.format(T=len(prices), prices=prices, was=was), variant)
    assert r.status == "optimal"
    assert r.objective == pytest.approx(objective, abs=1e-6)
    t = r.tables["b"]
    assert t["discharge_mw"].iloc[0] - t["charge_mw"].iloc[0] == pytest.approx(net0, abs=1e-6)


def test_every_row_built_from_the_state_points_at_the_was_line():
    p, r = _solve(RUN.format(was="was discharging for 1 h at 2 MW"))
    built = r.built
    lines = {o.span.line for fam in ("carried_run", "mode_switch") for o in built.origins[fam]
             if "before the horizon" in o.description}
    assert lines == {8}
    assert all(o.span.line == 8 for o in built.origins["carried_run"])


def test_an_impossible_carried_run_is_explained_by_its_was_line():
    # empty and unable to charge, yet a 3 h run at >= 1 MW begun 1 h ago must go on: infeasible,
    # and what has to give is the carried-in run (2 steps x 1 MW)
    text = RUN.format(was="was discharging for 1 h at 2 MW").replace("soc start 10 MWh", "soc start 0 MWh")
    _, r = _solve(text)
    assert r.status == "infeasible"
    lines = {x.span.line for x in r.relaxed}
    assert 8 in lines, r.relaxed


# -- the auditor knows the carried-in rules ----------------------------------------------

def _rewrite(out, name, row, **cells):
    path = out / f"{name}.csv"
    df = pd.read_csv(path, dtype=str, keep_default_na=False)
    for col, val in cells.items():
        df.loc[row, col] = str(val)
    df.to_csv(path, index=False, lineterminator="\n")


@pytest.mark.parametrize("text, cells, finding", [
    # a run begun 1 h before the horizon, cut short: idle in the first step
    (RUN.format(was="was discharging for 1 h at 2 MW"), dict(discharge_mw=0.0, mode="idle"),
     "min run 3 step(s)"),
    # a rest begun 1 h before the horizon, broken in the first step
    (REST.format(was="was idle for 1 h"), dict(discharge_mw=1.0, mode="discharge"), "min rest 3 step(s)"),
    # idle before, 1.5 MW in the first step: more than the 1 MW/h ramp allows
    (RAMP.format(T=2, prices=[50, 50], was="was idle"), dict(discharge_mw=1.5),
     "ramp from the output before the horizon"),
], ids=["run", "rest", "ramp"])
def test_the_auditor_passes_the_engine_and_catches_a_planted_violation(text, cells, finding, tmp_path):
    p, r = _solve(text)
    out = r.write(tmp_path / "out")
    assert audit(p, out) == []
    _rewrite(out, "b", 0, **cells)
    problems = audit(p, out)
    assert any(finding in x and "2027-01-01T00:00" in x for x in problems), problems


# -- against the independent formulation, seeded ------------------------------------------

def _random_case(seed):
    """One site, 1-2 stores with minimum output / run / rest / ramp and a carried-in state."""
    rng = np.random.default_rng(1000 + seed)
    dt = float(rng.choice([0.5, 1.0]))
    T = int(rng.integers(8, 13))
    prices = list(np.round(rng.normal(40, 30, T), 1))
    stores = []
    for j in range(int(rng.integers(1, 3))):
        cmax, dmax = float(rng.choice([0.0, 1.0, 2.0])), float(rng.choice([1.0, 2.0]))
        kw = dict(energy=float(rng.choice([2.0, 4.0])), charge_max=cmax, discharge_max=dmax, power=None,
                  eta_charge=0.9, eta_discharge=0.9, soc_start=1.0, end_rule=F.END_FREE,
                  discharge_min=float(rng.choice([0.0, 0.5 * dmax])),
                  min_run_h=float(rng.choice([0, 2, 3])) * dt, min_rest_h=float(rng.choice([0, 2, 3])) * dt)
        if cmax > 0:
            kw["charge_min"] = float(rng.choice([0.0, 0.5 * cmax]))
        if rng.random() < 0.5:
            kw["ramp_mw_per_h"] = float(rng.choice([0.5, 1.0])) / dt
        mode = str(rng.choice([PRIOR_IDLE, PRIOR_DISCHARGE] + ([PRIOR_CHARGE] if cmax > 0 else [])))
        kw["prior_mode"] = mode
        kw["prior_h"] = None if rng.random() < 0.25 else float(rng.integers(1, 3)) * dt
        if mode != PRIOR_IDLE:
            key = "charge" if mode == PRIOR_CHARGE else "discharge"
            lo, hi = kw.get(f"{key}_min", 0.0), kw[f"{key}_max"]
            out = float(np.round(rng.uniform(lo, hi), 2))
            kw["prior_net_mw"] = out if mode == PRIOR_DISCHARGE else -out
        stores.append(F.storage(f"s{j}", **kw))
    return F.market(prices, stores, step_hours=dt)


SEEDS = range(10)


@pytest.mark.parametrize("seed", SEEDS)
def test_random_carried_states_match_the_oracle_and_pass_the_audit(seed, tmp_path):
    p = _random_case(seed)
    with ThreadPoolExecutor(1) as pool:
        fut = pool.submit(solve_oracle, p)
        rt = dispatch(p, SolveOptions(mip_gap=0, variant="tight", explain_infeasible=False))
        rp = dispatch(p, SolveOptions(mip_gap=0, variant="plain", explain_infeasible=False))
        o = fut.result()
    if o.status == INFEASIBLE or rt.status == "infeasible":
        assert (rt.status, rp.status, o.status) == ("infeasible", "infeasible", INFEASIBLE)
        return
    assert (rt.status, rp.status, o.status) == ("optimal", "optimal", OPTIMAL)
    tol = 1e-6 * max(1.0, abs(o.objective)) + 1e-5
    assert rt.objective == pytest.approx(o.objective, abs=tol)
    assert rp.objective == pytest.approx(o.objective, abs=tol)
    assert audit(p, rt.write(tmp_path / "out")) == []


def test_the_random_cases_carry_every_kind_of_state_into_a_rule():
    """The seeds exercise what the comparison is meant to cover."""
    seen = set()
    for seed in SEEDS:
        for s in _random_case(seed).storages.values():
            steps = None if s.prior_h is None else s.prior_h
            if s.prior_mode != PRIOR_IDLE and s.min_run_h > 0 and steps is not None and steps < s.min_run_h:
                seen.add("run carried")
            if s.prior_mode == PRIOR_IDLE and s.min_rest_h > 0 and steps is not None and steps < s.min_rest_h:
                seen.add("rest carried")
            if s.prior_mode != PRIOR_IDLE and s.min_rest_h > 0:
                seen.add("stop starts a rest")
            if s.ramp_mw_per_h is not None:
                seen.add("ramp from the state")
            if s.prior_mode == PRIOR_CHARGE:
                seen.add("charging")
            if s.prior_h is None:
                seen.add("no duration")
    assert seen == {"run carried", "rest carried", "stop starts a rest", "ramp from the state",
                    "charging", "no duration"}


def test_the_carried_state_changes_the_optimum_of_some_random_cases():
    """Otherwise the comparison above would not test the carried-in rules at all."""
    import dataclasses
    changed = 0
    for seed in SEEDS:
        p = _random_case(seed)
        bare = {k: dataclasses.replace(s, prior_mode=None, prior_h=None, prior_net_mw=0.0)
                for k, s in p.storages.items()}
        opts = SolveOptions(mip_gap=0, explain_infeasible=False)
        a, b = dispatch(p, opts), dispatch(dataclasses.replace(p, storages=bare), opts)
        changed += a.status != b.status or abs(a.objective - b.objective) > 1e-6
    assert changed >= 3, changed    # 5 of the 10 seeds when written
