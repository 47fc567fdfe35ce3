"""Rules written in the language, dispatched end to end and checked by hand
(analytic: each case is small enough to solve on paper; the reasoning is in
the comments)."""

from __future__ import annotations

import math

import pytest

from portfolio import lint_text
from portfolio.dispatch import dispatch
from portfolio.solve import SolveOptions


def solve(text: str):
    r = lint_text(text, "case.folio")
    assert r.ok, [f"{d.span}: {d.message}" for d in r.errors]
    return r.portfolio, dispatch(r.portfolio, SolveOptions(mip_gap=0))


RUN = """
horizon start 2027-01-01T00:00 length 2 h step 30 min
price p values [0, 100, 0, 0]
connection c {{ sell at p  buy at 1000 per MWh }}
site s at c {{
  storage b {{ energy 5 MWh charge off discharge max 10 MW min 1 MW when running
    soc start 100% end free  run at least {run} }}
}}
"""


@pytest.mark.parametrize("run,objective", [("30 min", 500.0), ("40 min", 450.0), ("60 min", 450.0),
                                           ("61 min", 400.0)])
def test_minimum_run_is_rounded_up_to_whole_steps(run, objective):
    # One step priced 100 (30 min): a 1-step run sells 10 MW x 0.5 h = 5 MWh -> 500.
    # A 2-step run must hold >= 1 MW in its other step, leaving 9 MW at the price: 450.
    # 61 min is 3 steps: two steps at 1 MW at price 0, 8 MW at the price -> 400.
    _, r = solve(RUN.format(run=run))
    assert r.status == "optimal"
    assert r.objective == pytest.approx(objective, abs=1e-6)


def test_loss_per_day_compounds_to_the_stated_daily_loss():
    p, _ = solve("""
horizon start 2027-01-01T00:00 length 24 h step 1 h
connection c { sell at 1 per MWh  buy at 1 per MWh }
site s at c { storage b { energy 10 MWh charge max 1 MW discharge max 1 MW loss 50% per d } }
""")
    l = p.storages["b"].loss_per_h
    assert (1 - l) ** 24 == pytest.approx(0.5, rel=1e-9)       # a day loses exactly half
    assert l == pytest.approx(1 - 0.5 ** (1 / 24), rel=1e-9)


def test_two_transfers_between_the_same_stores_each_get_a_table():
    p, r = solve("""
horizon start 2027-01-01T00:00 length 3 h step 1 h
price p values [10, 10, 90]
connection c { sell at p buy at p }
site s at c {
  storage h1 { kind thermal energy 4 MWh charge max 2 MW discharge off soc start 4 MWh end free }
  storage h2 { kind thermal energy 9 MWh charge off discharge max 9 MW soc end free }
}
route h1 transfer -> h2 max 1 MW
route h1 transfer -> h2 delay 1 h max 2 MW
""")
    assert r.status == "optimal"
    names = [rt.name for rt in p.routes]
    assert len(set(names)) == 2 and all(n in r.tables for n in names)
    # h1 holds 4 MWh and charges at 10 for the price of 90; everything must reach h2 by the last step
    assert r.objective > 0


def test_in_transit_past_the_horizon_end_is_reported():
    # delay 5 h on a 3 h horizon: 10 MWh were in transit at the start, 2 MWh arrive in each of
    # the first 5 steps, so 3 steps x 2 MWh arrive and 4 MWh are still on their way; what the
    # upper store releases never arrives within the horizon.
    p, r = solve("""
horizon start 2027-01-01T00:00 length 3 h step 1 h
price p values [50, 50, 50]
connection c { sell at p buy at p }
site s at c {
  storage up { kind reservoir energy 20 MWh discharge max 10 MW soc start 10 MWh end free }
  storage low { kind reservoir energy 20 MWh discharge max 1 MW soc end free spill allowed }
  route up release -> low delay 5 h in transit 10 MWh
}
""")
    (route,) = p.routes
    released = float(r.tables[route.name]["flow_mw"].sum())   # dt = 1 h
    arrived = float(r.tables[route.name]["arriving_mw"].sum())
    assert arrived == pytest.approx(6.0, abs=1e-6)
    assert r.summary["routes"][route.name]["in_transit_end_mwh"] == pytest.approx(released + 4.0, abs=1e-6)
    assert math.isclose(released, 10.0, abs_tol=1e-6)        # it sells all it holds


HOLD = """
horizon start 2027-01-01T00:00 length 6 h step 1 h
price p values [10, 100, 10, 100, 10, 100]
connection c {{ sell at p  buy at p }}
site s at c {{
  storage b {{ energy 1 MWh  charge max 1 MW  discharge max 1 MW  soc start 0 MWh end free  modes exclusive{rule} }}
}}
"""


@pytest.mark.parametrize("variant", ["tight", "plain"])
@pytest.mark.parametrize("rule, objective", [("", 270.0), ("  run at least 2 h", 90.0)])
def test_a_run_rule_without_minimum_output_still_holds_the_mode(rule, objective, variant):
    # No minimum output, so a run may continue at 0 MW, but it still blocks the other direction.
    # Without the rule: charge 1 MWh at 10, sell it at 100, three times: 3 x 90 = 270.
    # With runs of at least two steps the mode cannot switch every hour.  A cycle needs a charge
    # at 10 (steps 0, 2, 4) and a later discharge at 100 (steps 1, 3, 5) in a different run.  The
    # first charge run covers two steps, so the discharge run starts at step 2 at the earliest
    # and sells at step 3; a second charge run then starts at step 4 at the earliest and, being
    # at least two steps long unless the horizon cuts it, leaves no step for a discharge: one
    # cycle, 90.  (Runs C{0,1} D{2,3} C{4,5}, or C{0..3} D{4,5}, reach it.)
    r = lint_text(HOLD.format(rule=rule), "case.folio")
    assert r.ok
    assert [d.code for d in r.diagnostics] == (["P308"] if rule else [])   # warns: no minimum output
    res = dispatch(r.portfolio, SolveOptions(mip_gap=0, variant=variant))
    assert res.status == "optimal"
    assert res.objective == pytest.approx(objective, abs=1e-6)


FREE = """
horizon start 2027-01-01T00:00 length 2 h step 1 h
price p values [-20, 30]
connection c {{ sell at p {buy} }}
site s at c {{ storage b {{ energy 1 MWh  charge max 1 MW  discharge max 1 MW  soc end free }} }}
"""


def test_import_without_a_price_is_an_error_that_says_how_to_mean_it():
    r = lint_text(FREE.format(buy=""), "case.folio")
    (e,) = r.errors
    assert e.code == "P311" and "write 'buy at 0 per MWh'" in e.message
    # Said explicitly, free import is allowed: charge 1 MWh for nothing in the first hour
    # (exporting nothing at -20) and sell it at 30 in the second: 30.
    p, res = solve(FREE.format(buy=" buy at 0 per MWh"))
    assert res.objective == pytest.approx(30.0, abs=1e-6)
