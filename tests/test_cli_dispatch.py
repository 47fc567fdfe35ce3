"""`portfolio dispatch` end to end: exit codes, what is written, what is refused."""

from __future__ import annotations

import io
import json
import shutil
import sys
from pathlib import Path

import pandas as pd
import pytest

sys.path.insert(0, str(Path(__file__).parent))
from cli_support import DEMO, run  # noqa: E402


@pytest.fixture(scope="module")
def demo_out(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "kb"
    code, text, err = run("dispatch", DEMO, "--out", out, "--parquet")
    return code, text, err, out


def test_demo_dispatches_and_writes_every_asset(demo_out):
    code, text, err, out = demo_out
    assert code == 0, err
    assert text.startswith("status: optimal")
    assert "caution: Schedules are advisory" in text
    for name in ("cells", "dune_pv", "plant", "dune_works", "bay_feeder", "schedule"):
        assert (out / f"{name}.csv").exists(), name
        assert (out / f"{name}.parquet").exists(), name
    summary = json.loads((out / "summary.json").read_text())
    assert summary["status"] == "optimal" and summary["steps"] == 96
    cells = pd.read_csv(out / "cells.csv")
    assert list(cells.columns[:6]) == ["time", "charge_mw", "discharge_mw", "soc_mwh", "spill_mw", "mode"]
    # the same schedule from the wide table and the per-asset file
    wide = pd.read_csv(out / "schedule.csv")
    assert (wide["cells.soc_mwh"] - cells["soc_mwh"]).abs().max() < 1e-9
    # the printed objective is the summary's objective
    assert f"objective {summary['objective']:,.2f}" in text


def test_lint_errors_stop_dispatch_and_nothing_is_written(tmp_path):
    bad = tmp_path / "bad.folio"
    bad.write_text('horizon start 2027-01-01T00:00 length 2 h step 1 h\n'
                   'connection c { export max 5 MWh sell at 4 per MWh buy at 4 per MWh }\n'
                   'site s at c { storage b { energy 1 MWh charge max 1 MW discharge max 1 MW } }\n')
    code, text, err = run("dispatch", bad, "--out", tmp_path / "o")
    assert code == 1
    assert "bad.folio:2:27: error: " in err and "\n    code  P302\n" in err
    assert not (tmp_path / "o").exists()


def test_infeasible_names_the_limit_and_writes_only_the_summary(tmp_path):
    f = tmp_path / "tight.folio"
    f.write_text('horizon start 2027-01-01T00:00 length 3 h step 1 h\n'
                 'connection c { import max 1 MW buy at 50 per MWh }\n'
                 'site s at c {\n'
                 '  demand load values [3, 3, 3] MW\n'
                 '}\n')
    code, text, err = run("dispatch", f, "--out", tmp_path / "o")
    assert code == 3
    assert text.startswith("status: infeasible")
    assert "tight.folio:2:" in err          # the connection's import limit had to give
    summary = json.loads((tmp_path / "o" / "summary.json").read_text())
    assert summary["status"] == "infeasible"
    assert not list((tmp_path / "o").glob("*.csv"))   # no schedule


def test_refuses_a_folder_that_is_not_an_output(tmp_path):
    mine = tmp_path / "notes"
    mine.mkdir()
    (mine / "keep.txt").write_text("mine")
    code, _, err = run("dispatch", DEMO, "--out", mine)
    assert code == 2
    assert (mine / "keep.txt").read_text() == "mine"
    assert "refusing" in err


def test_refuses_the_portfolio_folder(tmp_path):
    folder = tmp_path / "kb"
    shutil.copytree(DEMO.parent, folder)
    before = sorted(p.name for p in folder.iterdir())
    code, _, err = run("dispatch", folder / DEMO.name, "--out", folder)
    assert code == 2
    assert sorted(p.name for p in folder.iterdir()) == before


@pytest.mark.parametrize("option,value", [("--gap", "2"), ("--gap", "x"), ("--time-limit", "0"),
                                          ("--threads", "0")])
def test_bad_options_are_usage_errors(tmp_path, option, value):
    code, _, _ = run("dispatch", DEMO, "--out", tmp_path / "o", option, value)
    assert code == 2
    assert not (tmp_path / "o").exists()


def test_options_reach_the_solver(tmp_path):
    code, text, err = run("dispatch", DEMO, "--out", tmp_path / "o", "--gap", "0.001", "--threads", "1",
                          "--time-limit", "60", "--quiet")
    assert code == 0, err
    assert text.count("\n") == 1                     # --quiet: the status line only
    assert json.loads((tmp_path / "o" / "summary.json").read_text())["status"] in ("optimal", "feasible")


def test_refused_folder_is_refused_before_solving(tmp_path, monkeypatch):
    import portfolio.dispatch as d

    def boom(*a, **k):
        raise AssertionError("solved although the output folder is refused")
    monkeypatch.setattr(d, "dispatch", boom)
    mine = tmp_path / "notes"
    mine.mkdir()
    (mine / "keep.txt").write_text("mine")
    assert run("dispatch", DEMO, "--out", mine)[0] == 2


def test_missing_file_is_a_usage_error(tmp_path):
    code, _, err = run("dispatch", tmp_path / "nope.folio", "--out", tmp_path / "o")
    assert code == 2
    assert "P001" in err
