"""Marginal values of a single dispatch (portfolio/marginal.py, docs/marginal-values.md).

Checked three ways, none of which reads a dual:

* analytic: a lossless store behind a connection whose export limit binds in
  exactly one hour; one more MW there lets the store buy one more MWh in the
  cheap hour and sell it in the dear one, so the value is the price
  difference (derived by hand below);
* finite differences: the portfolio compiled again with the limit raised by
  1 MW (1 MWh), every binary held at the dispatch's value, the LP solved here
  with highspy, and the change of its optimum compared with the reported
  value, in cases built so that the dual is unique (the limit binds in one
  step, nothing else is tight there, and +1 stays inside the same basis);
* bad input: with windows (refused), on an infeasible dispatch (a message,
  no table), on a model changed in Pyomo (refused).
"""

from __future__ import annotations

import json
import sys
from dataclasses import replace
from pathlib import Path

import highspy
import numpy as np
import pandas as pd
import pytest

sys.path.insert(0, str(Path(__file__).parent))
import factory as F  # noqa: E402

from portfolio import contract as C  # noqa: E402
from test_cli_dispatch import DEMO, run  # noqa: E402

from portfolio.api import load  # noqa: E402
from portfolio.compile import build  # noqa: E402
from portfolio.dispatch import dispatch  # noqa: E402
from portfolio.marginal import MarginalValuesError, attach  # noqa: E402
from portfolio.solve.highs import make_lp  # noqa: E402


def _limit(mv, asset, limit):
    return next(x for x in mv.limits if x.asset == asset and x.limit == limit)


# --- analytic ---------------------------------------------------------------------------------

def test_analytic_connection_limit_binding_in_one_hour_is_worth_the_price_difference():
    # analytic (hand-derived): a lossless store of 5 MWh and 10 MW, empty at the start, prices
    # 10 then 50 per MWh, export limit 3 MW.  Best: buy 3 MWh in hour 0, sell 3 MWh in hour 1
    # (objective 3 x (50 - 10) = 120); only the export limit of hour 1 binds (the store is not
    # full, its power not reached, import unlimited).  One more MW of export in hour 1 lets it
    # buy one more MWh at 10 and sell it at 50: value 50 - 10 = 40; in hour 0 the limit is
    # slack: 0.
    prices = [10.0, 50.0]
    p = F.market(prices, [F.storage("cell", energy=5.0, power=10.0)],
                 connection_kw={"export_max": 3.0})
    r = dispatch(p)
    assert r.status == "optimal" and r.objective == pytest.approx(3 * (prices[1] - prices[0]))
    mv = attach(r)
    assert mv.computed and not mv.degenerate
    exp = _limit(mv, "grid", "export_max")
    assert exp.per_step.tolist() == pytest.approx([0.0, prices[1] - prices[0]], abs=1e-7)
    assert exp.unit == "money/MW" and exp.span == p.connections["grid"].where("export_max")
    # nothing else binds
    for other in mv.limits:
        if other is not exp:
            assert np.abs(other.per_step).max() == pytest.approx(0.0, abs=1e-7), other.column
    # the table and the summary say the same
    assert r.marginal_values["grid.export_max"].tolist() == pytest.approx([0.0, 40.0], abs=1e-7)
    s = r.summary["marginal_values"]
    assert tuple(s) == C.MARGINAL_KEYS
    row = next(x for x in s["limits"] if x["asset"] == "grid" and x["limit"] == "export_max")
    assert tuple(row) == C.MARGINAL_LIMIT_KEYS
    assert row["horizon"] == pytest.approx(40.0) and row["binding_steps"] == 1
    assert row["largest_at"] == r.portfolio.horizon.index[1].isoformat()


# --- finite differences -----------------------------------------------------------------------

def _fixed_lp_optimum(p, binaries: np.ndarray, variant: str) -> float:
    """The optimum of ``p``'s LP with its integer columns at ``binaries`` (solved here)."""
    mx = build(p, variant=variant).matrix
    ints = np.nonzero(mx.integer)[0]
    assert len(ints) == len(binaries)
    lo, hi = mx.col_lower.copy(), mx.col_upper.copy()
    lo[ints] = hi[ints] = binaries
    h = highspy.Highs()
    h.setOptionValue("output_flag", False)
    h.passModel(make_lp(mx.A, mx.cost, lo, hi, mx.row_lower, mx.row_upper, mx.offset, True,
                        np.zeros(mx.num_col, dtype=bool)))
    h.run()
    assert h.getModelStatus() == highspy.HighsModelStatus.kOptimal
    x = np.asarray(h.getSolution().col_value)
    return float(mx.cost @ x + mx.offset)


def _raised(p, group, asset, field, by):
    decls = dict(getattr(p, group))
    decls[asset] = replace(decls[asset], **{field: getattr(decls[asset], field) + by})
    return replace(p, **{group: decls})


