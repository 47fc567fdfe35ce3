"""Gaps: rows missing from a regular series, an error unless the series says how to fill them.

A file is **regular** on a clock when every spacing between its rows is a
positive whole multiple of the smallest typical spacing (the lower median):
then a spacing of ``k`` such steps means ``k - 1`` rows are missing.  Two
clocks are asked: absolute time, and the wall clock of the horizon's zone
(when that zone is not UTC).  A spacing is a gap only on every clock the file
is regular on, so a daylight-saving day is never a gap: hourly rows keep one
hour of absolute time across it (the wall clock skips or repeats an hour),
and daily rows at local midnight keep one day of wall clock (the day lasts 23
or 25 hours).  A file regular on no clock (irregular rows) has no gaps.

Only missing rows that would hold inside the horizon count.  P415 (an
error) names the first missing stamp and how many there are; with
``gaps hold`` the previous row holds across a gap (the step function does
that by itself), with ``gaps interpolate`` the missing stamps get values on
the straight line between the rows either side; either way P416 (a warning)
says how many stamps were filled.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Optional, Tuple

import numpy as np

from ..diagnostics import SeriesGap, SeriesGapFilled, Sink
from .align import Grid, _duration
from .report import LISTED_MORE, declared
from .table import Table
from .times import Times

_UTC_ZONES = ("UTC", "Etc/UTC")


@dataclass(frozen=True)
class Gaps:
    after: np.ndarray       # row indices k with rows missing between row k and row k + 1
    stamps: np.ndarray      # int64 UTC ns of every missing stamp that holds inside the horizon
    owner: np.ndarray       # for each stamp, the row after which it is missing
    step: int               # the file's regular step on the clock that placed the stamps, ns

    @property
    def count(self) -> int:
        return int(self.stamps.size)


def _regular_step(ns: np.ndarray) -> Optional[int]:
    d = np.diff(ns)
    if d.size == 0 or (d <= 0).any():
        return None
    step = int(np.sort(d)[(d.size - 1) // 2])
    if step <= 0 or (d % step).any():
        return None
    return step


def _wall_clock(ns: np.ndarray, zone: str) -> Optional[np.ndarray]:
    """The rows' instants as naive wall-clock ns in ``zone``; ``None`` when not needed or unknown."""
    if zone in _UTC_ZONES:
        return None
    import pandas as pd

    try:
        return pd.DatetimeIndex(ns.view("datetime64[ns]"), tz="UTC").tz_convert(zone).tz_localize(None).asi8
    except Exception:           # an unknown zone is P305 in the checker
        return None


def _missing(ns: np.ndarray) -> Optional[Tuple[np.ndarray, int]]:
    step = _regular_step(ns)
    if step is None:
        return None
    return np.diff(ns) // step - 1, step


def find_gaps(t: Times, grid: Grid) -> Optional[Gaps]:
    """The gaps of a time column that matter on ``grid``; ``None`` when there are none."""
    ns = t.ns
    if len(ns) < 3:
        return None
    clocks = []
    m = _missing(ns)
    if m is not None:
        clocks.append((ns, m))
    wall = _wall_clock(ns, grid.zone)
    if wall is not None:
        m = _missing(wall)
        if m is not None:
            clocks.append((wall, m))
    if not clocks:
        return None
    count = np.min(np.stack([m[0] for _, m in clocks]), axis=0)
    after = np.flatnonzero(count > 0)
    if not after.size:
        return None
    # the stamps, placed on the first regular clock (absolute time when it is regular)
    clock, (_, step) = clocks[0]
    reps = count[after]
    owner = np.repeat(after, reps)
    j = np.concatenate([np.arange(1, r + 1) for r in reps]).astype(np.int64)
    placed = clock[owner] + j * step
    stamps = placed if clock is ns else _to_utc(placed, grid.zone)
    # a missing row would hold [stamp, next stamp); keep those that reach into the horizon
    ends = np.minimum(stamps + step, ns[owner + 1]) if clock is ns else ns[owner + 1]
    inside = (stamps < grid.end) & (ends > grid.start)
    if not inside.any():
        return None
    owner, stamps = owner[inside], stamps[inside]
    return Gaps(np.unique(owner), stamps, owner, step)


def _to_utc(wall: np.ndarray, zone: str) -> np.ndarray:
    import pandas as pd

    idx = pd.DatetimeIndex(wall.view("datetime64[ns]"))
    return idx.tz_localize(zone, ambiguous=np.ones(len(idx), dtype=bool),
                           nonexistent="shift_forward").tz_convert("UTC").asi8


def fill(gaps: Gaps, how: str, ns: np.ndarray, values: np.ndarray) -> Tuple[np.ndarray, np.ndarray]:
    """The rows with the gaps filled as ``how`` says ("hold" or "interpolate")."""
    if how == "hold":                    # the step function holds the previous row by itself
        return ns, values
    k = gaps.owner
    t0, t1 = ns[k].astype(float), ns[k + 1].astype(float)
    share = (gaps.stamps.astype(float) - t0) / (t1 - t0)
    added = values[k] + (values[k + 1] - values[k]) * share
    at = np.searchsorted(ns, gaps.stamps)
    return np.insert(ns, at, gaps.stamps), np.insert(values, at, added)


def report(gaps: Gaps, t: Times, table: Table, col: int, grid: Grid, users, sink: Sink) -> None:
    """P415 once for the specs ``users`` that say nothing about gaps."""
    first = int(gaps.after[0])
    line, prev = int(table.lines[first + 1]), int(table.lines[first])
    n = gaps.count
    notes = [f"line {line} follows line {prev} after "
             f"{_duration(int(t.ns[first + 1] - t.ns[first]))}, where the file's rows are "
             f"{_duration(gaps.step)} apart"]
    if gaps.after.size > 1:
        more = [int(table.lines[int(k) + 1]) for k in gaps.after[1:]]
        shown = ", ".join(str(x) for x in more[:LISTED_MORE])
        notes.append(f"and {len(more)} more gap{'s' if len(more) > 1 else ''} (before line"
                     f"{'s' if len(more) > 1 else ''} {shown}{', ...' if len(more) > LISTED_MORE else ''})")
    notes.append("fix: write the missing rows, or say how to fill them after the column: "
                 "'gaps hold' (the previous value holds) or 'gaps interpolate' "
                 "(a straight line between the rows either side)")
    names = ", ".join(f"'{s.name}'" for s in users)
    sink.add(SeriesGap, table.span(first + 1, col),
             f"series {names}: {n} row{'s are' if n != 1 else ' is'} missing in "
             f"{table.shown} inside the horizon, the first at {grid.show(int(gaps.stamps[0]))}",
             *notes, *(declared(s) for s in users))


def report_filled(gaps: Gaps, spec, table: Table, grid: Grid, sink: Sink) -> None:
    """P416 at the spec's gaps option: how many stamps were filled, and how."""
    n = gaps.count
    how = "holding the previous value" if spec.gaps == "hold" else "interpolating linearly"
    line = int(table.lines[int(gaps.after[0]) + 1])
    sink.add(SeriesGapFilled, spec.gaps_span or spec.span,
             f"series '{spec.name}': filled {n} missing stamp{'s' if n != 1 else ''} inside the "
             f"horizon by {how}, the first at {grid.show(int(gaps.stamps[0]))}",
             f"note: the first gap is before {table.shown}:{line}")
