"""The façade (``portfolio.load`` -> LoadedPortfolio) and Pyomo as the extension point.

The worked case (docs/extending.md): a rule the language does not have, "at
most N charge starts per day", written in Pyomo on ``p.compile()`` and solved
with ``p.solve(m)``.  The prices make the unconstrained optimum charge three
times a day; the expected optima are derived by hand below (analytic, for
this price shape), not taken from a run.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

import factory as F
import portfolio
from portfolio.compile import build
from portfolio.dispatch import dispatch
from portfolio.facade import LoadedPortfolio

pe = pytest.importorskip("pyomo.environ")

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "examples" / "glen_cascade" / "glen_cascade.folio"

DAYS = 2
STEP_H = 3.0                                   # hours a step: eight steps a day
PER_DAY = 8
LOW, MID, HIGH = 10.0, 50.0, 100.0
FEE = 1.0                                      # buying costs the price plus this: no round trip pays at one price
DAY = (MID, LOW, HIGH, LOW, HIGH, LOW, HIGH, MID)   # money per MWh, step by step: three troughs, three peaks
POWER = 1.0                                    # MW, both ways
ENERGY = POWER * STEP_H                        # MWh: one step at full power fills it
P_MIN = 0.25                                   # MW: charging, in the user's rule, means at least this


def _prices():
    return np.tile(np.array(DAY), DAYS)


def _battery_market():
    # lossless, empty at the start, end free; exclusive: never charges and
    # discharges in one step (the language's own rule)
    store = F.storage("store", energy=ENERGY, power=POWER, exclusive=True)
    return F.market(_prices(), [store], buy=_prices() + FEE, step_hours=STEP_H)


def charge_starts_per_day(charge_mw: np.ndarray, tol: float = 1e-6) -> list:
    """Per day: steps that charge after a step that did not (before step 0: idle)."""
    on = charge_mw > tol
    starts = on & ~np.concatenate(([False], on[:-1]))
    return [int(starts[d * PER_DAY:(d + 1) * PER_DAY].sum()) for d in range(DAYS)]


def limit_charge_starts(m, n_per_day: int, storage: str = "store", p_max: float = POWER):
    """The user's rule, in Pyomo: at most ``n_per_day`` charge starts per day.

    ``charging[t]`` is 1 exactly when the store charges at least P_MIN, and a
    start is a step that charges after one that did not.
    """
    T = DAYS * PER_DAY
    steps = range(T)
    charge = m.charge_site
    m.charging = pe.Var(steps, domain=pe.Binary)
    m.start = pe.Var(steps, bounds=(0, 1))
    m.charge_only_when_on = pe.Constraint(steps, rule=lambda m, t: charge[storage, t] <= p_max * m.charging[t])
    m.charge_floor_when_on = pe.Constraint(steps, rule=lambda m, t: charge[storage, t] >= P_MIN * m.charging[t])
    m.start_def = pe.Constraint(
        steps, rule=lambda m, t: m.start[t] >= m.charging[t] - (m.charging[t - 1] if t else 0))
    m.starts_per_day = pe.Constraint(
        range(DAYS), rule=lambda m, d: sum(m.start[t] for t in range(d * PER_DAY, (d + 1) * PER_DAY))
        <= n_per_day)
    return m


def expected_optimum(n_per_day: int) -> float:
    """By hand.  Upper bound: exclusive modes and the floor P_MIN mean no
    discharge inside a charging run, so one run stores at most the ENERGY
    capacity; with k = min(N, 3) runs a day, at most k * ENERGY MWh a day is
    sold, each MWh at most HIGH and bought at least LOW + FEE:
    k * ENERGY * (HIGH - LOW - FEE) a day.  It is reached: fill the store in
    k of the troughs (one step at full power) and empty it in the next peak.
    (Three troughs a day, so three runs a day is the most that pays.)"""
    return DAYS * min(n_per_day, 3) * ENERGY * (HIGH - LOW - FEE)


def _storage_table(r):
    return r.tables["store"]


def test_the_unconstrained_optimum_starts_charging_three_times_a_day():
    r = LoadedPortfolio(_battery_market(), "factory.folio").dispatch(mip_gap=0.0)
    assert r.status == "optimal"
    assert r.objective == pytest.approx(expected_optimum(3), abs=1e-6)
    assert charge_starts_per_day(_storage_table(r)["charge_mw"].to_numpy()) == [3] * DAYS


@pytest.mark.parametrize("n", [1, 2])
def test_a_pyomo_rule_limits_charge_starts_per_day(n):
    p = LoadedPortfolio(_battery_market(), "factory.folio")
    free = p.dispatch(mip_gap=0.0)
    m = limit_charge_starts(p.compile(), n)
    r = p.solve(m, mip_gap=0.0)
    assert r.status == "optimal", r.message
    starts = charge_starts_per_day(_storage_table(r)["charge_mw"].to_numpy())
    assert all(s <= n for s in starts), starts
    assert r.objective <= free.objective + 1e-6
    assert r.objective == pytest.approx(expected_optimum(n), abs=1e-6)
    assert r.objective < free.objective - 1.0          # the rule bites
    # the figures are the certificate's, checked against the changed model
    assert r.summary["certificate"]["feasible"] and not r.summary["certificate"]["failures"]
    assert r.summary["model"]["source"] == "pyomo"
    assert r.summary["model"]["added_columns"] == 2 * DAYS * PER_DAY
    assert r.best_bound == pytest.approx(r.objective, abs=1e-6)
    # the solution is loaded into the user's own variables too
    on = np.array([pe.value(m.charging[t]) for t in range(DAYS * PER_DAY)])
    assert np.array_equal(on > 0.5, _storage_table(r)["charge_mw"].to_numpy() > 1e-6)


def test_the_certificate_checks_the_users_rows():
    """The matrix the changed model is certified against holds the user's
    rows: the unconstrained optimum (with its charging and start indicators
    filled in consistently) passes the portfolio's own matrix and fails the
    changed one, at the user's starts-per-day row."""
    from portfolio.solve import certify, solve

    built = build(_battery_market())
    sol = solve(built)
    x = np.concatenate([sol.values[n] for n in built.matrix.var_ranges])
    assert certify.check_vector(built.matrix, x)[0] <= certify.TOL
    changed = built.for_model(limit_charge_starts(built.model, 1))
    on = (built.array(sol.values, "charge_site", "store") > 1e-6).astype(float)
    start = np.maximum(on - np.concatenate(([0.0], on[:-1])), 0.0)
    worst, where = certify.check_vector(changed.matrix, np.concatenate([x, on, start]))
    assert worst >= 1.0 and "starts_per_day" in where, (worst, where)


