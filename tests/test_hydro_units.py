"""Reservoirs declared in volume (`energy equivalent X per m3`, docs/language.md
"Reservoir content"): checks from outside the code.

* Conversion by hand: X kWh per m3 is X/1000 MWh per m3 (1 kWh = 1e-3 MWh); a
  volume V m3 is V*X MWh; a flow F m3/s is F*3600*X MW (3600 s in an hour, and
  a MW is a MWh per hour).  1 hm3 = 1e6 m3.  The figures below are computed in
  the comments beside each case, not by the code under test.
* The same reservoir declared in hm3 and in MWh dispatches identically (the
  checker converts once; the model is in MWh inside).
* An m3/s inflow series read from a CSV file becomes the hand-computed MW.
* Dimension errors give their codes at the quantity's span (lint cases in
  tests/lint_cases: P318_*, P319_*, P302_volume_on_a_connection,
  P313_energy_equivalent_in_mwh_per_m3_typo).
* Outputs carry m3 and m3/s beside MWh and MW; the schedule auditor
  (tests/audit.py) checks the conversion and notices a wrong one.
* The CBC oracle (tests/oracle_pulp.py, an independent formulation) agrees on a
  converted case.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from audit import audit
from oracle_pulp import OPTIMAL, solve_oracle
from portfolio import lint_text, load

HEAD = ('horizon start 2027-03-01T00:00 length 4 h step 1 h zone "UTC"\n'
        "price spot values [10 80 20 90] per MWh\n"
        "connection grid { export max 100 MW import max 100 MW sell at spot buy at spot }\n")

# 0.25 kWh per m3 = 0.00025 MWh per m3.  By hand:
#   0.4 hm3 = 400,000 m3 -> 100 MWh;  0.2 hm3 -> 50 MWh;  0.04 hm3 -> 10 MWh
#   50 m3/s -> 50*3600*0.00025 = 45 MW;  10 m3/s -> 9 MW;  5 m3/s -> 4.5 MW
#   river [20 20 10 10] m3/s -> [18 18 9 9] MW
IN_VOLUME = HEAD + """site glen at grid {
  storage lake { kind reservoir  energy equivalent 0.25 kWh per m3  energy 0.4 hm3
                 soc min 0.04 hm3 start 0.2 hm3 end free
                 discharge max 50 m3 per s min 5 m3 per s when running  charge off
                 spill allowed max 10 m3 per s
                 supply river values [20 20 10 10] m3 per s }
}
"""
IN_MWH = HEAD + """site glen at grid {
  storage lake { kind reservoir  energy 100 MWh
                 soc min 10 MWh start 50 MWh end free
                 discharge max 45 MW min 4.5 MW when running  charge off
                 spill allowed max 9 MW
                 supply river values [18 18 9 9] MW }
}
"""
EQ = 0.25e-3   # MWh per m3


def _load(tmp_path: Path, text: str, name: str):
    path = tmp_path / f"{name}.folio"
    path.write_text(text, encoding="utf-8")
    return load(path)


def test_the_model_holds_the_hand_converted_mwh(tmp_path):
    s = _load(tmp_path, IN_VOLUME, "vol").model.storages["lake"]
    assert s.mwh_per_m3 == pytest.approx(EQ, rel=1e-12)
    assert (s.energy, s.soc_min, s.soc_start) == pytest.approx((100.0, 10.0, 50.0), rel=1e-12)
    assert (s.discharge_max, s.discharge_min, s.spill_max) == pytest.approx((45.0, 4.5, 9.0), rel=1e-12)
    p = _load(tmp_path, IN_VOLUME, "vol2").model
    assert p.profile(s.supply) == pytest.approx([18.0, 18.0, 9.0, 9.0], rel=1e-12)


def test_a_reservoir_in_hm3_dispatches_as_the_same_reservoir_in_mwh(tmp_path):
    vol, mwh = _load(tmp_path, IN_VOLUME, "vol"), _load(tmp_path, IN_MWH, "mwh")
    a, b = vol.dispatch(), mwh.dispatch()
    assert a.status == b.status == "optimal"
    assert a.objective == pytest.approx(b.objective, abs=1e-9)
    assert a.objective > 0      # the case does something: it sells at 80 and 90
    for col in ("discharge_mw", "soc_mwh", "spill_mw", "supply_in_mw"):
        assert a.tables["lake"][col].to_numpy() == pytest.approx(b.tables["lake"][col].to_numpy(), abs=1e-7)


def test_an_inflow_series_in_m3_per_s_is_converted_by_the_equivalent(tmp_path):
    (tmp_path / "flow.csv").write_text("time,flow\n2027-03-01T00:00,20\n2027-03-01T01:00,18.5\n"
                                       "2027-03-01T02:00,12\n2027-03-01T03:00,9\n", encoding="utf-8")
    text = HEAD + """site glen at grid {
  storage lake { kind reservoir  energy equivalent 300 MWh per hm3  energy 1 hm3  charge off
                 discharge max 20 MW  spill allowed
                 supply river from "flow.csv" column "flow" unit m3 per s }
}
"""
    # 300 MWh per hm3 = 300/1e6 = 0.0003 MWh per m3; F m3/s -> F*3600*0.0003 = 1.08 F MW:
    # 20 -> 21.6, 18.5 -> 19.98, 12 -> 12.96, 9 -> 9.72
    p = _load(tmp_path, text, "csv").model
    assert p.profile("river") == pytest.approx([21.6, 19.98, 12.96, 9.72], rel=1e-12)
    assert p.storages["lake"].energy == pytest.approx(300.0, rel=1e-12)


def _span_text(text: str, d) -> str:
    line = text.splitlines()[d.span.line - 1]
    return line[d.span.col - 1:d.span.end_col - 1]


@pytest.mark.parametrize("setting, code, quoted", [
    ("energy 2 hm3  discharge max 9 MW", "P318", "2 hm3"),
    ("energy 9 MWh  discharge max 40 m3 per s", "P318", "40 m3 per s"),
    ("energy 9 MWh  soc start 1 hm3  discharge max 9 MW", "P318", "1 hm3"),
    ("energy 9 MWh  discharge max 9 MW  spill allowed max 3 m3 per s", "P318", "3 m3 per s"),
    ("energy equivalent 0.3 kWh per m3  energy 2 hm3  discharge max 9 MW  efficiency round trip 81%",
     "P319", "efficiency round trip 81%"),
    ("energy equivalent 3 MW  energy 2 hm3  discharge max 9 MW", "P302", "3 MW"),
    ("energy equivalent 0 kWh per m3  energy 2 hm3  discharge max 9 MW", "P303", "0 kWh per m3"),
    ("energy equivalent 0.3 kWh per m3  energy 2 m3 per s  discharge max 9 MW", "P302", "2 m3 per s"),
])
def test_dimension_errors_have_their_codes_at_the_quantity(setting, code, quoted):
    text = HEAD + f"site glen at grid {{\n  storage lake {{ kind reservoir  charge off  {setting} }}\n}}\n"
    found = [d for d in lint_text(text).diagnostics if d.code == code]
    assert len(found) == 1, [(d.code, d.message) for d in lint_text(text).diagnostics]
    assert _span_text(text, found[0]) == quoted


def test_the_fix_line_names_the_equivalent_to_add():
    text = HEAD + "site glen at grid {\n  storage lake { kind reservoir  charge off  energy 2 hm3  discharge max 9 MW }\n}\n"
    (d,) = [d for d in lint_text(text).diagnostics if d.code == "P318"]
    assert any(n.startswith("fix:") and "energy equivalent" in n for n in d.notes)


def test_outputs_carry_both_units_and_the_auditor_checks_them(tmp_path):
    loaded = _load(tmp_path, IN_VOLUME, "vol")
    r = loaded.dispatch()
    out = r.write(tmp_path / "out")
    assert audit(loaded.model, out) == []
    lake = pd.read_csv(out / "lake.csv")
    # by hand: content_m3 = soc_mwh / 0.00025; a flow in m3/s = MW / (3600 * 0.00025) = MW / 0.9
    assert lake["content_m3"].to_numpy() == pytest.approx(lake["soc_mwh"].to_numpy() / EQ, abs=1e-2)
    assert lake["discharge_m3_per_s"].to_numpy() == pytest.approx(lake["discharge_mw"].to_numpy() / 0.9, abs=1e-5)
    assert lake["supply_in_m3_per_s"].to_numpy() == pytest.approx([20, 20, 10, 10], abs=1e-6)
    # a store declared in MWh leaves them empty
    mwh = _load(tmp_path, IN_MWH, "mwh")
    out2 = mwh.dispatch().write(tmp_path / "out2")
    assert pd.read_csv(out2 / "lake.csv")["content_m3"].isna().all()
    assert audit(mwh.model, out2) == []
    # a wrong conversion is noticed: content given in the store's MWh-per-hm3 by mistake
    lake["content_m3"] = lake["soc_mwh"] / 250.0
    lake.to_csv(out / "lake.csv", index=False)
    assert any("content_m3" in problem for problem in audit(loaded.model, out))


def test_the_cbc_oracle_agrees_on_a_converted_case(tmp_path):
    loaded = _load(tmp_path, IN_VOLUME, "vol")
    r = loaded.dispatch()
    o = solve_oracle(loaded.model)
    assert o.status == OPTIMAL
    # as tests/test_oracle.py: 1e-6 relative plus 1e-6 absolute (CBC reports ~7 digits)
    assert r.objective == pytest.approx(o.objective, rel=1e-6, abs=1e-6)
    assert np.isfinite(r.objective)
