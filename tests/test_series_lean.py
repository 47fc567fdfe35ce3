"""The lean CSV reader of portfolio.series against the careful one.

A plain ASCII file without quotes is read the lean way (numpy finds lines
and separators, only the named columns are kept); anything else, and every
file here when ``_leanable`` is patched to say no, is read the careful way
(Python's csv module over every line).  Both must give the same series
values and the same diagnostics, to the character and the span.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from portfolio.series import table as series_table
from portfolio.diagnostics import Sink
from portfolio.model import Horizon
from portfolio.series import SeriesSpec, load_series
from portfolio.spans import Span

DECL = Span("plant.folio", 3, 1, 3, 40)
ODD = ["", " ", "nan", "inf", "-inf", "1e400", "12,5", "1.2.3", "0x10", "1_000", "+5", ".5",
       "5.", "-0", "1e-400", "oops", "2027-03-01T00:00", "\t7 "]
ODD_TIMES = ["", "2027-02-30T00:00", "2027-03-01T24:00", "2027-03-01T00:00+25:00", "20270301T0000",
             "2027-03-01", "2027-03-01 00:00:00", "2027-03-01t00:00z", "x"]


def run(path: Path, specs, hz, careful: bool, monkeypatch):
    with monkeypatch.context() as m:
        if careful:
            m.setattr(series_table, "leanable", lambda data: False)
        else:
            assert series_table.leanable(path.read_bytes()), "meant for the lean path"
        sink = Sink()
        out = load_series(specs, hz, path.parent, sink)
    return ({k: (s.values.tolist(), s.origin) for k, s in out.items()},
            [d.to_dict() for d in sink.items])


@st.composite
def plain_csv(draw):
    """(text, number of value columns) of a plain file, good cells mostly, odd ones sometimes."""
    ncols = draw(st.integers(1, 4))
    delim = draw(st.sampled_from([",", ";", "\t"]))
    end = draw(st.sampled_from(["\n", "\r\n", "\r"]))
    rows = draw(st.integers(1, 40))
    start = pd.Timestamp("2027-03-01T00:00", tz="UTC")
    lines = [delim.join(["time"] + [f"v{j}" for j in range(ncols)])]
    forms = ["%Y-%m-%dT%H:%MZ", "%Y-%m-%dT%H:%M+00:00", "%Y-%m-%d %H:%M:%S", "%Y%m%dT%H%M",
             "%Y-%m-%dT%H:%M%z", "%Y-%m-%dt%H:%M:%Sz", "%Y-%m-%d"]
    one_form = draw(st.sampled_from([None] + forms))     # one layout for all rows, most often
    for k in range(rows):
        ts = (start + pd.Timedelta(minutes=15 * k)).tz_convert(draw(st.sampled_from(
            ["UTC", "Europe/Berlin"])))
        t = ts.strftime(one_form or draw(st.sampled_from(forms)))
        if draw(st.integers(0, 30)) == 0:
            t = draw(st.sampled_from(ODD_TIMES))
        cells = [t]
        for _ in range(ncols):
            x = draw(st.floats(-1e6, 1e6, allow_nan=False))
            cell = draw(st.sampled_from([repr(x), f"{x:.3f}", f"{x:.6e}", str(int(x))]))
            if draw(st.integers(0, 30)) == 0:
                cell = draw(st.sampled_from(ODD))
            cells.append(" " * draw(st.integers(0, 1)) + cell)
        if draw(st.integers(0, 40)) == 0:
            cells = cells[:draw(st.integers(1, len(cells)))]          # a short row
        if draw(st.integers(0, 40)) == 0:
            cells.append(draw(st.sampled_from(["5", "", " x"])))      # a long row (P413)
        if k and draw(st.integers(0, 25)) == 0:
            continue                                                  # a missing row (P415)
        lines.append(delim.join(cells))
        if draw(st.integers(0, 20)) == 0:
            lines.append(draw(st.sampled_from(["", "  ", "\t"])))      # a blank line
    lead = draw(st.sampled_from(["", end, "  " + end]))
    return lead + end.join(lines) + draw(st.sampled_from(["", end])), ncols


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(plain_csv(), st.sampled_from(["UTC", "Europe/Berlin"]), st.sampled_from([None, "hold", "interpolate"]))
def test_lean_and_careful_readings_agree(tmp_path, monkeypatch, case, zone, gaps):
    text, ncols = case
    path = tmp_path / "data.csv"
    path.write_bytes(text.encode("ascii"))
    hz = Horizon(start=pd.Timestamp("2027-03-01T00:00", tz=zone), steps=2, step_hours=0.25, zone=zone)
    specs = [SeriesSpec(name=f"s{j}", quantity="power" if j % 2 else "price", span=DECL,
                        path="data.csv", column=f"v{j}", gaps=gaps if j % 2 else None,
                        gaps_span=DECL if gaps and j % 2 else None) for j in range(ncols)]
    specs.append(SeriesSpec(name="missing", quantity="price", span=DECL, path="data.csv",
                            column="nope"))
    lean = run(path, specs, hz, False, monkeypatch)
    careful = run(path, specs, hz, True, monkeypatch)
    assert lean == careful


def test_a_bad_cell_deep_in_a_year_is_reported_at_its_line_and_column(tmp_path, monkeypatch):
    rows = 35_040                       # a year of quarter-hours
    t = pd.date_range("2027-01-01", periods=rows, freq="15min", tz="UTC").strftime("%Y-%m-%dT%H:%MZ")
    values = np.round(np.arange(rows) * 0.01, 2)
    lines = ["time,a,b,c"] + [f"{t[k]},{values[k]},1.5,{values[k]}" for k in range(rows)]
    bad = 30_000                        # data row; file line bad + 2 (the header is line 1)
    lines[bad + 1] = f"{t[bad]},{values[bad]},1.5,  1.2.3"
    path = tmp_path / "year.csv"
    path.write_text("\n".join(lines) + "\n")
    hz = Horizon(start=pd.Timestamp("2027-01-01", tz="UTC"), steps=24, step_hours=1.0, zone="UTC")
    specs = [SeriesSpec(name="c", quantity="price", span=DECL, path="year.csv", column="c"),
             SeriesSpec(name="a", quantity="price", span=DECL, path="year.csv", column="a")]
    out, diagnostics = run(path, specs, hz, False, monkeypatch)
    assert list(out) == ["a"]
    [d] = diagnostics
    assert d["code"] == "P403"
    assert d["message"] == "'1.2.3' in column 'c' on line 30002 is not a number"
    # the cell starts after "<time>,<value>,1.5,  " on that line: columns are 1-based
    prefix = f"{t[bad]},{values[bad]},1.5,  "
    assert (d["line"], d["column"], d["end_line"], d["end_column"]) == (
        30002, len(prefix) + 1, 30002, len(prefix) + 6)
    assert (out, diagnostics) == run(path, specs, hz, True, monkeypatch)


def test_files_the_lean_way_does_not_read_are_left_to_the_careful_way():
    assert series_table.leanable(b"time,a\n2027-03-01T00:00Z,1\n")
    assert not series_table.leanable(b'time,"a, b"\n2027-03-01T00:00Z,1\n')     # quoted
    assert not series_table.leanable("time,\u00e9\n".encode())                   # not ASCII
    assert not series_table.leanable(b"time,a\n2027-03-01T00:00Z,1\x1c\n")       # str.strip whitespace
    assert not series_table.leanable(b"time,a\n" + b"1" * 200_000 + b"\n")       # past csv's field limit
