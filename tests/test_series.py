"""Tests for portfolio.series: loading, checking and resampling time series.

Fixtures live in tests/data/series/; every fault case names its fixture
beside the code and line it must produce.  Expected numbers are worked out by
hand from the fixture's rows (said so beside each check).
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from portfolio.series import load as series_load
from portfolio.diagnostics import Sink
from portfolio.model import Horizon
from portfolio.series import SeriesSpec, load_series
from portfolio.spans import Span

ROOT = Path(__file__).resolve().parents[1]
DATA = Path("tests/data/series")          # relative: spans must show it as written

FOLIO = "plant.folio"
DECL = Span(FOLIO, 7, 1, 7, 70)
PATH = Span(FOLIO, 7, 12, 7, 30)
COLUMN = Span(FOLIO, 7, 38, 7, 45)
TIME_COLUMN = Span(FOLIO, 7, 58, 7, 64)
VALUES = Span(FOLIO, 9, 14, 9, 40)


@pytest.fixture(autouse=True)
def _at_root(monkeypatch):
    monkeypatch.chdir(ROOT)


def horizon(start="2027-03-01T00:00", steps=4, step_hours=1.0, zone="UTC"):
    return Horizon(start=pd.Timestamp(start, tz=zone), steps=steps,
                   step_hours=step_hours, zone=zone)


def spec(path=None, column="price", quantity="price", name="s", **kw):
    if "values" in kw:
        return SeriesSpec(name=name, quantity=quantity, span=DECL, values_span=VALUES, **kw)
    if "constant" in kw:
        return SeriesSpec(name=name, quantity=quantity, span=DECL, **kw)
    if "time_column" in kw:
        kw.setdefault("time_column_span", TIME_COLUMN)
    return SeriesSpec(name=name, quantity=quantity, span=DECL, path=path, path_span=PATH,
                      column=column, column_span=COLUMN, **kw)


def load(specs, hz=None, base=DATA):
    sink = Sink()
    out = load_series(specs, hz if hz is not None else horizon(), base, sink)
    return out, sink


def file_line(fixture: str, line: int) -> str:
    return (ROOT / DATA / fixture).read_text(encoding="utf-8").split("\n")[line - 1]


SPRING = dict(start="2027-03-28T00:00", steps=24, zone="Europe/Berlin")   # clocks go forward
AUTUMN = dict(start="2027-10-31T00:00", steps=24, zone="Europe/Berlin")   # clocks go back

# One row a fault: fixture (None: no file), spec settings, horizon settings,
# expected code, where it points ("csv" or a .folio span), CSV line, and text
# that must be on that line of the fixture (proves the row number is right).
FAULTS = [
    ("P401-missing", "missing.csv", {}, {}, "P401", PATH, None, None),
    ("P402-column", "prices_hourly.csv", dict(column="prise"), {}, "P402", COLUMN, None, None),
    ("P402-time-column", "prices_hourly.csv", dict(time_column="stamp"), {}, "P402", TIME_COLUMN,
     None, None),
    ("P403-text", "bad_cell.csv", {}, {}, "P403", "csv", 4, "oops"),
    ("P403-empty", "empty_cell.csv", {}, {}, "P403", "csv", 5, "2027-03-01T03:00Z,"),
    ("P403-short-row", "short_row.csv", {}, {}, "P403", "csv", 3, "2027-03-01T01:00Z"),
    ("P403-after-quoted-newline", "quoted.csv", dict(column="price, day-ahead"), {}, "P403",
     "csv", 5, "n/a"),
    ("P403-decimal-comma", "semicolon.csv", {}, {}, "P403", "csv", 3, "45,5"),
    ("P404", "bad_time.csv", {}, {}, "P404", "csv", 4, "02:60"),
    ("P405-duplicate", "duplicate_time.csv", {}, {}, "P405", "csv", 5, "03:00+01:00"),
    ("P405-decreasing", "decreasing_time.csv", {}, {}, "P405", "csv", 4, "T01:00Z"),
    ("P406-gap", "berlin_spring_naive.csv", {}, SPRING, "P406", "csv", 4, "2027-03-28T02:00"),
    ("P406-ambiguous", "berlin_autumn_naive.csv", {}, AUTUMN, "P406", "csv", 4,
     "2027-10-31T02:00"),
    ("P407-late-start", "late_start.csv", {}, {}, "P407", DECL, None, None),
    ("P407-single-row", "single_row.csv", {}, {}, "P407", DECL, None, None),
    ("P408", None, dict(values=(1.0, 2.0, 3.0)), {}, "P408", VALUES, None, None),
    ("P409-header-only", "header_only.csv", {}, {}, "P409", "csv", 1, "time,price"),
    ("P409-empty-file", "empty.csv", {}, {}, "P409", "csv", 1, ""),
    ("P410", "negative_power.csv", dict(column="load", quantity="power"), {}, "P410", "csv", 6,
     "-0.5"),
]


@pytest.mark.parametrize("fixture, settings_, hz, code, where, line, marker", [c[1:] for c in FAULTS],
                         ids=[c[0] for c in FAULTS])
def test_fault_code_and_place(fixture, settings_, hz, code, where, line, marker):
    out, sink = load([spec(fixture, **settings_)], horizon(**hz))
    assert out == {}
    assert [d.code for d in sink.items] == [code]
    d = sink.items[0]
    if where == "csv":
        assert d.span.path == str(DATA / fixture)
        assert d.span.line == line
        assert marker in file_line(fixture, line)
        assert f"series 's' declared at {DECL}" in d.notes
        if code not in ("P409",):
            assert f"line {line}" in d.message
    else:
        assert d.span == where


def test_code_table_covers_every_series_code():
    codes = {c[4] for c in FAULTS}
    assert codes == {f"P4{n:02d}" for n in range(1, 11)}


def test_cell_span_points_at_the_cell():
    _, sink = load([spec("bad_cell.csv")])
    d = sink.items[0]
    text = file_line("bad_cell.csv", 4)
    assert text[d.span.col - 1:d.span.end_col - 1] == "oops"


# --- resampling -------------------------------------------------------------

def test_hourly_prices_are_held_on_quarter_hours():
    # prices_hourly.csv: 10, 20, 30, ... at 00:00Z, 01:00Z, 02:00Z, ...
    out, sink = load([spec("prices_hourly.csv")], horizon(steps=16, step_hours=0.25))
    assert sink.items == []
    expected = np.repeat([10.0, 20.0, 30.0, 40.0], 4)          # hand computation
    np.testing.assert_allclose(out["s"].values, expected, rtol=1e-12)


def test_five_minute_data_is_averaged_onto_hours_and_scaled():
    # pv_5min.csv: value k in kW at 00:00Z + 5k min, k = 0..23
    out, sink = load([spec("pv_5min.csv", column="pv_kw", quantity="power", factor=0.001)],
                     horizon(steps=2))
    assert sink.items == []
    # analytic: mean(0..11) = 5.5 and mean(12..23) = 17.5 kW
    np.testing.assert_allclose(out["s"].values, [0.0055, 0.0175], rtol=1e-12)


def test_irregular_rows_are_time_weighted():
    # irregular.csv: 0 from 00:00, 60 from 00:40, 30 from 01:30; median spacing 45 min
    out, sink = load([spec("irregular.csv", column="value")], horizon(steps=2))
    assert sink.items == []
    # hand computation: (0*40 + 60*20)/60 = 20 and (60*30 + 30*30)/60 = 45
    np.testing.assert_allclose(out["s"].values, [20.0, 45.0], rtol=1e-12)


def test_steps_straddling_rows():
    out, _ = load([spec("prices_hourly.csv")], horizon(start="2027-03-01T00:30", steps=3))
    # hand computation: (10+20)/2, (20+30)/2, (30+40)/2
    np.testing.assert_allclose(out["s"].values, [15.0, 25.0, 35.0], rtol=1e-12)


def test_last_row_holds_for_the_median_spacing():
    # six hourly rows from 00:00Z: the last (60) holds 05:00-06:00
    out, sink = load([spec("prices_hourly.csv")], horizon(steps=6))
    assert sink.items == []
    np.testing.assert_allclose(out["s"].values, [10, 20, 30, 40, 50, 60], rtol=1e-12)
    out, sink = load([spec("prices_hourly.csv")], horizon(steps=8))
    assert out == {}
    [d] = sink.items
    assert d.code == "P407" and "ends 2 h before the horizon ends" in d.message
    assert any("median spacing of 1 h" in n for n in d.notes)


def test_coverage_says_which_end_and_what_was_found():
    _, sink = load([spec("late_start.csv")])
    [d] = sink.items
    assert "starts 30 min after the horizon starts" in d.message
    assert "ends" not in d.message
    assert any("2027-03-01T00:30:00+00:00" in n and "late_start.csv:2" in n for n in d.notes)


def test_offsets_on_the_spring_forward_day_use_absolute_time():
    # berlin_spring_offsets.csv: value k at local midnight + k absolute hours
    hz = horizon(**SPRING)
    out, sink = load([spec("berlin_spring_offsets.csv")], hz)
    assert sink.items == []
    np.testing.assert_allclose(out["s"].values, np.arange(24.0))
    # the day has 23 wall-clock hours: step 2 starts at 03:00 local and the
    # 24 absolute hours end at 01:00 the next day
    assert hz.index[2].hour == 3
    assert hz.end.tz_convert("Europe/Berlin") == pd.Timestamp("2027-03-29T01:00",
                                                              tz="Europe/Berlin")


def test_naive_times_are_local_to_the_horizon_zone():
    # berlin_local_day.csv: 22, 23 on Feb 28 22:00/23:00, then 100 + h at Mar 1 h:00, no offsets
    berlin = Horizon(start=pd.Timestamp("2027-03-01T00:00Z").tz_convert("Europe/Berlin"),
                     steps=4, step_hours=1.0, zone="Europe/Berlin")
    out, sink = load([spec("berlin_local_day.csv")], berlin)
    assert sink.items == []
    # 00:00Z is 01:00 in Berlin (UTC+1 in winter), the row "2027-03-01T01:00": hand computation
    np.testing.assert_allclose(out["s"].values, [101, 102, 103, 104])
    # the same file under a UTC horizon reads its naive times as UTC
    out, _ = load([spec("berlin_local_day.csv")], horizon(steps=4))
    np.testing.assert_allclose(out["s"].values, [100, 101, 102, 103])


def test_dst_faults_invite_offsets():
    _, sink = load([spec("berlin_spring_naive.csv")], horizon(**SPRING))
    [d] = sink.items
    assert "does not exist in Europe/Berlin" in d.message
    assert any("UTC offset" in n for n in d.notes)
    _, sink = load([spec("berlin_autumn_naive.csv")], horizon(**AUTUMN))
    [d] = sink.items
    assert "ambiguous" in d.message
    assert "+02:00" in d.message and "+01:00" in d.message


def test_timestamp_forms(tmp_path):
    rows = ["2027-03-01T00:00Z", "2027-03-01 01:00:00+00:00", "2027-03-01T04:00+0200",
            "2027-02-28T22:00-05", "20270301T0400Z", "2027-03-01t05:00z"]
    (tmp_path / "forms.csv").write_text(
        "time,price\n" + "".join(f"{t},{k}\n" for k, t in enumerate(rows)))
    out, sink = load([spec("forms.csv")], horizon(steps=6), base=tmp_path)
    assert sink.items == []
    np.testing.assert_allclose(out["s"].values, np.arange(6.0))     # each row k is k h after 00:00Z


@pytest.mark.parametrize("bad", ["2027-03-01T00:00+25:00", "2027-03-01Z", "2027-03-01T00:00Z+01:00",
                                 "yesterday", "2027-13-01T00:00", "2027-03-01T00:00+01:00:00", ""])
def test_unreadable_timestamps(tmp_path, bad):
    (tmp_path / "t.csv").write_text(
        f"time,price\n2027-02-28T00:00Z,1\n{bad},2\n2027-03-02T00:00Z,3\n")
    _, sink = load([spec("t.csv")], horizon(), base=tmp_path)
    assert [(d.code, d.span.line) for d in sink.items] == [("P404", 3)]


def test_a_year_of_quarter_hours(tmp_path):
    idx = pd.date_range("2027-01-01", periods=35040, freq="15min", tz="Europe/Berlin")
    text = "time,price\n" + "".join(f"{t.isoformat()},{k}\n" for k, t in enumerate(idx))
    (tmp_path / "year.csv").write_text(text)
    hz = horizon(start="2027-01-01T00:00", steps=8759, zone="Europe/Berlin")
    out, sink = load([spec("year.csv")], hz, base=tmp_path)
    assert sink.items == []
    # analytic: hour h averages rows 4h..4h+3, i.e. 4h + 1.5
    np.testing.assert_allclose(out["s"].values, 4 * np.arange(8759) + 1.5, rtol=1e-9)


# --- files, columns, grouping -------------------------------------------------

def test_each_file_is_read_once(monkeypatch):
    calls = []
    real = series_load.read_table

    def counting(resolved, shown):
        calls.append(resolved)
        return real(resolved, shown)

    monkeypatch.setattr(series_load, "read_table", counting)
    out, sink = load([spec("prices_hourly.csv", name="a"),
                      spec("./prices_hourly.csv", name="b", column="peak"),
                      spec("bad_cell.csv", name="c", column="time")])
    assert len(calls) == 2
    assert list(out) == ["a", "b"]
    # a negative price is fine: peak is -5 at 02:00 (fixture)
    np.testing.assert_allclose(out["b"].values, [1, 1, -5, 1])
    # c reads the time column as numbers: its four cells are bad, reported as 3 + "1 more"
    assert [d.code for d in sink.items] == ["P403"] * 3


def test_shared_time_column_fault_is_reported_once():
    _, sink = load([spec("bad_time.csv", name="a"), spec("bad_time.csv", name="b")])
    [d] = sink.items
    assert d.code == "P404"
    assert f"series 'a' declared at {DECL}" in d.notes
    assert f"series 'b' declared at {DECL}" in d.notes


def test_first_few_bad_cells_then_a_count():
    _, sink = load([spec("many_bad.csv")], horizon())
    assert [(d.code, d.span.line) for d in sink.items] == [("P403", 3), ("P403", 5), ("P403", 7)]
    assert "and 2 more" in sink.items[-1].notes[0] and "9, 11" in sink.items[-1].notes[0]


def test_negative_power_is_refused_but_negative_price_is_not():
    out, sink = load([spec("prices_hourly.csv", column="peak", quantity="power")])
    assert out == {} and [(d.code, d.span.line) for d in sink.items] == [("P410", 4)]
    out, sink = load([spec("prices_hourly.csv", column="peak", quantity="price")])
    assert sink.items == [] and out["s"].values.min() == -5


def test_column_suggestions():
    _, sink = load([spec("prices_hourly.csv", column="PRICE")])
    [d] = sink.items
    assert "did you mean 'price'?" in d.notes
    assert any("'time', 'price', 'peak'" in n for n in d.notes)
    _, sink = load([spec("no_header.csv")])
    [d] = sink.items
    assert d.code == "P402" and any("header row" in n for n in d.notes)


def test_unreadable_files(tmp_path):
    (tmp_path / "latin1.csv").write_bytes(b"time,price\n2027-03-01T00:00Z,\xe9\n")
    (tmp_path / "nul.csv").write_bytes(b"time,price\x00\n")
    (tmp_path / "folder.csv").mkdir()
    for name, words in [("latin1.csv", "not UTF-8 text"), ("nul.csv", "NUL"),
                        ("folder.csv", "directory")]:
        _, sink = load([spec(name)], base=tmp_path)
        [d] = sink.items
        assert d.code == "P401" and d.span == PATH and words in d.message, name
    _, sink = load([spec("latin1.csv")], base=tmp_path)
    assert "line 2" in sink.items[0].message


def test_absolute_path_and_origin(tmp_path):
    src = ROOT / DATA / "prices_hourly.csv"
    out, sink = load([spec(str(src))], base=tmp_path)
    assert sink.items == []
    s = out["s"]
    assert s.span == DECL and s.spans["column"] == COLUMN and s.quantity == "price"
    assert "prices_hourly.csv" in s.origin and '"price"' in s.origin
    _, sink = load([spec(str(src), column="nope")], base=tmp_path)
    assert str(src) in sink.items[0].message


# --- inline lists and constants -----------------------------------------------

def test_inline_list_and_constant():
    out, sink = load([spec(name="a", values=(1, 2, 3, 4), factor=0.5, quantity="power"),
                      spec(name="b", constant=-7.0, quantity="price")])
    assert sink.items == []
    np.testing.assert_allclose(out["a"].values, [0.5, 1, 1.5, 2])
    np.testing.assert_allclose(out["b"].values, [-7.0] * 4)


def test_inline_list_length_message():
    _, sink = load([spec(values=(1.0, 2.0, 3.0))])
    [d] = sink.items
    assert "3 values" in d.message and "4 steps" in d.message


def test_negative_inline_and_constant_power():
    _, sink = load([spec(name="a", values=(1, -2, 3, 4), quantity="power"),
                    spec(name="b", constant=-1.0, quantity="power")])
    assert [(d.code, d.span) for d in sink.items] == [("P410", VALUES), ("P410", DECL)]
    assert "entry 2" in sink.items[0].message


def test_contract_violation_raises():
    with pytest.raises(ValueError):
        load_series([SeriesSpec(name="x", quantity="price", span=DECL)], horizon(), DATA, Sink())
    with pytest.raises(ValueError):
        load_series([SeriesSpec(name="x", quantity="energy", span=DECL, constant=1.0)],
                    horizon(), DATA, Sink())


def test_library_never_prints(capsys):
    load([spec("many_bad.csv"), spec("missing.csv", name="m"), spec(values=(1,), name="v")])
    captured = capsys.readouterr()
    assert captured.out == "" and captured.err == ""


# --- never a traceback for bad data ---------------------------------------------

CELLS = st.sampled_from(["2027-03-01T00:00Z", "2027-03-01T01:00", "2027-03-01T02:00+01:00",
                         "1", "-3.5", "", "x", "1e400", "nan", '"q"', "2027-03-28T02:30",
                         "2027-10-31T02:30", "20270301T0300Z", "+01:00", "T", "Z", "2027-03-01Z"])
ROWS = st.lists(st.lists(CELLS, min_size=0, max_size=4), max_size=8)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(rows=ROWS, junk=st.text(max_size=40), header=st.sampled_from(["time,price", "price", "",
                                                                       "a;b", "time,time"]),
       zone=st.sampled_from(["UTC", "Europe/Berlin"]))
def test_bad_data_never_raises(rows, junk, header, zone):
    text = header + "\n" + "\n".join(",".join(r) for r in rows) + junk
    with tempfile.TemporaryDirectory() as d:
        Path(d, "f.csv").write_bytes(text.encode("utf-8", "replace"))
        specs = [spec("f.csv", name="p", quantity="power"),
                 spec("f.csv", name="q", column=None, time_column="time")]
        sink = Sink()
        out = load_series(specs, horizon(zone=zone, steps=2), Path(d), sink)
    for name in ("p", "q"):
        if name in out:
            assert out[name].values.shape == (2,) and np.isfinite(out[name].values).all()
        else:   # a spec that did not load is named by some diagnostic
            assert any(f"series '{name}'" in x for dg in sink.items for x in (dg.message, *dg.notes))
    assert all(dg.code.startswith("P4") for dg in sink.items)


def test_values_beyond_plausibility_are_named_by_line(tmp_path):
    # 1e300 is finite but no market's price: found before any averaging could overflow
    (tmp_path / "huge.csv").write_text("time,price\n2027-03-01T00:00Z,1e300\n2027-03-01T01:00Z,1e300\n")
    out, sink = load([spec("huge.csv")], horizon(steps=2), base=tmp_path)
    assert out == {} and {d.code for d in sink.items} == {"P411"}
    d = sink.items[0]
    assert d.span.path.endswith("huge.csv") and d.span.line == 2 and "1e300" in d.message