# Each case: prices 10 then 50 (buy 1 below sell, so the direction rule adds binaries) and one
# limit tight in one step only; the others are far from binding.
SELL = [10.0, 50.0]
BUY = [9.0, 49.0]
CASES = {
    "connection export (direction big-M copy)": (
        dict(energy=5.0, power=10.0), {"export_max": 3.0}, {}, ("connections", "grid", "export_max"), 1),
    "connection import": (
        dict(energy=5.0, power=10.0), {"import_max": 2.0}, {}, ("connections", "grid", "import_max"), 0),
    "site export": (
        dict(energy=5.0, power=10.0), {}, {"export_max": 2.5}, ("sites", "site", "export_max"), 1),
    "site import": (
        dict(energy=5.0, power=10.0), {}, {"import_max": 1.5}, ("sites", "site", "import_max"), 0),
    "charge limit, exclusive store (mode rows)": (
        dict(energy=5.0, power=10.0, charge_max=2.0, exclusive=True), {}, {},
        ("storages", "cell", "charge_max"), 0),
    "discharge limit with efficiencies": (
        dict(energy=5.0, power=10.0, discharge_max=2.0, eta_charge=0.9, eta_discharge=0.8), {}, {},
        ("storages", "cell", "discharge_max"), 1),
    "upper state of charge with a loss": (
        dict(energy=2.0, power=10.0, loss_per_h=0.05), {}, {}, ("storages", "cell", "soc_max"), 0),
}


@pytest.mark.parametrize("case", list(CASES))
def test_reported_value_matches_a_finite_difference_with_binaries_held(case):
    store_kw, conn_kw, site_kw, (group, asset, field), step = CASES[case]
    p = F.market(SELL, [F.storage("cell", **store_kw)], buy=BUY, connection_kw=conn_kw,
                 site_kw=site_kw)
    r = dispatch(p)
    assert r.status == "optimal"
    mv = attach(r)
    lim = _limit(mv, asset, field)
    # the limit binds in exactly the step the case was built for
    assert np.nonzero(lim.per_step)[0].tolist() == [step], lim.per_step
    assert lim.per_step[step] > 1.0          # money gained per unit added: positive when it binds
    ints = r.built.matrix.integer
    binaries = np.round(r.built.solution[ints])
    base = _fixed_lp_optimum(p, binaries, r.built.variant)
    assert base == pytest.approx(r.objective, rel=1e-9, abs=1e-7)
    up = _fixed_lp_optimum(_raised(p, group, asset, field, 1.0), binaries, r.built.variant)
    assert up - base == pytest.approx(lim.horizon, rel=1e-6, abs=1e-6)


def test_energy_capacity_is_the_sum_of_the_steps_and_matches_a_finite_difference():
    # a 2 MWh store with ample power fills at 10, sells at 60, fills at 10, sells at 70: full at
    # the end of steps 0 and 2 only, so one more MWh is worth 60 - 10 there, 70 - 10 at step 2
    sell = [10.0, 60.0, 10.0, 70.0]
    p = F.market(sell, [F.storage("cell", energy=2.0, power=10.0)])
    r = dispatch(p)
    mv = attach(r)
    lim = _limit(mv, "cell", "soc_max")
    assert lim.per_step.tolist() == pytest.approx([50.0, 0.0, 60.0, 0.0], abs=1e-7)
    assert r.summary["marginal_values"]["energy_capacity"]["cell"] == pytest.approx(110.0)
    binaries = np.round(r.built.solution[r.built.matrix.integer])
    base = _fixed_lp_optimum(p, binaries, r.built.variant)
    up = _fixed_lp_optimum(_raised(p, "storages", "cell", "soc_max", 1.0), binaries, r.built.variant)
    assert up - base == pytest.approx(lim.horizon, rel=1e-6, abs=1e-6)


def _sandwich(p, r, lim):
    """f(L+1) - f(L) <= reported <= f(L) - f(L-1), f the fixed-binary LP's optimum as a function
    of the limit: true of every optimal dual, unique or not (f is concave in its limits)."""
    binaries = np.round(r.built.solution[r.built.matrix.integer])
    v = r.built.variant
    base = _fixed_lp_optimum(p, binaries, v)
    up = _fixed_lp_optimum(_raised(p, lim.group, lim.asset, lim.limit, 1.0), binaries, v)
    step = min(1.0, lim.declared)
    down = _fixed_lp_optimum(_raised(p, lim.group, lim.asset, lim.limit, -step), binaries, v)
    tol = 1e-6 * max(1.0, abs(base))
    assert up - base <= lim.horizon + tol, lim.column
    assert lim.horizon <= (base - down) / step + tol, lim.column
    return up - base, (base - down) / step


