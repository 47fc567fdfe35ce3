"""The bound by pieces (portfolio/windows/split.py; docs/windows.md, "Horizons too long
for memory").

What is checked against what:

* weak duality of a Lagrangian relaxation (Geoffrion 1974, Math. Programming Study 2):
  for ANY seam prices the bound is at least the MILP optimum, and at least the whole
  horizon's LP optimum; tried with random prices, including absurd ones;
* strong LP duality: with the whole horizon's own LP prices at the seams, and nothing
  else tying one piece to the next, the pieces give back the whole LP's optimum;
* an analytic case (a lossless store with power to fill or empty it in a step: the
  optimum is E times the sum of the price rises, by summation by parts);
* end to end: ``dispatch_windows(..., bound="split")`` against the monolith solved to
  optimality, and the schedule auditor (tests/audit.py) on what it writes.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))
import factory as F  # noqa: E402
import random_portfolios as RP  # noqa: E402
from audit import audit  # noqa: E402

from portfolio.compile import build  # noqa: E402
from portfolio.solve import SolveOptions  # noqa: E402
from portfolio.windows import Foresight, Windows, dispatch_windows  # noqa: E402
from portfolio.windows.bound import relax  # noqa: E402
from portfolio.windows.split import (guide_values, piece_model, seam_values,  # noqa: E402
                                     split_bound)

REL = 1e-6
CASES = [("modes", s) for s in range(4)] + [("cascade", s) for s in range(4)] + \
        [("linked", s) for s in range(3)]


def _below(a, b, rel=REL):
    return a <= b + rel * max(1.0, abs(b))


def _thirds(T: int, n: int = 3):
    cuts = [round(i * T / n) for i in range(n + 1)]
    return list(zip(cuts[:-1], cuts[1:]))


def _optimum(family, seed):
    mono = RP.dispatched(family, seed)
    if mono.status != "optimal":
        pytest.skip(f"the monolith is {mono.status}")
    return mono.objective


@pytest.mark.parametrize("family, seed", CASES, ids=[f"{f}-{s}" for f, s in CASES])
def test_any_seam_prices_bound_the_optimum_and_the_whole_lp(family, seed):
    p = RP.make(family, seed)
    best = _optimum(family, seed)
    lp = relax(build(p)).bound
    pieces = _thirds(p.horizon.steps)
    rng = np.random.default_rng(seed)
    tries = [{k: np.zeros(2) for k in p.storages},
             {k: rng.uniform(-200, 400, 2) for k in p.storages},      # absurd, some negative
             seam_values(p, pieces).values,
             guide_values(p, pieces).values]
    for prices in tries:
        sb = split_bound(p, pieces, prices)
        assert sb.bound is not None, sb.reason
        assert _below(best, sb.bound) and _below(lp, sb.bound), (best, lp, sb.bound)
        assert sb.bound == pytest.approx(sum(sb.per_piece), rel=1e-12)


def test_the_whole_lps_own_prices_give_back_the_whole_lp():
    """Stores with losses and efficiencies, no rule across a seam (no minimum run, ramp,
    cycles or delayed route): the pieces priced at the whole LP's balance-row duals are
    the whole LP, dualised; strong LP duality makes the sum equal its optimum."""
    rng = np.random.default_rng(11)
    prices = np.round(rng.uniform(-20, 150, 48), 2)
    p = F.market(prices, [F.storage("a", energy=4, power=1.5, soc_start=1.0, loss_per_h=0.01,
                                    eta_charge=0.92),
                          F.storage("b", energy=9, power=2.0, soc_start=6.0, eta_charge=0.85)])
    rel = relax(build(p))
    pieces = _thirds(48, 4)
    lam = {k: np.array([rel.value[k][b - 1] for _, b in pieces[:-1]]) for k in p.storages}
    sb = split_bound(p, pieces, lam)
    assert sb.bound == pytest.approx(rel.bound, rel=1e-7)
    # and the backward pass finds prices that do as well here
    assert split_bound(p, pieces, guide_values(p, pieces).values).bound == \
        pytest.approx(rel.bound, rel=1e-6)


def test_a_lossless_store_with_unlimited_power_reaches_the_analytic_optimum_by_pieces():
    """Capacity E, starting empty, end free: the optimum is E times the sum of the price
    rises (summation by parts); the schedule by windows and the bound by pieces meet it."""
    rng = np.random.default_rng(3)
    prices = np.round(rng.uniform(5, 120, 60), 2)
    E = 3.0
    p = F.market(prices, [F.storage("b", energy=E, power=1000.0)])
    want = E * float(np.maximum(np.diff(prices), 0.0).sum())
    r = dispatch_windows(p, Windows(12, 6, bound="split"), SolveOptions(mip_gap=0.0))
    w = r.summary["windows"]
    assert w["bound_method"] == "split"
    assert r.objective == pytest.approx(want, rel=1e-9)
    assert w["lp_bound"] == pytest.approx(want, rel=1e-7)
    assert r.status == "optimal"


def _by_split_windows(p):
    """Windows of a quarter of the horizon seeing an eighth more, bounded by pieces, gap 0:
    (result, its summary's windows figures), the result a schedule."""
    dt, T = p.horizon.step_hours, p.horizon.steps
    commit = max(1, T // 4)
    r = dispatch_windows(p, Windows(commit * dt, (commit // 2) * dt, bound="split"),
                         SolveOptions(mip_gap=0.0))
    assert r.status in ("optimal", "feasible"), (r.status, r.message)
    return r, r.summary["windows"]


@pytest.mark.parametrize("family, seed", CASES, ids=[f"{f}-{s}" for f, s in CASES])
def test_windows_bounded_by_pieces_stitch_below_the_optimum_below_the_bound(family, seed, tmp_path):
    p = RP.make(family, seed)
    best = _optimum(family, seed)
    r, w = _by_split_windows(p)
    assert w["bound_method"] == "split" and w["max_violation"] <= 1e-6
    assert _below(r.objective, best) and _below(best, w["lp_bound"])
    assert r.best_bound == w["lp_bound"]
    out = tmp_path / "out"
    r.write(out)
    problems = audit(p, out)
    assert not problems, problems[:5]


@pytest.mark.parametrize("family, seed", [("modes", 1), ("cascade", 2)])
def test_limited_foresight_is_compared_with_a_bound_by_pieces(family, seed):
    p = RP.make(family, seed)
    best = _optimum(family, seed)
    dt, T = p.horizon.step_hours, p.horizon.steps
    c = max(1, T // 5)
    r = dispatch_windows(p, Foresight(2 * c * dt, c * dt, bound="split"), SolveOptions(mip_gap=0.0))
    w = r.summary["windows"]
    assert r.status in ("optimal", "feasible"), (r.status, r.message)
    assert w["bound_method"] == "split"
    assert _below(r.objective, best) and _below(best, w["lp_bound"])


def test_a_piece_carries_nothing_in_and_keeps_the_whole_horizons_share_of_each_day():
    """Nothing before a later piece binds it (levels, runs, ramps, cycles drawn), and a
    day cut by a seam keeps the limit of the whole day: both loosen, never tighten."""
    p = RP.make("modes", 1)
    T = p.horizon.steps
    k, s = next(iter(p.storages.items()))
    from dataclasses import replace
    from portfolio.model import PRIOR_CHARGE
    p = replace(p, storages={**p.storages, k: replace(s, cycles_per_day=1.0, prior_mode=PRIOR_CHARGE,
                                                      prior_h=1.0)})
    first = piece_model(p, 0, T // 2)
    later = piece_model(p, T // 2, T, end_value={k: 5.0})
    assert first.storages[k].prior_mode == PRIOR_CHARGE          # the first keeps what was declared
    assert later.storages[k].prior_mode is None
    assert later.storages[k].soc_start == s.soc_min
    assert later.storages[k].stored_value == 0.0                 # the last piece keeps its own end
    assert first.storages[k].stored_value == 0.0 and first.storages[k].end_rule == "free"
    from portfolio.compile.expressions import calendar_days
    whole = {d: sh for d, _, sh in calendar_days(p.horizon)}
    own = {d: sh for d, _, sh in calendar_days(first.horizon)}
    shares = {d: sh for d, sh, _ in first.storages[k].cycles_days}
    assert shares and shares == {d: whole[d] for d in shares}
    assert any(own[d] < whole[d] for d in shares)       # its own horizon would have cut one
    assert all(before == 0.0 for _, _, before in later.storages[k].cycles_days)


def test_pieces_that_do_not_cover_the_horizon_are_a_fault_of_the_caller():
    p = RP.make("modes", 0)
    T = p.horizon.steps
    with pytest.raises(ValueError):
        split_bound(p, [(0, 5), (6, T)], {})
    with pytest.raises(ValueError):
        seam_values(p, [(0, 5), (5, T - 1)])


@pytest.mark.parametrize("family, seed", [("modes", 0), ("cascade", 1), ("linked", 0)])
def test_an_independent_formulation_lies_between_the_stitched_schedule_and_the_bound(family, seed):
    """The optimum of tests/oracle_pulp.py (written from docs/model.md, solved by CBC at gap 0,
    nothing imported from the engine's compiler or solver) against the windows bounded by pieces."""
    from oracle_pulp import OPTIMAL, solve_oracle
    p = RP.make(family, seed)
    oracle = solve_oracle(p)
    if oracle.status != OPTIMAL:
        pytest.skip(f"the oracle is {oracle.status}")
    r, w = _by_split_windows(p)
    assert _below(r.objective, oracle.objective) and _below(oracle.objective, w["lp_bound"])
