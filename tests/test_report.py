"""`portfolio report DIR` and `dispatch --report`: the page opens in a real browser with
nothing fetched, its figures are the CSVs', and bad folders are refused with nothing written."""

from __future__ import annotations

import hashlib
import html
import io
import json
import math
import os
import shutil
import sys
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

sys.path.insert(0, str(Path(__file__).parent))
import browser  # noqa: E402

from cli_support import DEMO, run  # noqa: E402

from portfolio import contract as C  # noqa: E402


def _long_text(days: int = 5, start: str = "2027-06-01T00:00") -> str:
    """A battery and a solar farm behind a limited connection, hourly over ``days`` days."""
    hours = 24 * days
    price = [round(60 + 35 * math.sin(2 * math.pi * (h % 24 - 9) / 24) + 3 * (h // 24), 2) for h in range(hours)]
    sun = [round(max(0.0, 9 * math.sin(math.pi * (h % 24 - 6) / 12)), 3) if 6 <= h % 24 <= 18 else 0.0
           for h in range(hours)]
    return (f'horizon start {start} length {hours} h step 1 h zone "Europe/Berlin"\n'
            f"price spot values [{', '.join(map(str, price))}]\n"
            "connection line { export max 6 MW import max 5 MW sell at spot buy at spot plus 5 per MWh }\n"
            "site farm at line {\n"
            f"  supply pv values [{', '.join(map(str, sun))}] MW {{ into site, cells curtail allowed }}\n"
            "  storage cells { kind battery energy 12 MWh charge max 4 MW discharge max 4 MW\n"
            "    efficiency charge 95% discharge 95% soc min 10% max 90% start 50% }\n"
            "}\n")


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "kb"
    code, text, err = run("dispatch", DEMO, "--out", out, "--report")
    assert code == 0, err
    assert f"report written to {out / C.REPORT_FILE}" in text
    return out


@pytest.fixture(scope="module")
def long_windows(tmp_path_factory):
    base = tmp_path_factory.mktemp("long")
    f = base / "long.folio"
    f.write_text(_long_text(), encoding="utf-8")
    out = base / "out"
    code, text, err = run("dispatch", f, "--out", out, "--windows", "1d/1d", "--report", "-q")
    assert code == 0, err
    assert (out / "windows.csv").is_file() and (out / C.REPORT_FILE).is_file()
    return out


@pytest.fixture(scope="module")
def infeasible(tmp_path_factory):
    base = tmp_path_factory.mktemp("tight")
    f = base / "tight.folio"
    f.write_text('horizon start 2027-01-01T00:00 length 3 h step 1 h\n'
                 'connection c { import max 1 MW buy at 50 per MWh }\n'
                 'site s at c {\n'
                 '  demand load values [3, 3, 3] MW\n'
                 '}\n', encoding="utf-8")
    out = base / "o"
    code, text, err = run("dispatch", f, "--out", out, "--report")
    assert code == 3, err             # the dispatch's own exit code: infeasible
    assert (out / C.REPORT_FILE).is_file()
    return out


_STUDY = """portfolio tiny
horizon start 2027-03-01T00:00 length 8 h step 1 h zone "UTC"
currency EUR
price spot values [30 80 20 90 40 100 10 70] per MWh
connection grid { export max 3 MW import max 3 MW sell at spot buy at spot plus 1 per MWh }
site yard at grid {
  storage cells { kind battery energy 4 MWh charge max 2 MW discharge max 2 MW
                  efficiency round trip 81% soc start 50% end at least 90% modes exclusive }
}
study sizes {
  vary cells energy values [2, 4] MWh
  vary grid import max values [2, 0] MW
  scenario low for spot values [30 80 20 90 40 100 10 70] per MWh
  scenario high for spot values [60 160 40 180 80 200 20 140] per MWh
}
"""


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    """A study of 8 cases, 4 of them infeasible (no import: the store cannot end fuller), with
    each case's schedule kept (so its provenance is recorded), and its report."""
    base = tmp_path_factory.mktemp("study")
    f = base / "tiny.folio"
    f.write_text(_STUDY, encoding="utf-8")
    out = base / "st"
    code, text, err = run("study", f, "--out", out, "--workers", "1", "--schedules", "-q")
    assert code == 1, err                    # some cases have no schedule
    assert (out / "cases.csv").is_file()
    code, text, err = run("report", out)
    assert code == 0, err
    assert f"report written to {out / C.REPORT_FILE} (study of 8 cases, 4 without a schedule)" in text
    return out


class _Figures(HTMLParser):
    """The page's figures (data-key -> data-value), its charts and their <svg> elements."""

    def __init__(self):
        super().__init__()
        self.values, self.charts, self.svgs_in_charts, self.tags = {}, [], 0, []
        self._in_chart = 0

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if "data-key" in a and "data-value" in a:
            self.values[a["data-key"]] = None if a["data-value"] in ("", "None") else float(a["data-value"])
        if tag == "figure" and "chart" in (a.get("class") or ""):
            self.charts.append(a.get("data-chart"))
            self._in_chart += 1
        if tag == "svg" and self._in_chart and self.tags[-2][0] == "figure":
            self.svgs_in_charts += 1

    def handle_endtag(self, tag):
        if tag == "figure" and self._in_chart:
            self._in_chart -= 1


def _page(folder: Path):
    text = (folder / C.REPORT_FILE).read_text(encoding="utf-8")
    p = _Figures()
    p.feed(text)
    return text, p


def _listing(folder: Path):
    return sorted((n, (folder / n).read_bytes()) for n in os.listdir(folder))


def _tree(folder: Path):
    """Every file under ``folder`` (a study's cases and plots too) with its bytes."""
    return sorted((str(f.relative_to(folder)), f.read_bytes()) for f in folder.rglob("*") if f.is_file())


# -- the page in a real browser --------------------------------------------------------------

@pytest.mark.parametrize("which", ["demo", "long_windows", "infeasible", "study"])
def test_the_report_opens_in_a_real_browser_with_nothing_fetched(which, request, tmp_path):
    exe = browser.find()
    if exe is None:
        pytest.skip("no Chromium found (Debian package 'chromium'); .ci/run installs it")
    folder = request.getfixturevalue(which)
    _text, parsed = _page(folder)
    v = browser.visit(exe, folder / C.REPORT_FILE, tmp_path / "profile", width=1200, height=900)
    # the page alone (a data: URI is the page's own bytes, an imshow map's picture: no fetch)
    fetched = [u for u in v.requests if not u.startswith("data:")]
    assert fetched == [(folder / C.REPORT_FILE).absolute().as_uri()], fetched
    assert v.blocked == []
    assert v.errors == []
    assert (v.width, v.height) == (1200, 900)
    import matplotlib.image as mpimg
    pixels = mpimg.imread(io.BytesIO(v.png), format="png")[..., :3]
    assert pixels.shape[:2] == (900, 1200)
    assert float(pixels.std()) > 0.05                              # not one flat colour
    assert float((pixels.min(axis=2) < 0.5).mean()) > 0.005        # some dark ink: text, lines
    assert v.svgs == v.charts_declared == len(parsed.charts) == parsed.svgs_in_charts
    if which in ("demo", "long_windows"):
        assert v.svgs >= 4
    if which == "study":
        assert v.svgs == 2                                         # a plot per varied setting


def test_the_browser_check_sees_a_fetch_and_a_console_error(tmp_path):
    """The harness itself can fail: a planted image from the network and a logged error are seen."""
    exe = browser.find()
    if exe is None:
        pytest.skip("no Chromium found (Debian package 'chromium'); .ci/run installs it")
    page = tmp_path / "planted.html"
    page.write_text('<!DOCTYPE html><html><body><p>x</p><img src="http://example.invalid/a.png">'
                    '<script>console.error("planted")</script></body></html>', encoding="utf-8")
    v = browser.visit(exe, page, tmp_path / "profile")
    assert "http://example.invalid/a.png" in v.requests and "http://example.invalid/a.png" in v.blocked
    assert any("planted" in e for e in v.errors)


# -- the figures are the CSVs' ------------------------------------------------------------

def _csv(folder: Path, name: str) -> pd.DataFrame:
    return pd.read_csv(folder / C.table_file(name, "csv"), index_col="time")


@pytest.mark.parametrize("which", ["demo", "long_windows"])
def test_report_figures_equal_the_csvs(which, request):
    folder = request.getfixturevalue(which)
    summary = json.loads((folder / C.SUMMARY_FILE).read_text())
    dt = summary["step_hours"]
    _text, page = _page(folder)
    vals = page.values
    assert vals["objective"] == pytest.approx(summary["objective"], abs=1e-9)
    assert vals["best_bound"] == pytest.approx(summary["best_bound"], abs=1e-9)
    checked = 0
    for name in summary["storages"]:
        t = _csv(folder, name)
        assert vals[f"storages/{name}/energy_in_mwh"] == pytest.approx(t["charge_mw"].sum() * dt, abs=1e-6)
        assert vals[f"storages/{name}/energy_out_mwh"] == pytest.approx(t["discharge_mw"].sum() * dt, abs=1e-6)
        assert vals[f"storages/{name}/spilled_mwh"] == pytest.approx(t["spill_mw"].sum() * dt, abs=1e-6)
        assert vals[f"storages/{name}/soc_end_mwh"] == pytest.approx(t["soc_mwh"].iloc[-1], abs=1e-9)
        checked += 1
    for name in summary["supplies"]:
        t = _csv(folder, name)
        assert vals[f"supplies/{name}/energy_out_mwh"] == pytest.approx(t["used_mw"].sum() * dt, abs=1e-6)
        assert vals[f"supplies/{name}/curtailed_mwh"] == pytest.approx(t["curtailed_mw"].sum() * dt, abs=1e-6)
        checked += 1
    for name in summary["connections"]:
        t = _csv(folder, name)
        assert vals[f"connections/{name}/energy_in_mwh"] == pytest.approx(t["import_mw"].sum() * dt, abs=1e-6)
        assert vals[f"connections/{name}/energy_out_mwh"] == pytest.approx(t["export_mw"].sum() * dt, abs=1e-6)
        # a connection's money is its cashflow column, recomputed from prices and flows
        # (the CSVs are rounded to 6 decimals, docs/outputs.md: each value within 5e-7)
        cash = (dt * (t["sell_price"] * t["export_mw"] - t["buy_price"] * t["import_mw"])).sum()
        reach = 5e-7 * dt * float((t["sell_price"].abs() + t["buy_price"].abs() + t["export_mw"]
                                   + t["import_mw"] + 1e-6).sum())
        assert vals[f"connections/{name}/net_value"] == pytest.approx(cash, rel=1e-9, abs=1e-6 + reach)
        checked += 1
    # the storages', supplies' and demands' values add up to the objective (docs/outputs.md)
    parts = sum(vals[f"{g}/{n}/net_value"] for g in ("storages", "supplies", "demands") for n in summary[g])
    assert parts == pytest.approx(summary["objective"], rel=1e-6, abs=1e-6)
    assert checked >= 3


def test_the_report_shows_provenance_and_the_caution(demo):
    text, _parsed = _page(demo)
    summary = json.loads((demo / C.SUMMARY_FILE).read_text())
    prov = summary["provenance"]
    assert tuple(prov) == C.PROVENANCE_KEYS
    import portfolio
    import highspy
    assert prov["tool_version"] == portfolio.__version__
    assert prov["highs_version"] == highspy.Highs().version()
    assert prov["command"][:2] == ["portfolio", "dispatch"] and "--report" in prov["command"]
    started = pd.Timestamp(prov["started_utc"])
    assert started.utcoffset() == pd.Timedelta(0)
    inputs = {Path(i["path"]).resolve(): i["sha256"] for i in prov["inputs"]}
    assert DEMO.resolve() in inputs and len(inputs) >= 2          # the portfolio and its series files
    for path, digest in inputs.items():
        assert digest == hashlib.sha256(path.read_bytes()).hexdigest(), path
        assert digest in text
    assert html.escape(C.CAUTION) in text
    assert f'data-key="tool_version">{portfolio.__version__}<' in text


def test_a_long_horizon_draws_connection_use_as_a_day_by_hour_map(long_windows):
    text, page = _page(long_windows)
    summary = json.loads((long_windows / C.SUMMARY_FILE).read_text())
    assert summary["steps"] * summary["step_hours"] > 72
    assert set(page.charts) >= {"site/farm", "soc/cells", "lost", "connection/line", "money"}
    figure = text.split('data-chart="connection/line"', 1)[1].split("</figure>", 1)[0]
    assert "<image" in figure and "hour of day" in figure       # a raster map, labelled
    assert "windows of 24.0 h" in text



def test_one_window_is_one_window_in_the_headline(tmp_path):
    f = tmp_path / "short.folio"
    f.write_text(_long_text(days=2), encoding="utf-8")
    code, text, err = run("dispatch", f, "--out", tmp_path / "out", "--windows", "2d/0h", "--report", "-q")
    assert code == 0, err
    page = (tmp_path / "out" / C.REPORT_FILE).read_text(encoding="utf-8")
    assert "1 window of 48.0 h" in page and "1 windows" not in page

# -- bad input: clear messages, exit codes, nothing written -----------------------------------

def test_a_folder_that_is_not_an_output_folder_is_refused(tmp_path):
    empty = tmp_path / "empty"
    empty.mkdir()
    code, out, err = run("report", empty)
    assert code == 2 and "is not a dispatch output folder" in err and "no report written" in err
    assert os.listdir(empty) == []
    code, _, err = run("report", tmp_path / "missing")
    assert code == 2 and "does not exist" in err
    f = tmp_path / "file.txt"
    f.write_text("x")
    code, _, err = run("report", f)
    assert code == 2 and "is not a folder" in err
    assert sorted(os.listdir(tmp_path)) == ["empty", "file.txt"]


def test_an_output_folder_from_an_older_version_is_refused(demo, tmp_path):
    old = tmp_path / "old"
    shutil.copytree(demo, old)
    (old / C.REPORT_FILE).unlink()
    marker = json.loads((old / C.MARKER).read_text())
    marker["files"].remove(C.REPORT_FILE)
    (old / C.MARKER).write_text(json.dumps(marker))
    summary = json.loads((old / C.SUMMARY_FILE).read_text())
    del summary["provenance"]
    (old / C.SUMMARY_FILE).write_text(json.dumps(summary))
    before = _listing(old)
    code, out, err = run("report", old)
    assert code == 2 and "older version" in err and out == ""
    assert _listing(old) == before                          # nothing written, marker untouched


def test_an_infeasible_result_reports_the_limits_that_gave(infeasible):
    text, page = _page(infeasible)
    summary = json.loads((infeasible / C.SUMMARY_FILE).read_text())
    assert summary["status"] == "infeasible" and summary["relaxed"]
    assert page.charts == []
    for i, r in enumerate(summary["relaxed"]):
        assert f'{Path(r["path"]).name}:{r["line"]}:{r["column"]}' in text.replace(str(Path(r["path"]).parent) + "/", "")
        assert page.values[f"relaxed/{i}/amount"] == pytest.approx(r["amount"])
        assert html.escape(r["description"]) in text
    code, out, err = run("report", infeasible)                      # again, on its own
    assert code == 0 and "status infeasible" in out and err == ""


def test_foreign_files_are_never_overwritten(demo, tmp_path):
    folder = tmp_path / "f"
    shutil.copytree(demo, folder)
    (folder / "notes.txt").write_text("mine")
    before = _listing(folder)
    code, _, err = run("report", folder)
    assert code == 2 and "notes.txt" in err
    assert _listing(folder) == before
    # a report.html the marker does not list is someone else's: kept as it is
    (folder / "notes.txt").unlink()
    marker = json.loads((folder / C.MARKER).read_text())
    marker["files"].remove(C.REPORT_FILE)
    (folder / C.MARKER).write_text(json.dumps(marker))
    (folder / C.REPORT_FILE).write_text("somebody's page")
    before = _listing(folder)
    code, _, err = run("report", folder)
    assert code == 2 and C.REPORT_FILE in err
    assert _listing(folder) == before


def test_a_failure_while_drawing_leaves_nothing_half_written(demo, tmp_path, monkeypatch):
    import portfolio.report as R
    folder = tmp_path / "f"
    shutil.copytree(demo, folder)
    before = _listing(folder)

    def broken(_folder):
        raise RuntimeError("drawing failed")

    monkeypatch.setattr(R, "render", broken)
    with pytest.raises(RuntimeError):
        R.write_report(folder)
    assert _listing(folder) == before              # no page, no temporary file, the marker as it was


def test_a_folder_with_its_report_is_still_one_a_dispatch_may_replace(demo, tmp_path):
    folder = tmp_path / "again"
    shutil.copytree(demo, folder)
    code, _, err = run("dispatch", DEMO, "--out", folder, "-q")
    assert code == 0, err
    assert not (folder / C.REPORT_FILE).exists()               # replaced as a whole, report and all
    code, out, _ = run("report", folder)
    assert code == 0 and (folder / C.REPORT_FILE).is_file()
    assert C.REPORT_FILE in json.loads((folder / C.MARKER).read_text())["files"]


def test_a_dispatch_from_python_has_provenance_without_a_command():
    import factory as F
    from portfolio.dispatch import dispatch
    r = dispatch(F.market([10.0, 50.0], [F.storage("cell", energy=1.0, power=1.0)]))
    prov = r.summary["provenance"]
    assert tuple(prov) == C.PROVENANCE_KEYS and prov["command"] is None
    # built in memory: its path names no file, so there is nothing to hash (null, not a guess)
    assert [Path(i["path"]).name for i in prov["inputs"]] == ["factory.folio"]
    assert [i["sha256"] for i in prov["inputs"]] == [None]
    assert tuple(r.summary["network"]) == C.NETWORK_KEYS
    assert r.summary["network"]["storages"]["cell"]["energy_mwh"] == 1.0
    assert np.isfinite(pd.Timestamp(prov["started_utc"]).timestamp())


# -- money by day as a chart ---------------------------------------------------------------

def test_a_long_horizon_charts_money_by_day_and_a_short_one_does_not(long_windows, demo):
    text, page = _page(long_windows)
    per = pd.read_csv(long_windows / "periods.csv")
    days = per[(per["period"] == "day") & per["kind"].isin(("storage", "supply", "demand"))]
    assert "periods/day" in page.charts
    figure = text.split('data-chart="periods/day"', 1)[1].split("</figure>", 1)[0]
    for label in list(dict.fromkeys(days["label"]))[::2]:          # the days label the axis
        assert label in figure
    for asset, kind in set(zip(days["asset"], days["kind"])):        # each asset in the legend
        assert f"{kind} {asset}" in figure
    # the chart's totals are the day table's, which are periods.csv's
    for label, part in days.groupby("label"):
        assert page.values[f"periods/day/{label}/total"] == pytest.approx(part["net_value"].sum(), abs=1e-9)
    summary = json.loads((demo / C.SUMMARY_FILE).read_text())
    if summary["steps"] * summary["step_hours"] <= 72:
        assert not [c for c in _page(demo)[1].charts if c.startswith("periods/")]


# -- a study's report --------------------------------------------------------------------

def test_the_study_report_figures_equal_cases_csv(study):
    text, page = _page(study)
    df = pd.read_csv(study / "cases.csv", keep_default_na=True)
    vals = page.values
    varied = list(df.columns[1:list(df.columns).index("status")])
    assert varied == ["cells energy [MWh]", "grid import max [MW]", "spot scenario"]
    assets = [c for c in df.columns if c.startswith("net value ")]
    assert assets == ["net value cells"]
    for _i, r in df.iterrows():
        k = r["case"]
        for c in ["objective", "gap", "cells energy [MWh]", "grid import max [MW]"] + assets:
            want = r[c]
            if pd.isna(want):
                assert vals[f"cases/{k}/{c}"] is None
            else:
                assert vals[f"cases/{k}/{c}"] == pytest.approx(float(want), abs=1e-12), (k, c)
        assert f'data-key="cases/{k}/spot scenario">{r["spot scenario"]}<' in text
        assert f'data-key="cases/{k}/status">{r["status"]}<' in text
    ok = df[df["status"].isin(("optimal", "feasible"))]
    assert vals["cases"] == len(df) == 8 and vals["with_schedule"] == len(ok) == 4
    assert vals["best/objective"] == pytest.approx(ok["objective"].max(), abs=1e-12)
    # a plot per varied setting, none for the scenario (it tells the lines apart)
    assert page.charts == ["study/cells energy [MWh]", "study/grid import max [MW]"]
    figure = text.split('data-chart="study/cells energy [MWh]"', 1)[1].split("</figure>", 1)[0]
    assert "objective (EUR)" in figure and "cells energy [MWh]" in figure
    # a colour per scenario; the other setting has one value with a schedule: no shades
    assert "spot: low" in figure and "spot: high" in figure and "fainter" not in figure
    assert "<img" not in text and ".png" not in text.replace("plots/", "")


def test_a_study_plot_names_at_most_twelve_colours_and_says_what_shades_mean():
    """15 scenarios x 3 values of another setting: 45 lines, 15 colours of which 12 are
    named beside the axes, the shades explained (a legend of 45 entries had squeezed the
    axes to nothing and made matplotlib warn on the command's stderr)."""
    import warnings

    from portfolio.report import charts
    xs = np.array([1.0, 2.0, 3.0])
    lines = [(f"spot: s{k:02d}", shade, xs, xs * k + shade) for k in range(15) for shade in (0.0, 0.5, 1.0)]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        svg = charts.study_lines("t", "x [MW]", lines, "objective (EUR)", "salt",
                                 "one line per b energy [MWh]; fainter: smaller")
    assert "15 colours, 12 named" in svg and "one line per b energy [MWh]; fainter: smaller" in svg
    named = [f"spot: s{k:02d}" for k in range(15) if f"spot: s{k:02d}<" in svg]
    assert len(named) == charts.LEGEND_MAX and named[0] == "spot: s00" and named[-1] == "spot: s14"


def test_many_assets_are_drawn_not_a_stop_iteration(tmp_path):
    """33 sites of one store each, and one site of 16 stores: the charts' colours ran out
    after 32 (StopIteration, exit 1, after the schedule was written)."""
    prices = " ".join(str(40 + 10 * (h % 3)) for h in range(4))
    sites = "\n".join(f"site s{k} at grid {{ storage b{k} {{ kind battery energy 2 MWh charge max 1 MW "
                      f"discharge max 1 MW }} }}" for k in range(33))
    many = "\n".join(f"  storage c{k} {{ kind battery energy 2 MWh charge max 1 MW discharge max 1 MW }}"
                     for k in range(16))
    for name, body in (("sites", sites), ("stores", f"site one at grid {{\n{many}\n}}")):
        f = tmp_path / f"{name}.folio"
        f.write_text(f'portfolio {name}\nhorizon start 2027-06-01T00:00 length 4 h step 1 h zone "UTC"\n'
                     f"price spot values [{prices}] per MWh\n"
                     "connection grid { export max 100 MW import max 100 MW sell at spot buy at spot plus 1 per MWh }\n"
                     f"{body}\n", encoding="utf-8")
        code, text, err = run("dispatch", f, "--out", tmp_path / name, "--report", "-q")
        assert code == 0 and "Traceback" not in err, err
        assert (tmp_path / name / C.REPORT_FILE).is_file()


def test_a_table_edited_by_hand_is_a_message_not_a_traceback(tmp_path):
    """A cell that is no number, a row deleted, a value of 1e308 (a table opened and saved
    in a spreadsheet): a message naming the folder, exit 2; the drawing libraries' numeric
    warnings do not reach stderr."""
    import shutil
    import warnings
    base = tmp_path / "base"
    code, _, err = run("dispatch", DEMO, "--out", base, "-q")
    assert code == 0, err
    tables = sorted(p.name for p in base.glob("*.csv") if p.name not in ("periods.csv",))
    some = next(n for n in tables if n not in ("summary.csv", "marginal_values.csv"))
    for how in ("word", "row", "huge"):
        folder = tmp_path / how
        shutil.copytree(base, folder)
        lines = (folder / some).read_text(encoding="utf-8").splitlines()
        if how == "word":
            cells = lines[2].split(",")
            cells[-1] = "n/a"
            lines[2] = ",".join(cells)
        elif how == "row":
            del lines[3]
        else:
            cells = lines[2].split(",")
            cells[-1] = "1e308"
            lines[2] = ",".join(cells)
        (folder / some).write_text("\n".join(lines) + "\n", encoding="utf-8")
        with warnings.catch_warnings(record=True) as seen:     # what would reach stderr
            warnings.simplefilter("always")
            code, text, err = run("report", folder)
        assert not seen, (how, [str(w.message) for w in seen])
        assert "Traceback" not in err, (how, err)
        assert code in (0, 2), (how, code, err)
        if code == 2:
            assert "not as this tool writes them" in err or "cannot" in err, (how, err)


def test_the_study_report_lists_failed_cases_provenance_and_cautions(study):
    import portfolio
    text, page = _page(study)
    df = pd.read_csv(study / "cases.csv", keep_default_na=False)
    failed = df[~df["status"].isin(("optimal", "feasible"))]
    assert len(failed) == 4 and set(failed["grid import max [MW]"]) == {0}
    for _i, r in failed.iterrows():
        assert f'data-key="failed/{r["case"]}/status">{r["status"]}<' in text
        assert f'data-key="failed/{r["case"]}/message">{html.escape(r["message"] or "–")}<' in text
    assert f'data-key="tool_version">{portfolio.__version__}<' in text
    digest = hashlib.sha256((study.parent / "tiny.folio").read_bytes()).hexdigest()
    assert digest in text
    assert html.escape(C.CAUTION) in text and 'data-key="currency">EUR<' in text
    # only report.html was added to what the study wrote
    assert C.REPORT_FILE in os.listdir(study)
    assert set(os.listdir(study)) <= {".portfolio-study", ".portfolio-study.lock", "cases", "cases.csv", "cases.parquet", "plots",
                                      C.REPORT_FILE}


def test_a_study_report_replaces_only_its_own_page(study, tmp_path):
    folder = tmp_path / "st"
    shutil.copytree(study, folder)
    before = _tree(folder)
    code, out, err = run("report", folder)                        # its own page: replaced
    assert code == 0 and err == "" and "study of 8 cases" in out
    assert [n for n, _b in _tree(folder)] == [n for n, _b in before]
    (folder / C.REPORT_FILE).write_text("somebody's page")        # not ours: kept as it is
    before = _tree(folder)
    code, out, err = run("report", folder)
    assert code == 2 and "did not write" in err and out == ""
    assert _tree(folder) == before


def test_bad_study_folders_are_refused_with_a_clear_message(study, tmp_path):
    unfinished = tmp_path / "unfinished"
    shutil.copytree(study, unfinished)
    (unfinished / C.REPORT_FILE).unlink()
    (unfinished / "cases.csv").unlink()
    before = _tree(unfinished)
    code, out, err = run("report", unfinished)
    assert code == 2 and "has no cases.csv" in err and "has not finished" in err
    assert _tree(unfinished) == before
    damaged = tmp_path / "damaged"
    shutil.copytree(study, damaged)
    (damaged / C.REPORT_FILE).unlink()
    df = pd.read_csv(damaged / "cases.csv")
    df.drop(columns=["status"]).to_csv(damaged / "cases.csv", index=False)
    before = _tree(damaged)
    code, out, err = run("report", damaged)
    assert code == 2 and "not a study's cases table" in err and "status" in err
    assert _tree(damaged) == before
    plain = tmp_path / "plain"
    plain.mkdir()
    (plain / "cases.csv").write_text("case,status\n")
    code, out, err = run("report", plain)
    assert code == 2 and "neither" in err and ".portfolio-study" in err and ".portfolio-output" in err
    assert os.listdir(plain) == ["cases.csv"]


def test_a_horizon_over_two_months_charts_money_by_month(tmp_path):
    f = tmp_path / "turn.folio"
    f.write_text(_long_text(4, start="2027-06-29T00:00"), encoding="utf-8")
    out = tmp_path / "out"
    code, _text, err = run("dispatch", f, "--out", out, "--report", "-q")
    assert code == 0, err
    text, page = _page(out)
    assert {"periods/day", "periods/month"} <= set(page.charts)
    per = pd.read_csv(out / "periods.csv")
    months = per[(per["period"] == "month") & per["kind"].isin(("storage", "supply", "demand"))]
    assert sorted(set(months["label"])) == ["2027-06", "2027-07"]
    figure = text.split('data-chart="periods/month"', 1)[1].split("</figure>", 1)[0]
    assert "2027-06" in figure and "2027-07" in figure and "net value (money)" in figure
    summary = json.loads((out / C.SUMMARY_FILE).read_text())
    total = sum(page.values[f"periods/month/{m}/total"] for m in ("2027-06", "2027-07"))
    assert total == pytest.approx(summary["objective"], rel=1e-6, abs=1e-6)   # the months add up


def test_a_study_of_scenarios_only_gets_its_objectives_as_bars(tmp_path):
    """A cases table as `portfolio study` writes it, varying only a series: no setting to plot
    against, so each case's objective is one bar (a failed case has none)."""
    from portfolio.study.run import MARKER as STUDY_MARKER
    folder = tmp_path / "sc"
    folder.mkdir()
    (folder / STUDY_MARKER).write_text("portfolio study of x.folio\n")
    df = pd.DataFrame({"case": ["a1", "b2", "c3"], "spot scenario": ["low", "high", "odd"],
                       "status": ["optimal", "optimal", "error"], "objective": [12.5, 30.25, None],
                       "gap": [0.0, 0.0, None], "net value cells": [12.5, 30.25, None],
                       "message": ["", "", "ValueError: planted"]})
    df.to_csv(folder / "cases.csv", index=False)
    code, out, err = run("report", folder)
    assert code == 0 and "study of 3 cases, 1 without a schedule" in out, err
    text, page = _page(folder)
    assert page.charts == ["study/objective"]
    figure = text.split('data-chart="study/objective"', 1)[1].split("</figure>", 1)[0]
    assert ">low<" in figure and ">high<" in figure and ">odd<" not in figure
    assert page.values["cases/b2/objective"] == 30.25 and page.values["cases/c3/objective"] is None
    assert 'data-key="failed/c3/message">ValueError: planted<' in text
    assert "Not recorded" in text and 'data-key="currency">not recorded: money<' in text
