"""The analyst figures (docs/outputs.md): a storage's energy-weighted prices, periods.csv's
daily and monthly totals, the currency, money that reconciles with the objective, CSVs
rounded to 6 decimals that still pass the auditor, and a terminal summary 80 columns wide."""

from __future__ import annotations

import io
import json
import math
import re
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

sys.path.insert(0, str(Path(__file__).parent))
from audit import audit  # noqa: E402
from cli_support import run  # noqa: E402

from portfolio import contract as C  # noqa: E402
from portfolio.api import load  # noqa: E402
from portfolio.cli_output import print_assets, print_result  # noqa: E402

HOURS = 72
ROUNDING = 5e-7          # a CSV value is within this of the schedule's (6 decimals)


def _text(currency: str = "currency EUR\n", hours: int = HOURS) -> str:
    """A battery (with wear), a solar farm and a demand behind one connection, hourly from
    29 June: three days over two months in Berlin's zone."""
    price = [round(60 + 35 * math.sin(2 * math.pi * (h % 24 - 9) / 24) + 4 * (h // 24), 2)
             for h in range(hours)]
    sun = [round(max(0.0, 7 * math.sin(math.pi * (h % 24 - 6) / 12)), 3) if 6 <= h % 24 <= 18 else 0.0
           for h in range(hours)]
    need = [round(1.5 + 0.5 * math.cos(2 * math.pi * h / 24), 3) for h in range(hours)]
    return (currency
            + f'horizon start 2027-06-29T00:00 length {hours} h step 1 h zone "Europe/Berlin"\n'
            f"price spot values [{', '.join(map(str, price))}]\n"
            "connection line { export max 6 MW import max 5 MW sell at spot buy at spot plus 7 per MWh }\n"
            "site farm at line {\n"
            f"  supply pv values [{', '.join(map(str, sun))}] MW {{ curtail allowed }}\n"
            f"  demand works values [{', '.join(map(str, need))}] MW\n"
            "  storage cells { kind battery energy 10 MWh charge max 4 MW discharge max 4 MW\n"
            "    efficiency charge 94% discharge 94% soc min 10% max 90% start 50% wear 2.5 per MWh }\n"
            "}\n")


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    base = tmp_path_factory.mktemp("figures")
    f = base / "farm.folio"
    f.write_text(_text(), encoding="utf-8")
    out = base / "out"
    code, text, err = run("dispatch", f, "--out", out, "--report")
    assert code == 0, err
    return f, out, text


def _csv(out: Path, name: str) -> pd.DataFrame:
    return pd.read_csv(out / f"{name}.csv", index_col="time")


def _summary(out: Path) -> dict:
    return json.loads((out / C.SUMMARY_FILE).read_text(encoding="utf-8"))


def _report_values(out: Path) -> dict:
    text = (out / C.REPORT_FILE).read_text(encoding="utf-8")
    return {k: (None if v in ("", "None") else float(v))
            for k, v in re.findall(r'data-key="([^"]+)" data-value="([^"]*)"', text)}


def test_storage_prices_are_the_tables_energy_weighted_prices(folder):
    _f, out, _t = folder
    s, cells, line = _summary(out), _csv(out, "cells"), _csv(out, "line")
    # the price the connection's flow met each step (docs/outputs.md, "Storage price figures")
    price = np.where(line["export_mw"] > 0, line["sell_price"], line["buy_price"])
    c, d = cells["charge_mw"].to_numpy(), cells["discharge_mw"].to_numpy()
    assert c.sum() > 1 and d.sum() > 1          # the battery does cycle here
    want_buy, want_sell = float(price @ c / c.sum()), float(price @ d / d.sum())
    fig = s["storages"]["cells"]
    # rounded CSVs: a weighted mean moves at most ROUNDING x (max |price| + |mean|) / min total
    reach = ROUNDING * len(c) * (np.abs(price).max() + abs(want_sell)) / min(c.sum(), d.sum()) + 1e-9
    assert fig["average_charge_price"] == pytest.approx(want_buy, abs=reach)
    assert fig["average_discharge_price"] == pytest.approx(want_sell, abs=reach)
    assert fig["spread_captured"] == pytest.approx(want_sell - want_buy, abs=2 * reach)
    assert fig["spread_captured"] > 0                       # it buys low and sells high
    # net value = out x discharge price - in x charge price - wear (no supply feeds it directly)
    dt = float(s["step_hours"])
    wear = 2.5 * fig["energy_out_mwh"]
    assert fig["net_value"] == pytest.approx(fig["energy_out_mwh"] * fig["average_discharge_price"]
                                             - fig["energy_in_mwh"] * fig["average_charge_price"] - wear,
                                             abs=1e-6)
    # the report shows the same figures, and they are the tables'
    vals = _report_values(out)
    for key, want in (("average_charge_price", want_buy), ("average_discharge_price", want_sell)):
        assert vals[f"storages/cells/{key}"] == pytest.approx(want, abs=reach)
    assert vals["storages/cells/equivalent_full_cycles"] == pytest.approx(
        fig["equivalent_full_cycles"], rel=1e-12)
    assert dt == 1.0


def test_daily_and_monthly_totals_sum_to_the_horizon_totals(folder):
    _f, out, _t = folder
    s, per = _summary(out), pd.read_csv(out / "periods.csv")
    assert list(per.columns) == ["time"] + C.COLUMNS["periods"]
    days = per[per["period"] == "day"]
    months = per[per["period"] == "month"]
    assert sorted(set(days["label"])) == ["2027-06-29", "2027-06-30", "2027-07-01"]
    assert sorted(set(months["label"])) == ["2027-06", "2027-07"]
    # the first step of 1 July in Berlin's zone starts that day's and that month's rows
    assert set(per[per["label"].isin(["2027-07-01", "2027-07"])]["time"]) == {"2027-07-01T00:00:00+02:00"}
    keys = ("energy_in_mwh", "energy_out_mwh", "net_value", "curtailed_mwh", "spilled_mwh")
    checked = 0
    for group in ("storages", "supplies", "demands", "sites", "connections"):
        for name, fig in s[group].items():
            for rows in (days, months):
                mine = rows[rows["asset"] == name]
                assert len(mine) == len(set(rows["label"]))
                for key in keys:
                    assert mine[key].sum() == pytest.approx(fig[key], abs=1e-6 + ROUNDING * len(mine)), (name, key)
                    checked += 1
    assert checked == 5 * 2 * len(keys)
    # a day's net values are the per-step attribution summed: the connection's is its cashflow
    cash = _csv(out, "line")["cashflow"]
    day_of = pd.to_datetime(cash.index, utc=True).tz_convert("Europe/Berlin").strftime("%Y-%m-%d")
    for label, total in cash.groupby(day_of).sum().items():
        got = days[(days["asset"] == "line") & (days["label"] == label)]["net_value"].item()
        assert got == pytest.approx(total, abs=1e-6 + ROUNDING * 25)
    # the report's monthly table is periods.csv's
    vals = _report_values(out)
    for _, r in months[months["kind"].isin(["storage", "supply", "demand"])].iterrows():
        assert vals[f"periods/month/{r['label']}/{r['asset']}"] == pytest.approx(r["net_value"], abs=1e-6)


def test_money_reconciles_to_the_objective(folder):
    _f, out, _t = folder
    s = _summary(out)
    objective = s["objective"]
    assets = sum(v["net_value"] for g in ("storages", "supplies", "demands") for v in s[g].values())
    assert assets == pytest.approx(objective, abs=1e-6)
    wear = 2.5 * s["storages"]["cells"]["energy_out_mwh"]
    assert s["connections"]["line"]["net_value"] - wear == pytest.approx(objective, abs=1e-6)
    assert s["demands"]["works"]["net_value"] < 0              # a demand's net value is its cost
    per = pd.read_csv(out / "periods.csv")
    days = per[(per["period"] == "day") & per["kind"].isin(["storage", "supply", "demand"])]
    assert days["net_value"].sum() == pytest.approx(objective, abs=1e-6 + ROUNDING * len(days))


def test_csvs_are_rounded_to_six_decimals_and_still_pass_the_auditor(folder):
    f, out, _t = folder
    number = re.compile(r"^-?\d+(\.\d+)?(e-?\d+)?$")
    seen = 0
    for csv in sorted(out.glob("*.csv")):
        for line in csv.read_text(encoding="utf-8").splitlines()[1:]:
            for cell in line.split(",")[1:]:
                if number.match(cell):
                    seen += 1
                    assert "e" not in cell and len(cell.partition(".")[2]) <= 6, (csv.name, cell)
    assert seen > 1000
    assert audit(load(f).model, out) == []


def test_the_auditor_still_catches_what_rounding_cannot_explain(folder, tmp_path):
    import shutil

    f, out, _t = folder
    copy = tmp_path / "copy"
    shutil.copytree(out, copy)
    t = pd.read_csv(copy / "line.csv")
    t.loc[5, "cashflow"] += 1e-4                  # far below a cent, far above the rounding's reach
    t.to_csv(copy / "line.csv", index=False)
    assert any("cashflow" in p for p in audit(load(f).model, copy))


def test_the_currency_is_shown_wherever_money_is(folder):
    _f, out, text = folder
    s = _summary(out)
    assert s["currency"] == "EUR"
    assert f"objective {s['objective']:,.2f} EUR" in text
    assert "net value EUR" in text and "EUR/MWh" in text
    assert "add up to the objective" in text
    page = (out / C.REPORT_FILE).read_text(encoding="utf-8")
    assert "objective (EUR)" in page and "net value (EUR)" in page


def test_without_a_currency_money_is_shown_as_money(tmp_path):
    f = tmp_path / "plain.folio"
    f.write_text(_text(currency="", hours=24), encoding="utf-8")
    code, text, err = run("dispatch", f, "--out", tmp_path / "o")
    assert code == 0, err
    s = _summary(tmp_path / "o")
    assert s["currency"] is None
    assert "net value money" in text and " money |" in text
    assert not (tmp_path / "o" / "periods.csv").exists()       # one day: no period totals


def test_the_terminal_fits_80_columns_and_narrower(folder):
    f, _out, text = folder
    lines = text.splitlines()
    assert max(len(x) for x in lines) <= 80, [x for x in lines if len(x) > 80]
    result = load(f).dispatch()
    for width in (80, 60):
        buf = io.StringIO()
        print_result(result, buf, width)
        print_assets(result, buf, width)
        shown = buf.getvalue().splitlines()
        assert max(len(x) for x in shown) <= width, [x for x in shown if len(x) > width]
        assert any(x.startswith("storage prices") for x in shown)


def test_the_routes_table_shows_flows_and_what_is_in_transit(tmp_path):
    f = tmp_path / "pair.folio"
    f.write_text('currency USD\n'
                 'horizon start 2027-03-01T00:00 length 6 h step 1 h zone "UTC"\n'
                 "price spot values [10, 80, 10, 90, 20, 95]\n"
                 "connection grid { export max 10 MW import max 10 MW sell at spot buy at spot }\n"
                 "site dam at grid {\n"
                 "  storage top { kind reservoir energy 20 MWh discharge max 3 MW soc start 50% end free }\n"
                 "  storage low { kind reservoir energy 20 MWh discharge max 3 MW soc start 10% }\n"
                 "  route top release -> low delay 2 h\n"
                 "}\n", encoding="utf-8")
    code, text, err = run("dispatch", f, "--out", tmp_path / "o")
    assert code == 0, err
    s = _summary(tmp_path / "o")
    (name, fig), = s["routes"].items()
    block = text[text.index("routes"):]
    row = next(x for x in block.splitlines() if x.startswith(name[:10]))
    assert "top -> low" in block
    assert fig["flow_mwh"] > 0 and fig["in_transit_end_mwh"] > 0     # released late: still on its way
    assert f"{fig['flow_mwh']:,.2f}" in row and f"{fig['in_transit_end_mwh']:,.2f}" in row
