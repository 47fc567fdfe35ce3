"""The quick reading of series cells (numpy alone) against the careful one (pandas).

portfolio.series.fast reads a slice of timestamps or numbers without pandas
when every cell of it is plain; otherwise it says ``None`` and the careful
way reads the slice.  Here, on generated cells and files: wherever the quick
way answers, it gives what the careful way gives, to the bit; well-formed
slices are answered by it; and a well-formed file is loaded without touching
pandas at all.
"""

from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from portfolio.diagnostics import Sink
from portfolio.model import Horizon
from portfolio.series import SeriesSpec, fast, load_series
from portfolio.series import times as series_times
from portfolio.series.align import Grid
from portfolio.spans import Span

DECL = Span("plant.folio", 3, 1, 3, 40)
ROOT = Path(__file__).resolve().parents[1]


def careful_numbers(cells: np.ndarray) -> np.ndarray:
    return np.asarray(pd.to_numeric(cells.astype("U"), errors="coerce"), dtype=float)


def careful_times(cells: np.ndarray, zone: str):
    n = len(cells)
    local, ns = np.zeros(n, dtype=np.int64), np.zeros(n, dtype=np.int64)
    ok, dst = np.zeros(n, dtype=bool), np.zeros(n, dtype=bool)
    series_times._careful_times(cells, zone, local, ns, ok, dst)
    return ns, ok


# ---------------------------------------------------------------------------
# numbers
# ---------------------------------------------------------------------------

plain_number = st.builds(
    lambda sign, whole, frac, point: sign + whole + ("." + frac if point else ""),
    st.sampled_from(["", "-", "+"]), st.text("0123456789", min_size=1, max_size=8),
    st.text("0123456789", min_size=0, max_size=7), st.booleans())
odd_number = st.sampled_from(["", "nan", "inf", "-0", "-0.0", "+0", ".5", "5.", "-.5", "1e5", "1E-3",
                              "12,5", "1.2.3", "0x10", "1_000", "--1", "+-1", "-", ".",
                              "1234567890123456", "0.12345678901234567", "9" * 20, "\u0661"])


@settings(max_examples=300, deadline=None)
@given(st.lists(plain_number, min_size=1, max_size=30), st.lists(odd_number, max_size=3),
       st.randoms(use_true_random=False), st.sampled_from(["S", "U"]))
def test_quick_numbers_are_the_careful_numbers_or_none(plain, odd, rnd, kind):
    cells = plain + odd
    rnd.shuffle(cells)
    try:
        arr = np.array(cells, dtype=kind)
    except UnicodeEncodeError:
        arr = np.array(cells, dtype="U")
    quick = fast.numbers(arr)
    careful = careful_numbers(arr)
    if quick is not None:
        assert quick.dtype == np.float64
        assert np.array_equal(quick, careful)
        assert np.array_equal(np.signbit(quick), np.signbit(careful))
    if not odd and not any(c.lstrip("+-").strip("0.") == "" for c in plain):
        assert quick is not None, "plain decimals are for the quick way"


# ---------------------------------------------------------------------------
# timestamps
# ---------------------------------------------------------------------------

LAYOUTS = ["%Y-%m-%dT%H:%M", "%Y-%m-%dT%H:%M:%S", "%Y-%m-%d %H:%M", "%Y-%m-%d %H:%M:%S"]
TAILS = ["", "Z", "+HH:MM", "+HHMM", "+HH"]
ODD_TIMES = ["2027-02-30T00:00", "2027-02-29T00:00", "2028-02-29T00:00", "2027-03-01T24:00",
             "2027-03-01T23:60", "2027-03-01T24:30", "2027-03-01T00:00:60", "2027-13-01T00:00", "2027-00-10T00:00",
             "2027-03-00T00:00", "2027-03-01T00:00+19:00", "2027-03-01T00:00+01:60",
             "1600-03-01T00:00", "2300-03-01T00:00", "2027-03-01t00:00z", "20270301T0000",
             "2027-03-01", "2027-03-01T00:00Z+01:00", "2027-03-01T00:00+01:0", "2027/03/01T00:00", ""]