def test_the_rule_through_pyomos_interface_agrees():
    p = LoadedPortfolio(_battery_market(), "factory.folio")
    r = p.solve(limit_charge_starts(p.compile(), 1), mip_gap=0.0, interface="pyomo")
    assert r.status == "optimal", r.message
    assert r.objective == pytest.approx(expected_optimum(1), abs=1e-6)


def test_an_added_objective_term_is_the_objective_reported():
    # a charge of 5 per charge start (money), on the unlimited rule: the optimum
    # becomes max over k in 0..3 runs a day of k * (ENERGY * (HIGH - LOW - FEE) - 5)
    p = LoadedPortfolio(_battery_market(), "factory.folio")
    m = limit_charge_starts(p.compile(), 3)
    m.objective.deactivate()
    m.with_start_cost = pe.Objective(expr=m.objective.expr - 5.0 * sum(m.start.values()),
                                     sense=pe.maximize)
    r = p.solve(m, mip_gap=0.0)
    assert r.status == "optimal", r.message
    assert r.objective == pytest.approx(DAYS * 3 * (ENERGY * (HIGH - LOW - FEE) - 5.0), abs=1e-6)


def test_an_infeasible_rule_is_reported_as_the_solvers_claim():
    p = LoadedPortfolio(_battery_market(), "factory.folio")
    m = p.compile()
    m.impossible = pe.Constraint(expr=m.charge_site["store", 0] >= 2 * POWER)   # above its limit
    r = p.solve(m)
    assert r.status == "infeasible"
    assert r.relaxed == [] and r.schedule is None
    assert any("HiGHS's claim" in n for n in r.summary["notes"])


