"""Output folder: contract columns, round trip, atomic replace, refusals."""

import json
import os

import pandas as pd
import pytest

import factory as F
from portfolio import writers as W
from portfolio.dispatch import dispatch
from portfolio.contract import COLUMNS


@pytest.fixture(scope="module")
def result():
    st = F.storage("bat", energy=2.0, power=1.0, eta_charge=0.9, eta_discharge=0.9)
    pv = F.supply("pv", "pv_mw", targets=("site", "bat"), curtail_allowed=True)
    load = F.demand("load", "load_mw")
    lake = F.storage("lake", energy=5.0, power=None, discharge_max=1.0, soc_start=3.0)
    low = F.storage("low", energy=5.0, power=None, discharge_max=1.0)
    rt = F.route("lake_to_low", "lake", "low", delay_steps=1, in_transit=0.5)
    p = F.market([10, 20, 5, 40], [st, lake, low], supplies=[pv], demands=[load], routes=[rt],
                 extra_series=[F.series("pv_mw", [0, 2, 3, 0]), F.series("load_mw", [1, 1, 1, 1])],
                 zone="Europe/Berlin", start="2027-03-01T00:00:00")
    r = dispatch(p)
    assert r.status == "optimal"
    return r


def test_files_and_columns_follow_the_contract(result, tmp_path):
    out = result.write(tmp_path / "out")
    names = set(os.listdir(out))
    assets = {"bat": "storage", "lake": "storage", "low": "storage", "pv": "supply",
              "load": "demand", "site": "site", "grid": "connection", "lake_to_low": "route"}
    assert names == {f"{a}.csv" for a in assets} | {"schedule.csv", "summary.json", W.MARKER}
    for a, kind in assets.items():
        header = (out / f"{a}.csv").read_text().splitlines()[0].split(",")
        assert header == ["time"] + COLUMNS[kind]
    first = (out / "bat.csv").read_text().splitlines()[1].split(",")[0]
    assert first == "2027-03-01T00:00:00+01:00"      # ISO 8601 with UTC offset, horizon zone
    wide = pd.read_csv(out / "schedule.csv")
    assert "bat.soc_mwh" in wide.columns and "grid.cashflow" in wide.columns
    summary = json.loads((out / "summary.json").read_text())
    for key in ("status", "objective", "best_bound", "mip_gap", "build_seconds", "solve_seconds",
                "steps", "step_hours", "caution"):
        assert key in summary
    assert "advisory" in summary["caution"] and "downstream" in summary["caution"]
    assert set(summary["storages"]["bat"]) >= {"net_value", "energy_in_mwh", "energy_out_mwh",
                                               "equivalent_full_cycles", "curtailed_mwh", "spilled_mwh"}
    assert "in_transit_end_mwh" in summary["routes"]["lake_to_low"]


def test_round_trip(result, tmp_path):
    out = result.write(tmp_path / "out", formats=("csv", "parquet"))
    for name, table in result.tables.items():
        back = pd.read_csv(out / f"{name}.csv", index_col="time")
        back.index = pd.to_datetime(back.index, utc=True).tz_convert(table.index.tz)
        pd.testing.assert_frame_equal(back, table, check_names=False, check_freq=False,
                                      check_index_type=False)
        pq = pd.read_parquet(out / f"{name}.parquet").set_index("time")
        pd.testing.assert_frame_equal(pq, table, check_names=False, check_freq=False,
                                      check_index_type=False)


def test_failure_mid_write_leaves_nothing(result, tmp_path, monkeypatch):
    calls = []
    real = W._write_csv

    def flaky(df, path):
        calls.append(path)
        if len(calls) == 3:
            raise RuntimeError("disk gone")
        real(df, path)

    monkeypatch.setattr(W, "_write_csv", flaky)
    with pytest.raises(RuntimeError):
        result.write(tmp_path / "out")
    assert len(calls) == 3
    assert os.listdir(tmp_path) == []     # no output folder, no temporary left behind


def test_failure_keeps_the_previous_output(result, tmp_path, monkeypatch):
    out = result.write(tmp_path / "out")
    before = (out / "bat.csv").read_text()
    monkeypatch.setattr(W, "_write_csv", lambda df, path: (_ for _ in ()).throw(OSError(28, "full")))
    with pytest.raises(W.OutputFolderError):
        result.write(out)
    assert (out / "bat.csv").read_text() == before
    assert sorted(os.listdir(tmp_path)) == ["out"]


def test_replaces_a_previous_output_folder(result, tmp_path):
    out = result.write(tmp_path / "out")
    (out / "stale.csv").write_text("x")   # not listed by the marker -> not ours
    with pytest.raises(W.OutputFolderError, match="stale.csv"):
        result.write(out)
    (out / "stale.csv").unlink()
    result.write(out)
    assert sorted(os.listdir(tmp_path)) == ["out"]


def test_refuses_a_folder_that_is_not_ours(result, tmp_path):
    d = tmp_path / "mine"
    d.mkdir()
    (d / "notes.txt").write_text("keep me")
    with pytest.raises(W.OutputFolderError, match="not a previous output folder"):
        result.write(d)
    assert (d / "notes.txt").read_text() == "keep me"


def test_refuses_the_input_folder(result, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)     # factory portfolios live in ./factory.folio
    with pytest.raises(W.OutputFolderError, match="portfolio's own files"):
        result.write(tmp_path)


def test_unknown_format(result, tmp_path):
    with pytest.raises(W.OutputFolderError):
        result.write(tmp_path / "out", formats=("xlsx",))
    assert os.listdir(tmp_path) == []


def test_infeasible_writes_summary_only(tmp_path):
    site = F.site(import_max=1.0)
    p = F.portfolio(2, sites=[site], demands=[F.demand("load", "L")],
                    series_list=[F.series("L", [2.0, 2.0])])
    r = dispatch(p)
    out = r.write(tmp_path / "out")
    assert set(os.listdir(out)) == {"summary.json", W.MARKER}
    s = json.loads((out / "summary.json").read_text())
    assert s["status"] == "infeasible" and s["relaxed"][0]["family"] == "site_import_max"