@st.composite
def stamp_column(draw):
    layout, tail = draw(st.sampled_from(LAYOUTS)), draw(st.sampled_from(TAILS))
    start = pd.Timestamp(draw(st.integers(-170 * 365, 180 * 365)) * 86400
                         + draw(st.integers(0, 86399)), unit="s")
    rows = draw(st.integers(1, 25))
    cells = []
    for k in range(rows):
        ts = start + pd.Timedelta(minutes=draw(st.integers(0, 10**6)))
        text = ts.strftime(layout)
        if tail == "Z":
            text += "Z"
        elif tail:
            h, m = draw(st.integers(0, 18)), draw(st.sampled_from([0, 30, 45, 59]))
            sign = draw(st.sampled_from("+-"))
            text += sign + {"+HH:MM": f"{h:02d}:{m:02d}", "+HHMM": f"{h:02d}{m:02d}",
                            "+HH": f"{h:02d}"}[tail]
        cells.append(text)
    mode = draw(st.sampled_from(["plain", "odd", "field"]))
    odd = draw(st.lists(st.sampled_from(ODD_TIMES), min_size=1, max_size=2)) if mode == "odd" else []
    for cell in odd:
        cells.insert(draw(st.integers(0, len(cells))), cell)
    if mode == "field":                               # one field out of range, in the same layout
        k = draw(st.integers(0, len(cells) - 1))
        fields = [(5, "13"), (5, "00"), (8, "32"), (8, "00"), (11, "24"), (14, "60")]
        fields += [(17, "60")] if layout.endswith("%S") else []
        base = len(pd.Timestamp(0).strftime(layout))
        fields += [(base + 1, "19")] if len(tail) > 1 else []
        fields += [(base + len(tail) - 2, "60")] if len(tail) > 3 else []
        fields += [(5, "02", 8, "30"), (5, "02", 8, "29")]
        pick = draw(st.sampled_from(fields))
        cell = cells[k]
        for at, text in zip(pick[::2], pick[1::2]):
            cell = cell[:at] + text + cell[at + 2:]
        odd = odd + [cell] if cell != cells[k] else odd
        cells[k] = cell
    return cells, bool(odd), tail


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(stamp_column(), st.sampled_from(["UTC", "Europe/Berlin"]), st.sampled_from(["S", "U"]))
def test_quick_timestamps_are_the_careful_ones_or_none(column, zone, kind):
    cells, odd, tail = column
    arr = np.array(cells, dtype=kind)
    quick = fast.times(arr, zone)
    ns, ok = careful_times(arr, zone)
    if quick is not None:
        assert ok.all(), "the quick way took a cell the careful way refuses"
        assert np.array_equal(quick, ns)
    if not odd and (tail or zone == "UTC"):
        assert quick is not None, "one plain layout is for the quick way"


def test_a_local_time_outside_utc_is_left_to_the_careful_way():
    assert fast.times(np.array([b"2027-03-28T02:30"]), "Europe/Berlin") is None
    assert fast.times(np.array([b"2027-03-28T02:30"]), "UTC") is not None


# ---------------------------------------------------------------------------
# whole files: the quick way on and off
# ---------------------------------------------------------------------------

@st.composite
def csv_file(draw):
    rows = draw(st.integers(2, 30))
    tail = draw(st.sampled_from(["", "Z", "+00:00", "+01:00"]))
    start = pd.Timestamp("2027-03-01T00:00")
    lines = ["time,v"]
    for k in range(rows):
        stamp = (start + pd.Timedelta(minutes=30 * k)).strftime("%Y-%m-%dT%H:%M") + tail
        value = draw(st.one_of(plain_number, odd_number) if draw(st.integers(0, 8)) == 0
                     else plain_number)
        lines.append(f"{stamp},{value}")
    if draw(st.integers(0, 6)) == 0:
        lines[draw(st.integers(1, rows))] = f"{draw(st.sampled_from(ODD_TIMES))},1"
    if rows > 3 and draw(st.integers(0, 3)) == 0:     # a gap: rows left out (P415, or filled)
        for _ in range(draw(st.integers(1, 2))):
            del lines[draw(st.integers(2, len(lines) - 2))]
    return "\n".join(lines) + "\n", tail


