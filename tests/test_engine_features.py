"""Engine features: routes, supplies, ramps, caps, attribution, origins, hand-off."""

import numpy as np
import pyomo.environ as pe
import pytest

import factory as F
from portfolio.compile import build
from portfolio.dispatch import dispatch
from portfolio.solve import SolveOptions
from portfolio.spans import NOWHERE


def _cascade(delay=2, in_transit=0.6, factor=1.0):
    # upper reservoir releases into a lower one; only the lower one sees a price spike late
    up = F.storage("up", kind="reservoir", energy=10.0, power=None, discharge_max=2.0,
                   soc_start=4.0, eta_discharge=0.8)
    low = F.storage("low", kind="reservoir", energy=10.0, power=None, discharge_max=5.0,
                    site="s2")
    rt = F.route("up_low", "up", "low", delay_steps=delay, factor=factor, in_transit=in_transit)
    sites = [F.site("site"), F.site("s2")]
    return F.portfolio(5, storages=[up, low], routes=[rt], sites=sites,
                       connections=[F.connection(sell=F.price("p"), buy=F.price("p"))],
                       series_list=[F.series("p", [1, 1, 1, 1, 100], "price")])


def test_release_route_moves_water_with_delay():
    r = dispatch(_cascade())
    assert r.status == "optimal"
    up, low, rt = r.tables["up"], r.tables["low"], r.tables["up_low"]
    flow = up["discharge_mw"].to_numpy() / 0.8            # source MWh per step (dt = 1)
    np.testing.assert_allclose(rt["flow_mw"], flow, atol=1e-9)
    expected = np.r_[0.3, 0.3, flow[:3]]                  # in_transit / D, then delayed flow
    np.testing.assert_allclose(rt["arriving_mw"], expected, atol=1e-9)
    np.testing.assert_allclose(low["routed_in_mw"], expected, atol=1e-9)
    assert r.summary["routes"]["up_low"]["in_transit_end_mwh"] == pytest.approx(flow[3:].sum())
    # analytic: releases in steps 0..2 reach "low" by the price-100 step; all
    # 4 MWh stored upstream leave (3.2 MWh at its turbine, price 1) and arrive
    # with the 0.6 MWh in transit: 4.6 MWh sold at 100 -> 460 + 3.2
    assert r.objective == pytest.approx(463.2, abs=1e-7)
    assert low["soc_mwh"].iloc[-1] == pytest.approx(0.0, abs=1e-9)


def test_transfer_route_leaves_the_source_balance():
    hot = F.storage("hot", kind="thermal", energy=5.0, power=None, soc_start=4.0)
    cold = F.storage("cold", kind="thermal", energy=5.0, power=None, discharge_max=1.0)
    rt = F.route("pipe", "hot", "cold", kind="transfer", efficiency=0.5, max_mw=1.0)
    p = F.market([0, 0, 0, 10], [hot, cold], routes=[rt])
    r = dispatch(p)
    assert r.status == "optimal"
    # analytic: 1 MW x 3 steps moved, half arrives (1.5 MWh) plus 1 more MW in
    # step 3 arriving the same step (delay 0) -> cold sells min(1, ...) = 1 MW at 10
    assert r.objective == pytest.approx(10.0, abs=1e-7)
    np.testing.assert_allclose(r.tables["pipe"]["arriving_mw"], 0.5 * r.tables["pipe"]["flow_mw"])
    assert (r.tables["pipe"]["flow_mw"] <= 1.0 + 1e-9).all()


@pytest.mark.parametrize("curtail, status", [(True, "optimal"), (False, "infeasible")])
def test_supply_curtailment_rule(curtail, status):
    pv = F.supply("pv", "pv_mw", curtail_allowed=curtail, at={"curtail_allowed": 9})
    p = F.market([-5, 10], [], supplies=[pv], extra_series=[F.series("pv_mw", [3, 3])],
                 site_kw=dict(export_max=2.0))
    r = dispatch(p)
    assert r.status == status
    if curtail:
        # analytic: curtail all at -5, export 2 of 3 at 10
        assert r.objective == pytest.approx(20.0)
        assert list(r.tables["pv"]["curtailed_mw"]) == pytest.approx([3.0, 1.0])
    else:
        assert {x.family for x in r.relaxed} & {"curtail_limit", "site_export_max"}


def test_supply_charges_storage_directly():
    pv = F.supply("pv", "pv_mw", targets=("bat",))
    bat = F.storage("bat", energy=10.0, power=None, charge_max=5.0, discharge_max=5.0,
                    eta_charge=0.9)
    # buying is dear, so only the supply charges the store
    p = F.market([0, 0, 50], [bat], buy=[100, 100, 100], supplies=[pv],
                 extra_series=[F.series("pv_mw", [2, 2, 0])])
    r = dispatch(p)
    assert r.tables["bat"]["charge_mw"].iloc[:2].tolist() == pytest.approx([2.0, 2.0])
    assert r.tables["site"]["import_mw"].sum() == pytest.approx(0.0)
    assert r.objective == pytest.approx(50 * 3.6)        # analytic: 4 MWh * 0.9 sold at 50