def test_a_degenerate_lp_is_flagged_and_its_value_lies_in_the_range():
    # power and energy both bind when the 2 MWh, 2 MW store fills in one hour: one more MWh of
    # store is worth nothing by itself (+1 gives 0), one less costs 110; any value between is a
    # dual of the LP, and the one reported must be one of them
    p = F.market([10.0, 20.0, 60.0, 10.0, 70.0], [F.storage("cell", energy=2.0, power=2.0)])
    r = dispatch(p)
    mv = attach(r)
    assert mv.degenerate
    assert any("degenerate" in n for n in r.summary["marginal_values"]["notes"])
    lo, hi = _sandwich(p, r, _limit(mv, "cell", "soc_max"))
    assert lo < hi            # the case really has a range


def test_every_limit_of_an_example_lies_between_its_one_sided_differences():
    p = load(DEMO)
    r = p.dispatch()
    mv = p.marginal_values(r)
    assert len(mv.limits) >= 5
    for lim in mv.limits:
        _sandwich(p.model, r, lim)


# --- the command and the files ----------------------------------------------------------------

def test_cli_writes_the_table_and_the_summary_key(tmp_path):
    out = tmp_path / "o"
    code, text, err = run("dispatch", DEMO, "--out", out, "--marginal-values")
    assert code == 0, err
    table = pd.read_csv(out / "marginal_values.csv", index_col="time")
    schedule = pd.read_csv(out / "schedule.csv", index_col="time")
    assert list(table.index) == list(schedule.index)
    summary = json.loads((out / "summary.json").read_text())
    mv = summary["marginal_values"]
    assert mv["status"] == "computed"
    assert mv["lp_objective"] == pytest.approx(summary["objective"], rel=1e-7, abs=1e-6)
    assert list(table.columns) == [C.marginal_column(x["asset"], x["limit"]) for x in mv["limits"]]
    for x in mv["limits"]:
        col = table[C.marginal_column(x["asset"], x["limit"])]
        # the CSV is rounded to 6 decimals (docs/outputs.md): each value within 5e-7
        assert col.sum() == pytest.approx(x["horizon"], rel=1e-9, abs=1e-9 + 5e-7 * len(col))
        assert (col >= -1e-6).all(), x          # upper limits of a maximisation: never negative
    assert "marginal_values.csv" in json.loads((out / C.MARKER).read_text())["files"]
    assert "marginal values: one more unit of a limit in one step" in text
    assert "marginal_values.csv" in text


def test_with_windows_is_refused_before_anything_is_solved(tmp_path):
    code, text, err = run("dispatch", DEMO, "--out", tmp_path / "o", "--windows", "1d",
                          "--marginal-values")
    assert code == 2
    assert "--marginal-values does not combine with --windows" in err
    assert "nothing was dispatched or written" in err
    assert not (tmp_path / "o").exists()
    p = load(DEMO)
    with pytest.raises(MarginalValuesError, match="--windows"):
        p.dispatch(windows="1d", marginal_values=True)


def test_infeasible_dispatch_says_so_and_writes_no_table(tmp_path):
    f = tmp_path / "tight.folio"
    # a store that must end 90 % full but can draw only 1 MW for 2 h through its connection
    f.write_text("horizon start 2027-01-01T00:00 length 2 h step 1 h\n"
                 "connection c { import max 1 MW buy at 50 per MWh }\n"
                 "site s at c { storage b { energy 10 MWh charge max 5 MW discharge max 5 MW\n"
                 "  soc start 0 MWh end at least 90% } }\n")
    out = tmp_path / "o"
    code, text, err = run("dispatch", f, "--out", out, "--marginal-values")
    assert code == 3
    assert "no marginal values: the dispatch found no schedule (status infeasible)" in err
    summary = json.loads((out / "summary.json").read_text())
    assert summary["marginal_values"]["status"] == "not_computed"
    assert summary["marginal_values"]["limits"] == []
    assert not (out / "marginal_values.csv").exists()
    assert sorted(json.loads((out / C.MARKER).read_text())["files"]) == [C.SUMMARY_FILE]


def test_a_model_changed_in_pyomo_is_refused():
    p = load(DEMO)
    m = p.compile()
    r = p.solve(m)
    assert r.status == "optimal"
    with pytest.raises(MarginalValuesError, match="Pyomo"):
        p.marginal_values(r)
    assert "marginal_values" not in r.summary and r.marginal_values is None


def test_api_dispatch_with_marginal_values_equals_asking_afterwards():
    p = load(DEMO)
    a = p.dispatch(marginal_values=True)
    b = p.dispatch()
    mv = p.marginal_values(b)
    assert mv.computed
    pd.testing.assert_frame_equal(a.marginal_values, b.marginal_values, atol=1e-6, rtol=1e-6)


def test_an_asset_named_like_the_table_is_refused_by_the_writer(tmp_path):
    from portfolio.writers import OutputFolderError

    p = F.market([10.0, 50.0], [F.storage(C.MARGINAL_TABLE, energy=1.0, power=1.0)])
    r = dispatch(p)
    attach(r)
    with pytest.raises(OutputFolderError, match="marginal values"):
        r.write(tmp_path / "o")
    assert not (tmp_path / "o").exists()