def _load(path: Path, zone: str, quantity: str, gaps=None):
    hz = Horizon(start=pd.Timestamp("2027-03-01T00:00", tz="UTC"), steps=4, step_hours=1.0,
                 zone=zone)
    sink = Sink()
    spec = SeriesSpec(name="s", quantity=quantity, span=DECL, path=path.name, column="v",
                      gaps=gaps, gaps_span=DECL if gaps else None)
    out = load_series([spec], hz, path.parent, sink)
    return ({k: (s.values.tolist(), s.origin) for k, s in out.items()},
            [d.to_dict() for d in sink.items])


@settings(max_examples=120, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(csv_file(), st.sampled_from(["UTC", "Europe/Berlin"]), st.sampled_from(["price", "power"]),
       st.sampled_from([None, "hold", "interpolate"]))
def test_files_load_the_same_with_and_without_the_quick_way(tmp_path, monkeypatch, case, zone, quantity,
                                                            gaps):
    text, _ = case
    path = tmp_path / "data.csv"
    path.write_text(text)
    quick = _load(path, zone, quantity, gaps)
    with monkeypatch.context() as m:
        m.setattr(fast, "times", lambda cells, zone: None)
        m.setattr(fast, "numbers", lambda cells: None)
        careful = _load(path, zone, quantity, gaps)
    assert quick == careful


@pytest.mark.parametrize("start", ["2027-03-01T00:00+00:00", "2027-06-14T00:00+01:00",
                                   "2027-10-31T01:30+01:00", "1999-12-31T23:59:59.123456789+05:30"])
@pytest.mark.parametrize("minutes", [1, 5, 7, 15, 20, 30, 60, 90, 1440])
def test_the_grid_is_the_one_pandas_gives(start, minutes):
    ts = pd.Timestamp(start).tz_convert("Europe/Lisbon")
    hz = Horizon(start=ts, steps=3, step_hours=minutes / 60, zone="Europe/Lisbon")
    grid = Grid.of(hz)
    assert grid.start == pd.Timestamp(start).tz_convert("UTC").value
    assert grid.step == pd.Timedelta(hours=minutes / 60).value


def test_a_well_formed_file_is_loaded_without_pandas(tmp_path):
    """pandas is replaced by an object that fails on any use, after the model is made."""
    lines = ["time,price,mw"] + [
        f"{(pd.Timestamp('2027-03-01') + pd.Timedelta(minutes=15 * k)).strftime('%Y-%m-%dT%H:%M')}"
        f"+00:00,{40 + k % 7}.25,{k % 5}" for k in range(200)]
    (tmp_path / "data.csv").write_text("\n".join(lines) + "\n")
    code = textwrap.dedent(f"""
        import sys
        import pandas as pd
        from portfolio.diagnostics import Sink
        from portfolio.model import Horizon
        from portfolio.series import SeriesSpec, load_series
        from portfolio.spans import Span
        hz = Horizon(start=pd.Timestamp("2027-03-01T00:00", tz="UTC"), steps=48, step_hours=0.5,
                     zone="UTC")
        class Poison:
            def __getattr__(self, name):
                raise AssertionError("pandas." + name + " used")
        for name in [m for m in sys.modules if m == "pandas" or m.startswith("pandas.")]:
            sys.modules[name] = Poison()
        span = Span("p.folio", 1, 1, 1, 2)
        specs = [SeriesSpec(name="p", quantity="price", span=span, path="data.csv", column="price"),
                 SeriesSpec(name="m", quantity="power", span=span, path="data.csv", column="mw",
                            factor=0.001)]
        sink = Sink()
        out = load_series(specs, hz, {str(tmp_path)!r}, sink)
        assert not sink.items, sink.items
        print(sorted(out), round(float(out["p"].values.sum()), 6))
    """)
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT)
    assert run.returncode == 0, run.stderr
    assert run.stdout.split()[:2] == ["['m',", "'p']"]
