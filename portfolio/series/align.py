"""Alignment to the horizon: the step edges, coverage (P407) and the time-weighted step average."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timezone

import numpy as np

from ..diagnostics import SeriesCoverage, Sink
from ..model import Horizon
from ..spans import NOWHERE, Span
from .spec import SeriesSpec
from .table import Table
from .times import Times


_INT64_MAX = np.iinfo(np.int64).max


@dataclass(frozen=True)
class Grid:
    start: int
    step: int
    steps: int
    zone: str
    span: Span

    @classmethod
    def of(cls, horizon: Horizon) -> "Grid":
        return cls(_utc_ns(horizon.start, horizon.zone), _step_ns(horizon.step_hours),
                   int(horizon.steps), horizon.zone, horizon.span)

    @property
    def end(self) -> int:
        return self.start + self.step * self.steps

    def show(self, ns: int) -> str:
        """A UTC-nanosecond instant as ISO 8601 in the horizon's zone."""
        import pandas as pd

        ts = pd.Timestamp(min(ns, _INT64_MAX), tz="UTC")
        try:
            ts = ts.tz_convert(self.zone)
        except Exception:       # the checker reports a bad zone (P305)
            pass
        return ts.isoformat()


_EPOCH = datetime(1970, 1, 1, tzinfo=timezone.utc)


def _utc_ns(start, zone: str) -> int:
    """An aware start as nanoseconds since the epoch (pandas' ``Timestamp.value``);
    a naive one is read in ``zone`` as pandas reads it."""
    if start.tzinfo is None:
        import pandas as pd

        return int(pd.Timestamp(start).tz_localize(zone).tz_convert("UTC").value)
    value = getattr(start, "value", None)              # a pandas Timestamp knows it
    if isinstance(value, int):
        return value
    delta = start - _EPOCH
    return (delta.days * 86400 + delta.seconds) * 10**9 + delta.microseconds * 1000


def _step_ns(hours: float) -> int:
    """``pd.Timedelta(hours=hours).value``, without pandas for a whole number of seconds."""
    seconds = hours * 3600
    if float(seconds).is_integer():
        return int(seconds) * 10**9
    import pandas as pd

    return int(pd.Timedelta(hours=hours).value)


def _duration(ns: int) -> str:
    """``5400e9`` -> ``'1 h 30 min'``."""
    ns = abs(int(ns))
    seconds, rest = divmod(ns, 10**9)
    days, seconds = divmod(seconds, 86400)
    hours, seconds = divmod(seconds, 3600)
    minutes, seconds = divmod(seconds, 60)
    parts = []
    if days:
        parts.append(f"{days} day" + ("s" if days != 1 else ""))
    if hours:
        parts.append(f"{hours} h")
    if minutes:
        parts.append(f"{minutes} min")
    if seconds or rest:
        parts.append(f"{seconds + rest / 1e9:g} s")
    return " ".join(parts) or "0 s"


def covers(spec: SeriesSpec, table: Table, t: Times, col: int, grid: Grid,
           sink: Sink) -> bool:
    first, last = int(t.ns[0]), int(t.ns[-1])
    until = last + t.hold
    short = []
    if first > grid.start:
        short.append(f"starts {_duration(first - grid.start)} after the horizon starts "
                     f"({grid.show(grid.start)})")
    if until < grid.end:
        short.append(f"ends {_duration(grid.end - until)} before the horizon ends "
                     f"({grid.show(grid.end)})")
    if not short:
        return True
    name = table.header[col]
    notes = [f"first timestamp: {grid.show(first)} ({table.shown}:{table.lines[0]})"]
    if len(t.ns) > 1:
        notes.append(f"last timestamp: {grid.show(last)} ({table.shown}:{table.lines[-1]}), "
                     f"held for the file's median spacing of {_duration(t.hold)} "
                     f"until {grid.show(until)}")
    else:
        notes.append("the file has a single data row, so there is no spacing to hold it for; "
                     "give at least two rows (or a constant)")
    if grid.span != NOWHERE:
        notes.append(f"horizon declared at {grid.span}")
    sink.add(SeriesCoverage, spec.span,
             f"series '{spec.name}' does not cover the horizon: it " + " and ".join(short),
             *notes, f"time column '{name}' of {table.shown}")
    return False


def step_average(ns: np.ndarray, values: np.ndarray, hold: int, grid: Grid) -> np.ndarray:
    """Time-weighted mean of the step function over every horizon step.

    Row ``k`` holds ``values[k]`` on ``[ns[k], ns[k+1])`` and the last row for
    ``hold``.  The data must cover the grid, and have been through
    :mod:`.gaps` (so a long spacing held here is one the file or its spec
    meant, never a hole filled silently).  Works on the cumulative
    integral: ``F(x)`` is piecewise linear through the row edges, so
    ``np.interp`` evaluates it exactly at the step edges.
    """
    n = len(ns)
    edges = np.empty(n + 1, dtype=np.int64)
    edges[:n] = ns
    edges[n] = min(int(ns[-1]) + hold, _INT64_MAX)
    lo = max(int(np.searchsorted(edges, grid.start, side="right")) - 1, 0)
    hi = min(int(np.searchsorted(edges, grid.end, side="left")), n)
    e = edges[lo:hi + 1]
    v = values[lo:hi]
    x = (e - grid.start).astype(float)                   # ns from the horizon start
    q = np.arange(grid.steps + 1, dtype=np.int64) * grid.step
    with np.errstate(all="ignore"):                      # huge values: caller checks finiteness
        integral = np.concatenate(([0.0], np.cumsum(v * np.diff(e).astype(float))))
        f = np.interp(q.astype(float), x, integral)
        return np.diff(f) / float(grid.step)
