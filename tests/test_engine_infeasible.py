"""Statuses, and explaining an infeasible portfolio by its source spans."""

import highspy
import pytest

import factory as F
from portfolio import solve as S
from portfolio.dispatch import dispatch, exit_code


def _short_site(import_line=42):
    site = F.site("home", import_max=5.0, at={"import_max": import_line})
    load = F.demand("load", "load_mw", site="home")
    return F.portfolio(3, sites=[site], demands=[load],
                       series_list=[F.series("load_mw", [4.0, 10.0, 10.0])])


def test_demand_above_import_limit_names_the_site_limit():
    r = dispatch(_short_site(42))
    assert r.status == "infeasible"
    assert r.schedule is None and r.objective is None
    assert r.relaxed, "the explanation must name what had to give"
    top = r.relaxed[0]
    assert (top.span.path, top.span.line) == ("factory.folio", 42)
    assert top.family == "site_import_max"
    assert top.amount == pytest.approx(10.0, abs=1e-6)      # 5 MW short in two 1-h steps
    assert top.steps == 2 and top.first.hour == 1
    assert r.summary["relaxed"][0]["line"] == 42
    assert r.exit_code == 3


def test_full_store_that_may_not_spill():
    st = F.storage("lake", energy=10.0, power=1.0, soc_start=9.0, supply="river",
                   at={"spill_allowed": 7})
    p = F.market([5.0, 5.0, 5.0], [st], extra_series=[F.series("river", [5.0, 5.0, 5.0])],
                 connection_kw=dict(export_max=1.0))
    r = dispatch(p)
    assert r.status == "infeasible"
    fams = {x.family for x in r.relaxed}
    assert fams & {"spill_limit", "soc_max"}
    # 15 MWh arrive, 1 MWh room, 3 MWh may leave through the turbine: 11 MWh must give
    assert sum(x.amount for x in r.relaxed) == pytest.approx(11.0, abs=1e-6)


def test_explanation_can_be_switched_off():
    r = dispatch(_short_site(), S.SolveOptions(explain_infeasible=False))
    assert r.status == "infeasible" and r.relaxed == []


def test_status_table_covers_every_highs_status():
    members = list(highspy.HighsModelStatus.__members__.values())
    assert set(members) == set(S.HIGHS_STATUS)
    allowed = set(S.STATUSES) | {S.LIMIT, S.INFEASIBLE_OR_UNBOUNDED}
    assert set(S.HIGHS_STATUS.values()) <= allowed
    assert S.HIGHS_STATUS[highspy.HighsModelStatus.kTimeLimit] == S.LIMIT


@pytest.mark.parametrize("status, code", [("optimal", 0), ("feasible", 0), ("infeasible", 3),
                                          ("unbounded", 4), ("no_schedule", 5), ("error", 6)])
def test_exit_codes(status, code):
    assert exit_code(status) == code


def test_buy_below_sell_gets_a_direction_binary():
    # without it, importing and exporting at once would be unbounded profit
    p = F.market([50.0, 50.0], [], buy=[40.0, 60.0])
    r = dispatch(p)
    assert r.status == "optimal" and r.objective == pytest.approx(0.0, abs=1e-9)
    assert r.built.expr["direction_steps"] == {"grid": [0]}


def test_options_are_validated():
    for bad in (dict(time_limit=0), dict(mip_gap=1.5), dict(threads=0), dict(variant="x"),
                dict(interface="y")):
        with pytest.raises(ValueError):
            S.SolveOptions(**bad)


def test_thread_count_can_change_between_solves():
    st = F.storage("s", energy=2.0, power=1.0, exclusive=True)
    p = F.market([5, 1, 8, 3], [st])
    objs = [dispatch(p, S.SolveOptions(threads=n)).objective for n in (1, 2, None)]
    assert objs == pytest.approx([7.0] * 3)     # analytic: 1 MWh bought at 1, sold at 8