def test_ramp_limit_binds():
    st = F.storage("s", energy=10.0, power=4.0, soc_start=10.0, ramp_mw_per_h=1.0)
    r = dispatch(F.market([0, 0, 100, 0], [st]))
    net = (r.tables["s"]["discharge_mw"] - r.tables["s"]["charge_mw"]).to_numpy()
    assert np.all(np.abs(np.diff(net)) <= 1.0 + 1e-7)
    # analytic: selling x at the spike needs x-1 before and after and x-2 in
    # step 0 (ramp 1 MW/h), so 4x - 4 <= 10 MWh -> x = 3.5
    assert r.objective == pytest.approx(350.0)


def test_portfolio_cap_limits_the_sum_of_connections():
    a = F.storage("a", site="s1", energy=5.0, power=3.0, soc_start=5.0)
    b = F.storage("b", site="s2", energy=5.0, power=3.0, soc_start=5.0)
    conns = [F.connection("c1", sell=F.price("p")), F.connection("c2", sell=F.price("p"))]
    p = F.portfolio(1, storages=[a, b], sites=[F.site("s1", "c1"), F.site("s2", "c2")],
                    connections=conns, cap=F.cap(export_max=4.0),
                    series_list=[F.series("p", [10.0], "price")])
    r = dispatch(p)
    assert r.objective == pytest.approx(40.0)    # analytic: 4 MW cap x 10


def test_net_value_attribution_adds_up_to_the_objective():
    bat = F.storage("bat", energy=2.0, power=1.0, eta_charge=0.9, eta_discharge=0.9, wear=3.0)
    pv = F.supply("pv", "pv_mw", targets=("site", "bat"), curtail_allowed=True)
    p = F.market([10, -2, 30, 60, 20], [bat], buy=[12, 0, 35, 65, 25], supplies=[pv],
                 demands=[F.demand("load", "load_mw")],
                 extra_series=[F.series("pv_mw", [0, 3, 2, 0, 1]),
                               F.series("load_mw", [0.5, 0.5, 1, 1, 0.5])])
    r = dispatch(p)
    s = r.summary
    total = sum(a["net_value"] for sec in ("storages", "supplies", "demands") for a in s[sec].values())
    assert total == pytest.approx(r.objective, abs=1e-7)
    assert s["connections"]["grid"]["net_value"] - 3.0 * s["storages"]["bat"]["energy_out_mwh"] \
        == pytest.approx(r.objective, abs=1e-7)
    assert s["sites"]["site"]["net_value"] == pytest.approx(total, abs=1e-7)


def test_both_interfaces_agree():
    st = F.storage("s", energy=2.0, power=1.0, eta_charge=0.9, eta_discharge=0.9, exclusive=True,
                   discharge_min=0.4)
    p = F.market([5, 1, 8, 3, 9, 2], [st])
    a = dispatch(p, SolveOptions(mip_gap=0.0))
    b = dispatch(p, SolveOptions(mip_gap=0.0, interface="pyomo"))
    assert a.status == b.status == "optimal"
    assert a.objective == pytest.approx(b.objective, abs=1e-7)
    np.testing.assert_allclose(a.schedule.select_dtypes("number"), b.schedule.select_dtypes("number"),
                               atol=1e-6)


def test_progress_is_reported_and_nothing_is_printed(capfd):
    calls = []
    st = F.storage("s", energy=2.0, power=1.0, exclusive=True, min_run_h=2.0)
    r = dispatch(F.market([5, 1, 8, 3, 9, 2], [st]), progress=lambda *a: calls.append(a))
    assert r.status == "optimal" and calls
    elapsed, best, bound, gap = calls[-1]
    assert elapsed >= 0 and best == pytest.approx(r.objective) and bound == pytest.approx(r.best_bound)
    out, err = capfd.readouterr()
    assert out == "" and err == ""


def test_every_family_has_origins_with_spans():
    st = F.storage("s", energy=2.0, power=1.0, exclusive=True, min_run_h=2.0, min_rest_h=1.0,
                   charge_min=0.2, ramp_mw_per_h=1.0, soc_min=0.1, end_rule=F.END_AT_LEAST,
                   end_value=0.5, soc_start=1.0)
    p = F.market([5, 1, 8, 3], [st], connection_kw=dict(exclusive=True, import_max=3.0))
    for relax in (False, True):
        b = build(p, relax=relax)
        comps = [c.name for c in b.model.component_objects(pe.Constraint)]
        assert comps
        for name in comps:
            assert b.origins.get(name), name
            assert all(o.span != NOWHERE and o.description for o in b.origins[name])
    b = build(p)
    for name, (kind, var) in b.family_kind.items():
        if kind == "bounds":
            assert getattr(b.model, name, None) is None and var


def test_natural_supply_spills_when_full():
    lake = F.storage("lake", energy=5.0, power=None, discharge_max=1.0, soc_start=5.0,
                     supply="river", spill_allowed=True, end_rule=F.END_AT_LEAST, end_value=5.0)
    p = F.market([1, 1], [lake], extra_series=[F.series("river", [2.0, 2.0])])
    r = dispatch(p)
    # analytic: full store, 4 MWh arrive, 2 MWh through the turbine, must end full
    assert r.summary["storages"]["lake"]["spilled_mwh"] == pytest.approx(2.0)
    assert r.objective == pytest.approx(2.0)
