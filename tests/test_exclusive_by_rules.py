"""A minimum output, run or rest makes a store's modes exclusive.

Without it, charging and discharging at once nets below the minimum stable
output: with losses and a negative price, a full store could "burn" energy
through its losses and be paid for the import.  Analytic cases, computed by
hand in the comments.
"""

from __future__ import annotations

import pytest

import factory as F
from audit import audit
from portfolio import lint_text
from portfolio.dispatch import dispatch
from portfolio.solve import SolveOptions

BURN = """
horizon start 2027-01-01T00:00 length 1 h step 1 h
price p values [-100]
connection c {{ sell at p  buy at p }}
site s at c {{
  storage b {{ energy 4 MWh  charge max 4 MW{cmin}  discharge max 4 MW{dmin}
    efficiency charge 90% discharge 90%  soc start 100% end free{modes} }}
}}
"""


def _lint(text):
    r = lint_text(text, "case.folio")
    assert r.ok, [f"{d.span}: {d.message}" for d in r.errors]
    return r


def _solve(text):
    r = _lint(text)
    return r.portfolio, dispatch(r.portfolio, SolveOptions(mip_gap=0))


def test_without_a_minimum_output_free_modes_may_burn_energy_through_losses():
    # One hour at -100 per MWh, the store full (4 MWh).  Charging c and discharging d at once
    # keeps the content when 0.9 c = d / 0.9, i.e. d = 0.81 c; the import c - d = 0.19 c is
    # largest at c = 4 MW: 0.76 MWh imported at -100 earns 76.  This is what 'modes free' allows.
    p, r = _solve(BURN.format(cmin="", dmin="", modes=""))
    assert not p.storages["b"].exclusive
    assert r.status == "optimal"
    assert r.objective == pytest.approx(76.0, abs=1e-6)
    assert r.tables["b"]["mode"].iloc[0] == "both"


@pytest.mark.parametrize("cmin, dmin", [(" min 2 MW when running", ""), ("", " min 2 MW when running"),
                                        (" min 2 MW when running", " min 2 MW when running")])
def test_a_minimum_output_forbids_charging_and_discharging_at_once(cmin, dmin, tmp_path):
    # Same hour with a minimum output: the modes are exclusive, so the full store cannot charge,
    # and discharging would export at -100 (a cost): idle, objective 0.
    p, r = _solve(BURN.format(cmin=cmin, dmin=dmin, modes=""))
    b = p.storages["b"]
    assert b.exclusive
    assert r.status == "optimal"
    assert r.objective == pytest.approx(0.0, abs=1e-6)
    assert r.tables["b"]["mode"].iloc[0] == "idle"
    # the compiled model keeps the modes apart, and the row points at the minimum output
    origins = r.built.origins["mode_exclusive"]
    assert [o.span.line for o in origins] == [6]
    out = r.write(tmp_path / "out")
    assert audit(p, out) == []


def test_modes_free_written_beside_a_minimum_output_is_overridden_and_warned():
    text = BURN.format(cmin=" min 2 MW when running", dmin="", modes="  modes free")
    r = _lint(text)
    assert r.portfolio.storages["b"].exclusive
    (w,) = [d for d in r.diagnostics if d.code == "P308"]
    assert "'modes free' is overridden" in w.message and "minimum charge when running" in w.message
    line = text.split("\n")[w.span.line - 1]
    assert line[w.span.col - 1:].startswith("modes free")


def test_the_auditor_catches_simultaneous_flows_of_a_store_with_a_minimum_output(tmp_path):
    p, r = _solve(BURN.format(cmin=" min 2 MW when running", dmin="", modes=""))
    out = r.write(tmp_path / "out")
    # plant the burning schedule of the first test in the written table
    import pandas as pd
    path = out / "b.csv"
    df = pd.read_csv(path, dtype=str, keep_default_na=False)
    df.loc[0, ["charge_mw", "discharge_mw", "mode"]] = ["4", "3.24", "both"]
    df.to_csv(path, index=False, lineterminator="\n")
    problems = audit(p, out)
    assert any("charges and discharges at once" in x for x in problems), problems


def test_engine_storages_get_the_same_rule_without_the_front_end():
    assert F.storage("a", charge_min=0.5).exclusive
    assert F.storage("a", discharge_min=0.5).exclusive
    assert F.storage("a", min_run_h=2.0).exclusive and F.storage("a", min_rest_h=1.0).exclusive
    assert not F.storage("a").exclusive
    with pytest.raises(ValueError, match="exclusive"):
        F.storage("a", discharge_min=0.5, exclusive=False)