def test_an_unchanged_model_reads_back_as_the_compiled_matrix():
    """The read-back arrays equal the compiler's (a ranged row reads back as
    two one-sided rows; rows compared as sets)."""
    from portfolio.compile.pyomo_model import from_pyomo

    p = portfolio.load(EXAMPLE).model
    built = build(p)
    mx, cols = from_pyomo(built.model, built.model_columns, built.matrix)
    base = built.matrix
    assert cols == list(built.model_columns)
    for name in ("col_lower", "col_upper", "integer", "cost"):
        assert np.array_equal(getattr(mx, name), getattr(base, name)), name
    assert mx.offset == pytest.approx(base.offset) and mx.maximize == base.maximize
    assert _row_set(mx) == _row_set(base)


def _row_set(mx) -> list:
    A = mx.A.tocsr()
    out = []
    for i in range(A.shape[0]):
        lo, hi = mx.row_lower[i], mx.row_upper[i]
        terms = tuple(sorted((int(j), round(float(v), 9)) for j, v in
                             zip(A.indices[A.indptr[i]:A.indptr[i + 1]], A.data[A.indptr[i]:A.indptr[i + 1]])))
        sides = [(lo, hi)] if lo == hi or np.isinf(lo) or np.isinf(hi) else [(-np.inf, hi), (lo, np.inf)]
        out += [(terms, round(float(a), 9), round(float(b), 9)) for a, b in sides]
    return sorted(out)


def test_solve_refuses_a_model_it_did_not_make():
    p = LoadedPortfolio(_battery_market(), "factory.folio")
    other = LoadedPortfolio(_battery_market(), "factory.folio")
    with pytest.raises(ValueError, match="compile"):
        p.solve(other.compile())
    with pytest.raises(ValueError, match="compile"):
        p.solve(pe.ConcreteModel())


def test_solve_refuses_a_nonlinear_model():
    p = LoadedPortfolio(_battery_market(), "factory.folio")
    m = p.compile()
    m.curved = pe.Constraint(expr=m.charge_site["store", 0] ** 2 <= 0.5)
    with pytest.raises(ValueError, match="linear"):
        p.solve(m)


def test_load_returns_the_facade():
    loaded = portfolio.load(EXAMPLE)
    assert isinstance(loaded, portfolio.LoadedPortfolio)
    assert loaded.path == str(EXAMPLE) and loaded.name == loaded.model.name
    assert loaded.warnings == ()
    g = loaded.graph()
    assert set(loaded.model.storages) | set(loaded.model.sites) <= set(g.nodes)
    r = loaded.dispatch(mip_gap=0.0)
    assert r.objective == pytest.approx(dispatch(loaded.model).objective, rel=1e-4)
    with pytest.raises(TypeError):
        loaded.dispatch(portfolio.SolveOptions(), time_limit=5)


WARNED = """horizon start 2027-03-01T00:00 length 4 h step 1 h zone "UTC"
connection grid { export max 10 MW import max 10 MW sell at 5 per MWh buy at 5 per MWh }
preset spare { energy 1 MWh }
site yard at grid {
  storage cells { kind battery energy 4 MWh charge max 2 MW discharge max 2 MW }
}
"""


def test_load_keeps_the_lint_warnings(tmp_path):
    path = tmp_path / "warned.folio"
    path.write_text(WARNED)                          # the preset no storage takes: P309
    loaded = portfolio.load(path)
    assert [(d.code, d.span.line) for d in loaded.warnings] == [("P309", 3)]
    assert loaded.warnings == tuple(portfolio.lint_file(path).diagnostics)
    assert loaded.path == str(path) and loaded.model.path == str(path)
