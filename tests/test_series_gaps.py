"""Input data that is never silently wrong: misshapen rows (P413, P414) and gaps (P415, P416).

Each case writes a small CSV file, loads one series from it and compares
the codes, the CSV line each points at and the values with what was worked
out by hand from the rows written (said beside each).  Every file case runs
twice, the lean way (numpy over the bytes) and the careful way (Python's
csv module), which must agree to the character and the span.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from portfolio.api import lint_text
from portfolio.diagnostics import Sink
from portfolio.model import Horizon
from portfolio.series import SeriesSpec, load_series
from portfolio.series import table as series_table
from portfolio.spans import Span

DECL = Span("plant.folio", 3, 1, 3, 40)
GAPS = Span("plant.folio", 3, 50, 3, 60)


def hz(start="2027-03-01T00:00", steps=4, hours=1.0, zone="UTC"):
    return Horizon(start=pd.Timestamp(start, tz=zone), steps=steps, step_hours=hours, zone=zone)


def load(tmp_path: Path, text: str, horizon: Horizon, monkeypatch, gaps=None, column="v"):
    """(values or None, [(code, line, col, message)]) the lean way, checked against the careful way."""
    path = tmp_path / "data.csv"
    path.write_bytes(text.encode())
    spec = SeriesSpec(name="s", quantity="price", span=DECL, path="data.csv", column=column,
                      gaps=gaps, gaps_span=GAPS if gaps else None)
    results = []
    for careful in (False, True):
        with monkeypatch.context() as m:
            if careful:
                m.setattr(series_table, "leanable", lambda data: False)
            sink = Sink()
            out = load_series([spec], horizon, tmp_path, sink)
        results.append((out["s"].values.tolist() if "s" in out else None,
                        [(d.code, d.span.line, d.span.col, d.message) for d in sink.items]))
    assert results[0] == results[1], "lean and careful readings differ"
    return results[0]


def rows(stamps, values, header="time,v"):
    return header + "\n" + "".join(f"{t},{v}\n" for t, v in zip(stamps, values))


HOURS = [f"2027-03-01T{h:02d}:00Z" for h in range(6)]

# --- rows with the wrong number of fields ------------------------------------------------
# (id, file text, column read, expected code, CSV line, column on that line, words in the message);
# the column is where the first field past the header's count starts, or just past a short row
SHAPES = [
    ("decimal-comma", "time,v\n2027-06-14T01:00Z,11\n2027-06-14T02:00Z,12,5\n2027-06-14T03:00Z,13\n",
     "v", "P413", 3, 22, "it looks like a decimal comma: 12,5? write 12.5"),
    ("negative-decimal-comma", "time,v\n2027-06-14T01:00Z,11\n2027-06-14T02:00Z,-3,25\n",
     "v", "P413", 3, 22, "decimal comma: -3,25? write -3.25"),
    ("extra-word", "time,v\n2027-06-14T01:00Z,11,spot\n2027-06-14T02:00Z,12\n",
     "v", "P413", 2, 22, "the extra field 'spot' would be dropped"),
    ("trailing-separator", "time,v\n2027-06-14T01:00Z,11\n2027-06-14T02:00Z,12,\n",
     "v", "P413", 3, 22, "a separator at the end of the row?"),
    ("semicolons", "time;v\n2027-06-14T01:00Z;11\n2027-06-14T02:00Z;12;5\n",
     "v", "P413", 3, 22, "decimal comma"),
    ("short-unread-column", "time,v,w\n2027-06-14T01:00Z,11,1\n2027-06-14T02:00Z,12\n",
     "v", "P414", 3, 21, "no cell for column 'w'"),
    ("short-two-columns", "time,v,w,x\n2027-06-14T01:00Z,11,1,1\n2027-06-14T02:00Z,12\n",
     "v", "P414", 3, 21, "no cell for columns 'w', 'x'"),
    # a short row without the cell read is the cell check's (P403), not reported twice
    ("short-read-column", "time,v,w\n2027-06-14T01:00Z,11,1\n2027-06-14T02:00Z\n",
     "w", "P403", 3, 18, "line 3 has no cell for column 'w'"),
]


@pytest.mark.parametrize("text, column, code, line, col, words", [c[1:] for c in SHAPES],
                         ids=[c[0] for c in SHAPES])
def test_misshapen_rows_are_named_by_line(tmp_path, monkeypatch, text, column, code, line, col, words):
    values, diagnostics = load(tmp_path, text, hz("2027-06-14T01:00", 1), monkeypatch, column=column)
    assert values is None
    assert [(c, ln, cl) for c, ln, cl, _ in diagnostics] == [(code, line, col)]
    assert words in diagnostics[0][3]
    if code != "P403":
        assert f"line {line} has" in diagnostics[0][3]


def test_a_quoted_file_counts_fields_as_csv_does(tmp_path, monkeypatch):
    # the quoted comma is inside a field: two fields on line 2, three on line 3
    text = 'time,v\n2027-06-14T01:00Z,"11"\n2027-06-14T02:00Z,"12",5\n'
    values, diagnostics = load(tmp_path, text, hz("2027-06-14T01:00", 1), monkeypatch)
    assert [(c, ln) for c, ln, *_ in diagnostics] == [("P413", 3)]


def test_many_misshapen_rows_give_a_few_then_a_count(tmp_path, monkeypatch):
    stamps = [f"2027-06-14T{h:02d}:00Z" for h in range(8)]
    text = "time,v\n" + "".join(f"{t},1,5\n" for t in stamps)
    _, diagnostics = load(tmp_path, text, hz("2027-06-14T00:00", 4), monkeypatch)
    assert [c for c, *_ in diagnostics] == ["P413"] * 3
    assert [ln for _, ln, *_ in diagnostics] == [2, 3, 4]


def test_a_well_shaped_file_with_a_header_trailing_separator_is_fine(tmp_path, monkeypatch):
    text = "time,v,\n" + "".join(f"{t},{k},\n" for k, t in enumerate(HOURS))
    values, diagnostics = load(tmp_path, text, hz(), monkeypatch)
    assert diagnostics == []
    assert values == [0.0, 1.0, 2.0, 3.0]       # the rows at 00:00 .. 03:00


# --- gaps ---------------------------------------------------------------------------------
# hourly 1, 2, (02:00 missing), 4, 5, 6: the 02:00 value held is 2, interpolated (2 + 4) / 2 = 3
MISSING_ONE = rows([HOURS[k] for k in (0, 1, 3, 4, 5)], [1, 2, 4, 5, 6])
# hourly 10, (01:00 and 02:00 missing), 40, 50: interpolated 20 and 30, held 10 and 10
MISSING_TWO = rows([HOURS[k] for k in (0, 3, 4, 5)], [10, 40, 50, 60])

FILLS = [
    ("one-hold", MISSING_ONE, "hold", hz(), [1, 2, 2, 4], 1),
    ("one-interpolate", MISSING_ONE, "interpolate", hz(), [1, 2, 3, 4], 1),
    ("two-hold", MISSING_TWO, "hold", hz(), [10, 10, 10, 40], 2),
    ("two-interpolate", MISSING_TWO, "interpolate", hz(), [10, 20, 30, 40], 2),
    # on half-hour steps: 10, 10, 20, 20, 30, 30, 40, 40 interpolated; hourly rows hold for an hour
    ("two-interpolate-half-hours", MISSING_TWO, "interpolate", hz(steps=8, hours=0.5),
     [10, 10, 20, 20, 30, 30, 40, 40], 2),
    # a two-hour step averages 10 and 20 (15), then 30 and 40 (35)
    ("two-interpolate-two-hours", MISSING_TWO, "interpolate", hz(steps=2, hours=2.0), [15, 35], 2),
    # only the stamps that hold inside the horizon (01:00..02:59) count: 01:00 and 02:00
    ("horizon-inside-the-gap", MISSING_TWO, "interpolate", hz("2027-03-01T01:00", 2), [20, 30], 2),
]


@pytest.mark.parametrize("text, how, horizon, expected, filled", [c[1:] for c in FILLS],
                         ids=[c[0] for c in FILLS])
def test_a_gap_is_an_error_unless_filled_as_said(tmp_path, monkeypatch, text, how, horizon,
                                                expected, filled):
    values, diagnostics = load(tmp_path, text, horizon, monkeypatch)
    assert values is None
    [(code, line, col, message)] = diagnostics
    assert code == "P415" and col == 1
    assert f"{filled} row{'s are' if filled > 1 else ' is'} missing" in message
    first = "2027-03-01T02:00" if text is MISSING_ONE else "2027-03-01T01:00"
    if horizon.start > pd.Timestamp(first, tz="UTC"):
        first = horizon.start.isoformat()[:16]
    assert f"the first at {first}" in message
    assert line == 4 if text is MISSING_ONE else line == 3      # the row after the gap

    values, diagnostics = load(tmp_path, text, horizon, monkeypatch, gaps=how)
    assert values == pytest.approx(expected)
    [(code, line, col, message)] = diagnostics
    assert (code, line, col) == ("P416", GAPS.line, GAPS.col)
    assert f"filled {filled} missing stamp" in message


def test_a_regular_file_without_gaps_says_nothing(tmp_path, monkeypatch):
    text = rows(HOURS, [3, 1, 4, 1, 5, 9])
    for gaps in (None, "hold", "interpolate"):
        values, diagnostics = load(tmp_path, text, hz(), monkeypatch, gaps=gaps)
        assert diagnostics == []
        assert values == [3, 1, 4, 1]


def test_a_gap_outside_the_horizon_is_not_reported(tmp_path, monkeypatch):
    # rows 00:00 .. 05:00 without 04:00; the horizon is 00:00 .. 03:00
    text = rows([HOURS[k] for k in (0, 1, 2, 3, 5)], [1, 2, 3, 4, 6])
    values, diagnostics = load(tmp_path, text, hz(), monkeypatch)
    assert (values, diagnostics) == ([1, 2, 3, 4], [])


def test_irregular_rows_are_not_gaps(tmp_path, monkeypatch):
    # spacings 40 and 50 minutes: no step of which every spacing is a multiple
    text = rows(["2027-03-01T00:00Z", "2027-03-01T00:40Z", "2027-03-01T01:30Z"], [0, 60, 30])
    values, diagnostics = load(tmp_path, text, hz(steps=2), monkeypatch)
    assert diagnostics == []
    assert values == pytest.approx([20, 45])    # docs/series.md's worked example


def test_fifteen_minute_data_with_a_missing_quarter(tmp_path, monkeypatch):
    stamps = pd.date_range("2027-03-01", periods=8, freq="15min", tz="UTC").strftime("%Y-%m-%dT%H:%MZ")
    keep = [0, 1, 2, 4, 5, 6, 7]                  # 00:45 missing
    text = rows([stamps[k] for k in keep], [0, 4, 8, 16, 20, 24, 28])
    values, diagnostics = load(tmp_path, text, hz(steps=2), monkeypatch, gaps="interpolate")
    # 00:45 interpolated 12: hours (0+4+8+12)/4 = 6 and (16+20+24+28)/4 = 22
    assert values == pytest.approx([6, 22])
    assert [c for c, *_ in diagnostics] == ["P416"]


# --- daylight saving days are not gaps ----------------------------------------------------
BERLIN = "Europe/Berlin"


def _day(start: str, periods: int, freq: str, form: str, zone: str):
    return [t.strftime(form) for t in pd.date_range(start, periods=periods, freq=freq, tz=zone)]


# (id, stamps, horizon) each a day of the zone's change written one way or another
DST = [
    # 23 local hours; the local clock jumps from 01:00 to 03:00 (no 02:00 row)
    ("spring-local", _day("2027-03-28", 24, "h", "%Y-%m-%dT%H:%M", BERLIN), hz("2027-03-28", 23, zone=BERLIN)),
    ("spring-offsets", _day("2027-03-28", 24, "h", "%Y-%m-%dT%H:%M%z", BERLIN),
     hz("2027-03-28", 23, zone=BERLIN)),
    ("spring-utc", [t.strftime("%Y-%m-%dT%H:%MZ") for t in
                    pd.date_range("2027-03-27T23:00", periods=24, freq="h", tz="UTC")],
     hz("2027-03-28", 23, zone=BERLIN)),
    # 25 local hours; local 02:00 twice, told apart by the offset
    ("autumn-offsets", _day("2027-10-31", 26, "h", "%Y-%m-%dT%H:%M%z", BERLIN),
     hz("2027-10-31", 25, zone=BERLIN)),
    ("autumn-utc", [t.strftime("%Y-%m-%dT%H:%MZ") for t in
                    pd.date_range("2027-10-30T22:00", periods=26, freq="h", tz="UTC")],
     hz("2027-10-31", 25, zone=BERLIN)),
    # daily rows at local midnight: 23 and 25 hours apart across the changes
    ("daily-local-spring", _day("2027-03-26", 5, "D", "%Y-%m-%dT%H:%M", BERLIN),
     hz("2027-03-26", 4, 24.0, BERLIN)),
    ("daily-local-autumn", _day("2027-10-29", 5, "D", "%Y-%m-%dT%H:%M", BERLIN),
     hz("2027-10-29", 4, 24.0, BERLIN)),
]


@pytest.mark.parametrize("stamps, horizon", [c[1:] for c in DST], ids=[c[0] for c in DST])
def test_a_daylight_saving_day_is_not_a_gap(tmp_path, monkeypatch, stamps, horizon):
    text = rows(stamps, range(len(stamps)))
    values, diagnostics = load(tmp_path, text, horizon, monkeypatch)
    assert diagnostics == []
    assert values is not None and len(values) == horizon.steps


def test_a_missing_day_across_a_clock_change_is_a_gap(tmp_path, monkeypatch):
    # daily local midnights 26, 27, (28 missing), 29, 30, 31 March: only the wall clock is regular
    stamps = [s for s in _day("2027-03-26", 6, "D", "%Y-%m-%dT%H:%M", BERLIN) if "03-28" not in s]
    values, diagnostics = load(tmp_path, rows(stamps, [1, 2, 4, 5, 6]),
                               hz("2027-03-26", 4, 24.0, BERLIN), monkeypatch)
    [(code, line, _, message)] = diagnostics
    assert (code, line) == ("P415", 4)
    assert "the first at 2027-03-28T00:00:00+01:00" in message
    values, _ = load(tmp_path, rows(stamps, [1, 2, 4, 5, 6]), hz("2027-03-26", 4, 24.0, BERLIN),
                     monkeypatch, gaps="interpolate")
    # 28 March 00:00+01 is interpolated in absolute time, 24 of the 47 hours from 27 March
    # 00:00+01 (value 2) to 29 March 00:00+02 (value 4): v = 2 + 2 * 24 / 47.  The third
    # horizon step lasts 24 h from 28 March 00:00+01: v for 23 h, then 4 from 29 March 00:00+02.
    v = 2 + 2 * 24 / 47
    assert values[2] == pytest.approx((23 * v + 4) / 24, rel=1e-12)


def test_a_missing_hour_on_a_clock_change_day_is_a_gap(tmp_path, monkeypatch):
    stamps = _day("2027-03-28", 24, "h", "%Y-%m-%dT%H:%M%z", BERLIN)
    del stamps[5]                               # 06:00+02:00 (local 02:00 never happens)
    values, diagnostics = load(tmp_path, rows(stamps, range(len(stamps))),
                               hz("2027-03-28", 23, zone=BERLIN), monkeypatch)
    [(code, line, _, message)] = diagnostics
    assert (code, line) == ("P415", 7)          # header, then rows 00, 01, 03, 04, 05 on lines 2..6
    assert "the first at 2027-03-28T06:00:00+02:00" in message


# --- the option in the language -----------------------------------------------------------
def test_the_option_is_read_from_the_language(tmp_path):
    (tmp_path / "p.csv").write_text(MISSING_TWO)
    folio = ('horizon start 2027-03-01T00:00 length 4 h step 1 h zone "UTC"\n'
             "connection grid { export max 10 MW import max 10 MW sell at 5 per MWh buy at 5 per MWh }\n"
             "site yard at grid { storage cells { kind battery energy 4 MWh charge max 2 MW "
             "discharge max 2 MW } }\n"
             'price spot from "p.csv" column "v" gaps {how}\n')
    for how, expected in (("hold", [10, 10, 10, 40]), ("interpolate", [10, 20, 30, 40])):
        result = lint_text(folio.replace("{how}", how), path=str(tmp_path / "p.folio"))
        assert [d.code for d in result.diagnostics] == ["P416"]
        assert result.diagnostics[0].span.line == 4
        assert result.portfolio.series["spot"].values.tolist() == expected
    result = lint_text(folio.replace(" gaps {how}", ""), path=str(tmp_path / "p.folio"))
    assert [d.code for d in result.diagnostics] == ["P415"]
    result = lint_text(folio.replace("{how}", "fill"), path=str(tmp_path / "p.folio"))
    assert [d.code for d in result.diagnostics] == ["P101"]
    result = lint_text(folio.replace("{how}", "hold gaps hold"), path=str(tmp_path / "p.folio"))
    assert "P203" in [d.code for d in result.diagnostics]
