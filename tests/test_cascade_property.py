"""Property: in a lossless cascade with delay d, what reaches the lower
reservoir is the upper one's release shifted by d steps, and in the first d
steps what was declared in transit at the start (analytic: conservation of
water along a channel with a pure delay)."""

from __future__ import annotations

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import factory as F
from portfolio.dispatch import dispatch
from portfolio.solve import SolveOptions


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    delay=st.integers(min_value=0, max_value=4),
    prices=st.lists(st.floats(min_value=-20, max_value=120, allow_nan=False), min_size=8, max_size=16),
    in_transit=st.sampled_from([0.0, 2.0, 6.5]),
    factor=st.sampled_from([1.0, 0.6]),
    with_spill=st.booleans(),
)
def test_lower_routed_in_is_upper_release_shifted(delay, prices, in_transit, factor, with_spill):
    n = len(prices)
    upper = F.storage("upper", energy=40.0, power=None, discharge_max=6.0, charge_max=0.0,
                      soc_start=20.0, kind="reservoir", spill_allowed=with_spill)
    lower = F.storage("lower", energy=30.0, power=None, discharge_max=5.0, charge_max=0.0,
                      soc_start=5.0, kind="reservoir", spill_allowed=True)
    routes = [F.route("rel", "upper", "lower", "release", delay_steps=delay, factor=factor,
                      in_transit=in_transit if delay else 0.0)]
    if with_spill:
        routes.append(F.route("sp", "upper", "lower", "spill", delay_steps=delay, factor=factor))
    p = F.market(prices, [upper, lower], routes=routes)
    r = dispatch(p, SolveOptions(mip_gap=0))
    assert r.status == "optimal", r.status
    up, lo = r.tables["upper"], r.tables["lower"]
    out = up["routed_out_mw"].to_numpy()
    arrived = lo["routed_in_mw"].to_numpy()
    # lossless release: what leaves is what the turbines draw, plus any spill
    np.testing.assert_allclose(out, up["discharge_mw"].to_numpy() + up["spill_mw"].to_numpy(), atol=1e-6)
    expected = np.empty(n)
    if delay:
        expected[:delay] = in_transit / delay          # dt = 1 h: MWh per step == MW
        expected[delay:] = factor * out[:n - delay]
    else:
        expected[:] = factor * out
    np.testing.assert_allclose(arrived, expected, atol=1e-6)
    # what is still in the channel at the end is reported
    tail = factor * out[n - delay:].sum() if delay else 0.0
    total_end = sum(v.get("in_transit_end_mwh", 0.0) for v in r.summary["routes"].values())
    assert abs(total_end - tail) < 1e-6
