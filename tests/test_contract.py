"""The results contract (portfolio/contract.py) against docs/outputs.md and what a
dispatch really writes, as tests compare docs/diagnostics.md with `portfolio codes`."""

from __future__ import annotations

import json
import re
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

sys.path.insert(0, str(Path(__file__).parent))
import factory as F  # noqa: E402

from portfolio import contract as C  # noqa: E402
from portfolio.api import lint_text  # noqa: E402
from portfolio.dispatch import dispatch  # noqa: E402

DOC = (Path(__file__).parent.parent / "docs" / "outputs.md").read_text(encoding="utf-8")


def _section(heading: str) -> str:
    """The text under a heading line, up to the next heading of any level."""
    m = re.search(rf"^{re.escape(heading)}\s*$(.*?)(?=^#)", DOC + "\n#", flags=re.M | re.S)
    assert m, f"docs/outputs.md has no heading {heading!r}"
    return m.group(1)


def _rows(text: str):
    """The cells of a Markdown table's body rows."""
    rows = [[c.strip() for c in line.strip().strip("|").split("|")]
            for line in text.splitlines() if line.strip().startswith("|")]
    return rows[2:]        # header and rule


def _ticked(cell: str):
    return re.findall(r"`([^`]+)`", cell)


def test_every_table_kind_is_documented_column_by_column():
    documented = re.findall(r"^### `(\w+)` table\s*$", DOC, flags=re.M)
    assert documented == list(C.TABLES)
    for kind, cols in C.TABLES.items():
        rows = _rows(_section(f"### `{kind}` table"))
        assert [(_ticked(r[0])[0], r[1], r[2]) for r in rows] == [(c.name, c.unit, c.meaning) for c in cols], kind


def test_summary_keys_are_documented():
    rows = _rows(_section("## summary.json"))
    keys = [k for r in rows for k in _ticked(r[0])]
    assert len(keys) == len(set(keys))
    assert set(keys) == set(C.SUMMARY_KEYS) | set(C.OPTIONAL_SUMMARY_KEYS)


def test_asset_keys_are_documented():
    rows = _rows(_section("### Per-asset keys"))
    by_section = {}
    for r in rows:
        keys = _ticked(r[1])
        for section in _ticked(r[0]):
            by_section[section] = keys
    assert set(by_section) == set(C.ASSET_GROUPS)
    for section in C.ASSET_GROUPS:
        want = {"storages": C.STORAGE_KEYS, "routes": C.ROUTE_KEYS}.get(section, C.ASSET_KEYS)
        assert tuple(by_section[section]) == want, section


def test_reserved_names_and_files_are_documented():
    para = next(x for x in DOC.split("\n\n") if x.startswith("Reserved names:"))
    named = re.search(r"may not be named (.*?) \(", para.replace("\n", " ")).group(1)
    assert tuple(_ticked(named)) == C.RESERVED_NAMES
    files = [k for r in _rows(_section("## Files")) for k in _ticked(r[0])]
    assert C.MARKER in files and C.SUMMARY_FILE in files
    assert C.table_file(C.WIDE, "csv") in files and C.table_file(C.WIDE, "parquet") in files


@pytest.mark.parametrize("name", C.RESERVED_NAMES + tuple(n.upper() for n in C.RESERVED_NAMES))
def test_the_checker_refuses_every_reserved_name(name):
    text = ('horizon start 2027-03-01T00:00 length 4 h step 1 h zone "UTC"\n'
            "connection grid { export max 10 MW import max 10 MW sell at 5 per MWh buy at 5 per MWh }\n"
            f"site yard at grid {{ storage {name} {{ kind battery energy 4 MWh charge max 2 MW discharge max 2 MW }} }}\n")
    found = lint_text(text)
    assert [d.code for d in found.errors] == ["P206"], found.diagnostics


def test_a_dispatch_writes_what_the_contract_says(tmp_path):
    prices = [10.0, 50.0, -5.0, 60.0]
    store = F.storage("cell", energy=2.0, power=1.0)
    res = F.storage("lake", energy=5.0, power=1.0, charge_max=0.0, soc_start=2.0, spill_allowed=True)
    p = F.market(prices, [store, res],
                 supplies=[F.supply("pv", "sun", targets=("site", "cell"), curtail_allowed=True)],
                 demands=[F.demand("load", "need")],
                 routes=[F.route("down", "lake", "cell", kind="spill", delay_steps=1)],
                 extra_series=[F.series("sun", [0.0, 1.0, 2.0, 0.5]), F.series("need", [0.2] * 4)])
    r = dispatch(p)
    assert r.status == "optimal"
    assert set(r.summary) - set(C.OPTIONAL_SUMMARY_KEYS) == set(C.SUMMARY_KEYS)
    kinds = {"cell": "storage", "lake": "storage", "pv": "supply", "load": "demand", "site": "site",
             "grid": "connection", "down": "route"}
    for name, kind in kinds.items():
        assert list(r.tables[name].columns) == C.COLUMNS[kind]
        group = next(g for g, k in C.ASSET_GROUPS.items() if k == kind)
        want = {"storage": C.STORAGE_KEYS, "route": C.ROUTE_KEYS}.get(kind, C.ASSET_KEYS)
        assert tuple(r.summary[group][name]) == want
    out = r.write(tmp_path / "out")
    assert json.loads((out / C.SUMMARY_FILE).read_text())["caution"] == C.CAUTION
    marker = json.loads((out / C.MARKER).read_text())
    assert set(marker["files"]) == {C.table_file(n, "csv") for n in kinds} | {
        C.table_file(C.WIDE, "csv"), C.SUMMARY_FILE}


def test_a_table_off_the_contract_is_refused():
    index = pd.date_range("2027-01-01", periods=2, freq="h", tz="UTC", name="time")
    zeros = np.zeros(2)
    ok = C.frame("route", {"arriving_mw": zeros, "flow_mw": zeros}, index)
    assert list(ok.columns) == ["flow_mw", "arriving_mw"]          # the contract's order
    with pytest.raises(KeyError):
        C.frame("route", {"flow_mw": zeros}, index)
    with pytest.raises(KeyError):
        C.frame("route", {"flow_mw": zeros, "arriving_mw": zeros, "extra_mw": zeros}, index)


def test_marginal_values_are_documented_limit_by_limit():
    text = _section("### Marginal values (`marginal_values.csv`)")
    rows = _rows(text)
    want = [(g, c.name, c.unit, c.meaning) for g, cols in C.MARGINAL_LIMITS.items() for c in cols]
    assert [(_ticked(r[0])[0], _ticked(r[1])[0], r[2], r[3]) for r in rows] == want
    assert set(C.MARGINAL_LIMITS) <= set(C.ASSET_GROUPS)
    prose = text.replace("\n", " ")
    for key in C.MARGINAL_KEYS + C.MARGINAL_LIMIT_KEYS:
        assert f"`{key}`" in prose, key
    files = [k for r in _rows(_section("## Files")) for k in _ticked(r[0])]
    assert C.table_file(C.MARGINAL_TABLE, "csv") in files
