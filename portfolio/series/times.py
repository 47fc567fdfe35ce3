"""Time parsing: a time column's ISO 8601 cells -> strictly increasing UTC nanoseconds.

P404 (unreadable), P405 (not increasing) and P406 (a local time the zone
skips or repeats) are reported here.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Optional

import numpy as np

from ..diagnostics import SeriesBadTime, SeriesDstGap, SeriesUnsorted, Sink
from . import fast
from .report import report_cells
from .table import Cells, Table


_TIME_EXAMPLES = "2027-03-01T00:00, 2027-03-01T00:00+01:00 or 2027-03-01T00:00Z"


_OFFSET = re.compile(r"^([+-])(\d{2})(?::?(\d{2}))?$")


_NAT = np.iinfo(np.int64).min             # pandas' NaT as int64


_TIME_CHUNK = 1 << 12                             # timestamps parsed at a time (str arrays)


@dataclass
class Times:
    ns: np.ndarray        # int64, UTC nanoseconds, strictly increasing
    hold: int             # how long the last row holds (median spacing), ns


def _split_offsets(cells, cuts: bool = False):
    """Split ISO 8601 texts into local part and UTC offset, vectorised.

    ``'2027-03-01T00:00+01:00'`` -> ``('2027-03-01T00:00', 60.0)``; a naive
    time has offset NaN.  Texts that cannot be timestamps (an offset that is
    no offset, a second offset, an offset on a bare date) get an empty local
    part, which the parser then reports as unreadable.  ``cuts``: also give
    where each offset starts and whether the text was put in upper case.
    """
    text = np.array(cells, dtype=str)            # a copy: changed below
    if not text.size:
        return text, np.zeros(0)
    low = (np.strings.find(text, "t") >= 0) | (np.strings.find(text, "z") >= 0)
    if low.any():
        text[low] = np.strings.upper(text[low])
    n = np.strings.str_len(text)
    sep_t, sep_s = np.strings.find(text, "T"), np.strings.find(text, " ")
    sep = np.where(sep_t >= 0, sep_t, sep_s)
    timed = sep >= 0
    zulu = np.strings.endswith(text, "Z")
    sign = np.maximum(np.strings.rfind(text, "+"), np.strings.rfind(text, "-"))
    cut = np.where(timed, np.where(zulu, n - 1, np.where(sign > sep, sign, n)), n)
    local = np.strings.slice(text, 0, cut)
    tail = np.strings.slice(text, cut, n)
    clock = np.strings.slice(local, np.where(timed, sep + 1, 0), None)
    stray = ((np.strings.find(clock, "Z") >= 0) | (np.strings.find(clock, "+") >= 0)
             | (timed & (np.strings.find(clock, "-") >= 0)))
    minutes = _tail_minutes(tail)
    bad = stray | np.isinf(minutes)
    local = np.strings.rstrip(local)
    local[bad] = ""
    minutes[bad] = np.nan
    return (local, minutes, cut, low) if cuts else (local, minutes)


def _tail_minutes(tail: np.ndarray) -> np.ndarray:
    """Offsets in minutes: NaN for no offset, inf for one that is no offset."""
    import pandas as pd

    codes, tails = pd.factorize(tail)
    table = np.array([np.nan if not t else
                      (np.inf if _offset_minutes(t) is None else _offset_minutes(t))
                      for t in (x.decode("ascii") if isinstance(x, bytes) else x for x in tails)],
                     dtype=float)
    return table[codes] if len(table) else np.full(len(tail), np.nan)


def _split_one_layout(part: np.ndarray):
    """:func:`_split_offsets` for lean cells (bytes) that all share one layout
    (the same length, digits in the same places, the same other characters),
    from the split of the first; ``None`` for any other slice."""
    if part.dtype.kind != "S" or not len(part):
        return None
    grid = part.view(np.uint8).reshape(len(part), part.dtype.itemsize)
    digit = (grid >= 48) & (grid <= 57)
    if not (digit == digit[0]).all():
        return None
    other = ~digit[0]
    if not (grid[:, other] == grid[0, other]).all():
        return None
    local0, _, cut, upper = _split_offsets(part[:1].astype("U"), cuts=True)
    if not local0[0]:
        return None                          # the general split says what is wrong
    text = np.strings.upper(part) if upper[0] else part
    local = np.strings.slice(text, 0, len(local0[0])).astype("U")
    minutes = _tail_minutes(np.strings.slice(text, int(cut[0]), None))
    bad = np.isinf(minutes)
    local[bad] = ""
    minutes[bad] = np.nan
    return local, minutes


def _offset_minutes(tail: str) -> Optional[int]:
    if tail == "Z":
        return 0
    m = _OFFSET.match(tail)
    if not m:
        return None
    hours, minutes = int(m.group(2)), int(m.group(3) or 0)
    if hours > 18 or minutes > 59:
        return None
    sign = -1 if m.group(1) == "-" else 1
    return sign * (hours * 60 + minutes)


def _parse_local(texts: np.ndarray) -> np.ndarray:
    """Naive ISO 8601 texts -> int64 ns (``_NAT`` where unreadable)."""
    import pandas as pd

    try:
        parsed = pd.DatetimeIndex(pd.to_datetime(texts, format="ISO8601", errors="coerce"))
        if parsed.tz is not None:
            raise ValueError("offset left in a local part")
        return parsed.as_unit("ns").asi8.copy()
    except (ValueError, TypeError, OverflowError):
        out = np.full(len(texts), _NAT, dtype=np.int64)
        for k, t in enumerate(texts):
            try:
                ts = pd.Timestamp(str(t)) if t else pd.NaT
            except (ValueError, TypeError, OverflowError):
                continue
            if ts is not pd.NaT and ts.tzinfo is None:
                out[k] = ts.as_unit("ns").value
        return out


def parse_times(table: Table, col: int, zone: str, users, sink: Sink) -> Optional[Times]:
    column, _ = table.column(col)
    name = table.header[col]
    n = len(column)
    local = np.full(n, _NAT, dtype=np.int64)      # naive local time; only the careful way sets it
    ns = np.zeros(n, dtype=np.int64)
    ok = np.zeros(n, dtype=bool)
    dst = np.zeros(n, dtype=bool)
    for k in range(0, n, _TIME_CHUNK):                # a slice at a time: the str arrays stay small
        part, cut = column[k:k + _TIME_CHUNK], slice(k, k + _TIME_CHUNK)
        quick = fast.times(part, zone)
        if quick is not None:
            ns[cut], ok[cut] = quick, True
        else:
            _careful_times(part, zone, local[cut], ns[cut], ok[cut], dst[cut])

    cells = Cells(table, col)
    unreadable = np.flatnonzero(~ok & ~dst)
    if unreadable.size:
        def message(row: int) -> str:
            cell, line = cells[row], table.lines[row]
            if cell is None:
                return f"line {line} has no cell for time column '{name}'"
            if cell == "":
                return f"empty timestamp in column '{name}' on line {line}"
            return (f"cannot read timestamp {cell!r} in column '{name}' on line {line} "
                    "as an ISO 8601 date and time")
        report_cells(SeriesBadTime, table, col, unreadable, message, users, sink,
                     extra=[f"timestamps look like {_TIME_EXAMPLES}"])
    gaps = np.flatnonzero(dst)
    if gaps.size:
        good_rows = np.flatnonzero(ok)
        import pandas as pd

        example = (pd.Timestamp(int(ns[good_rows[0]]), tz="UTC").tz_convert(zone)
                   .isoformat(timespec="minutes") if good_rows.size else "2027-03-01T00:00+01:00")
        _report_dst(table, col, cells, gaps, local[gaps], zone, example, users, sink)
    if unreadable.size or gaps.size:
        return None

    step = np.diff(ns)
    back = np.flatnonzero(step <= 0) + 1
    if back.size:
        def message(row: int) -> str:
            line, prev = table.lines[row], table.lines[row - 1]
            if ns[row] == ns[row - 1]:
                return (f"timestamp {cells[row]!r} on line {line} is the same time "
                        f"as {cells[row - 1]!r} on line {prev}")
            return (f"timestamp {cells[row]!r} on line {line} is earlier than "
                    f"{cells[row - 1]!r} on line {prev}")
        report_cells(SeriesUnsorted, table, col, back, message, users, sink,
                     extra=["timestamps must strictly increase down the file"])
        return None
    hold = int(round(float(np.median(step)))) if step.size else 0
    return Times(ns, hold)


def _careful_times(part: np.ndarray, zone: str, local: np.ndarray, ns: np.ndarray,
                   ok: np.ndarray, dst: np.ndarray) -> None:
    """One slice the careful way (offset split, pandas' ISO 8601 parse and its
    zone rules), written into the views ``local``, ``ns``, ``ok`` and ``dst``."""
    import pandas as pd

    texts, offset = (_split_one_layout(part) or _split_offsets(
        part.astype("U") if part.dtype.kind == "S" else part))
    local[:] = _parse_local(texts)
    readable = local != _NAT
    aware = readable & ~np.isnan(offset)
    naive = readable & np.isnan(offset)
    ok[:] = aware
    ns[aware] = local[aware] - (offset[aware] * 60e9).astype(np.int64)
    if naive.any():
        where = np.flatnonzero(naive)
        stamps = pd.DatetimeIndex(local[where].view("datetime64[ns]"))
        placed = stamps.tz_localize(zone, ambiguous="NaT", nonexistent="NaT")
        good = ~placed.isna()
        ns[where[good]] = placed.asi8[good]
        ok[where[good]] = True
        dst[where[~good]] = True


def _report_dst(table: Table, col: int, cells, rows: np.ndarray, local: np.ndarray,
                zone: str, example: str, users, sink: Sink) -> None:
    import pandas as pd

    idx = pd.DatetimeIndex(local.view("datetime64[ns]"))
    early = idx.tz_localize(zone, ambiguous=np.ones(len(idx), dtype=bool), nonexistent="NaT")
    late = idx.tz_localize(zone, ambiguous=np.zeros(len(idx), dtype=bool), nonexistent="NaT")
    advice = (f"timestamps without a UTC offset are read as local time in {zone}; "
              f"write each one with its UTC offset (like {example}) "
              "or in UTC with a trailing Z")
    kinds = {int(r): k for k, r in enumerate(rows)}

    def message(row: int) -> str:
        k, cell, line = kinds[row], cells[row], table.lines[row]
        if pd.isna(early[k]) or pd.isna(late[k]) or early[k] == late[k]:
            return (f"local time {cell!r} on line {line} does not exist in {zone}: "
                    "the clocks jump forward over it (daylight saving time starts)")
        return (f"local time {cell!r} on line {line} is ambiguous in {zone}: it happens "
                f"twice when the clocks go back ({early[k].isoformat()} "
                f"or {late[k].isoformat()})")

    report_cells(SeriesDstGap, table, col, rows, message, users, sink, extra=[advice])
