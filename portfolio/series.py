"""Time series: load, check and resample onto the horizon.

The checker turns each series statement of a ``.folio`` file into a
:class:`SeriesSpec` and calls :func:`load_series`.  A spec takes its numbers
from a CSV file (a time column and a value column), from an inline list (one
number a step) or from a constant.  What comes back is one
:class:`portfolio.model.Series` per spec that loaded cleanly; every fault goes
to the :class:`~portfolio.diagnostics.Sink` as a P401-P410 diagnostic.

Rules (docs/series.md explains them for users):

* Timestamps are ISO 8601.  With a UTC offset or ``Z`` they are absolute;
  without one they are local time in the horizon's zone, and a local time
  that does not exist or happens twice there is an error (P406).
* Each row's value holds from its timestamp until the next row's; the last
  row holds for the file's median spacing.  A step's value is the
  time-weighted average of that step function over the step, computed on the
  cumulative integral (so hourly data on a 15-minute horizon is held, and
  5-minute data on an hourly horizon is averaged).
* The data must cover the horizon (P407).

Faults inside a CSV file point into that file (line = file line, the header
being line 1) and carry a note naming the series' declaration; faults of the
declaration itself point at the ``.folio`` file.

Nothing here prints, and bad user data never raises: a spec that breaks the
API contract (no source or several, unknown quantity) raises ``ValueError``.
"""

from __future__ import annotations

import csv
import difflib
import io
import re
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType
from typing import Dict, List, Optional, Sequence, Tuple

import numpy as np
import pandas as pd

from . import files
from . import units as U
from .diagnostics import (
    SeriesBadTime,
    SeriesBadValue,
    SeriesColumnMissing,
    SeriesCoverage,
    SeriesDstGap,
    SeriesEmpty,
    SeriesFileMissing,
    SeriesLength,
    SeriesImplausible,
    SeriesNegative,
    SeriesOutsideFolder,
    SeriesUnsorted,
    Sink,
)
from .model import Horizon, Series
from .spans import NOWHERE, Span

__all__ = ["SeriesSpec", "load_series", "QUANTITIES", "MAX_REPORTED"]

QUANTITIES = ("power", "price")

MAX_REPORTED = 3
"""Diagnostics given for one kind of cell fault in one column; the last one
given says how many more there are."""

_LISTED_MORE = 10          # line numbers listed in the "and N more" note
_TIME_EXAMPLES = "2027-03-01T00:00, 2027-03-01T00:00+01:00 or 2027-03-01T00:00Z"
_DECIMAL_COMMA = re.compile(r"^[+-]?\d+,\d+$")
_OFFSET = re.compile(r"^([+-])(\d{2})(?::?(\d{2}))?$")
_NAT = np.iinfo(np.int64).min             # pandas' NaT as int64
_INT64_MAX = np.iinfo(np.int64).max


@dataclass(frozen=True)
class SeriesSpec:
    """One series as declared, before loading (built by the checker)."""

    name: str                       # the series' name in the portfolio (e.g. "spot", "dune_pv")
    quantity: str                   # "power" (MW) or "price" (money per MWh)
    span: Span                      # the declaring statement
    path: Optional[str] = None      # CSV path as written in the file (relative to base_dir unless absolute)
    path_span: Optional[Span] = None
    column: Optional[str] = None
    column_span: Optional[Span] = None
    time_column: Optional[str] = None   # default: the first column of the file
    time_column_span: Optional[Span] = None
    values: Optional[tuple] = None      # inline list of numbers, one per step
    values_span: Optional[Span] = None
    constant: Optional[float] = None    # one value for every step
    factor: float = 1.0                 # multiply raw numbers by this to get MW or money per MWh


# ---------------------------------------------------------------------------
# entry point
# ---------------------------------------------------------------------------

def load_series(specs: Sequence[SeriesSpec], horizon: Horizon, base_dir: Path,
                sink: Sink, confine: bool = False) -> Dict[str, Series]:
    """Load every spec onto ``horizon``; faults go to ``sink``.

    Returns ``{name: Series}`` for the specs that loaded without error, in
    the order of ``specs``.  Each CSV file is read once however many specs
    name it.  ``confine``: read no file outside ``base_dir`` (P412).
    """
    base_dir = Path(base_dir)
    grid = _Grid.of(horizon)
    loaded: Dict[int, Series] = {}
    by_file: Dict[Path, List[Tuple[int, SeriesSpec]]] = {}
    for i, spec in enumerate(specs):
        _check_contract(spec)
        if spec.path is not None:
            why = files.outside(base_dir, spec.path) if confine else None
            if why is not None:
                sink.add(SeriesOutsideFolder, spec.path_span or spec.span,
                         f"series '{spec.name}': '{spec.path}' is not read in confined mode: {why}",
                         "note: put the file in the portfolio's folder (or below it) and name it "
                         "relative to that folder")
                continue
            by_file.setdefault(_resolve(base_dir, spec.path), []).append((i, spec))
        elif spec.values is not None:
            s = _load_inline(spec, grid, sink)
            if s is not None:
                loaded[i] = s
        else:
            s = _load_constant(spec, grid, sink)
            if s is not None:
                loaded[i] = s
    for resolved, group in by_file.items():
        shown = _display_path(base_dir, group[0][1].path)
        loaded.update(_load_file(resolved, shown, group, grid, sink))
    return {specs[i].name: loaded[i] for i in sorted(loaded)}


def _check_contract(spec: SeriesSpec) -> None:
    sources = [spec.path is not None, spec.values is not None, spec.constant is not None]
    if sum(sources) != 1:
        raise ValueError(f"series spec {spec.name!r} needs exactly one of path, values, constant")
    if spec.quantity not in QUANTITIES:
        raise ValueError(f"series spec {spec.name!r}: quantity must be one of {QUANTITIES}")


def _resolve(base_dir: Path, path: str) -> Path:
    p = Path(path).expanduser()
    if not p.is_absolute():
        p = base_dir / p
    try:
        return p.resolve()
    except (OSError, RuntimeError):
        return p.absolute()


def _display_path(base_dir: Path, path: str) -> str:
    """The CSV's path as written, joined to ``base_dir`` (as the user gave it)."""
    return str(base_dir / Path(path))


def _declared(spec: SeriesSpec) -> str:
    return f"series '{spec.name}' declared at {spec.span}"


def _spans_of(spec: SeriesSpec) -> MappingProxyType:
    fields = {"path": spec.path_span, "column": spec.column_span,
              "time_column": spec.time_column_span, "values": spec.values_span}
    return MappingProxyType({k: v for k, v in fields.items() if v is not None})


def _make_series(spec: SeriesSpec, values: np.ndarray, origin: str,
                 source: Optional[Path] = None) -> Series:
    if spec.factor != 1.0:
        origin += f" scaled by {spec.factor:g}"
    return Series(name=spec.name, span=spec.span, spans=_spans_of(spec),
                  values=np.asarray(values, dtype=float), quantity=spec.quantity,
                  origin=origin, source=str(source) if source is not None else None)


# ---------------------------------------------------------------------------
# the horizon's step edges, in integer nanoseconds since the epoch (UTC)
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class _Grid:
    start: int
    step: int
    steps: int
    zone: str
    span: Span

    @classmethod
    def of(cls, horizon: Horizon) -> "_Grid":
        start = pd.Timestamp(horizon.start)
        if start.tzinfo is None:
            start = start.tz_localize(horizon.zone)
        step = pd.Timedelta(hours=horizon.step_hours).value
        return cls(int(start.tz_convert("UTC").value), int(step), int(horizon.steps),
                   horizon.zone, horizon.span)

    @property
    def end(self) -> int:
        return self.start + self.step * self.steps

    def show(self, ns: int) -> str:
        """A UTC-nanosecond instant as ISO 8601 in the horizon's zone."""
        ts = pd.Timestamp(min(ns, _INT64_MAX), tz="UTC")
        try:
            ts = ts.tz_convert(self.zone)
        except Exception:       # the checker reports a bad zone (P305)
            pass
        return ts.isoformat()


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


# ---------------------------------------------------------------------------
# inline lists and constants
# ---------------------------------------------------------------------------

def _load_inline(spec: SeriesSpec, grid: _Grid, sink: Sink) -> Optional[Series]:
    where = spec.values_span or spec.span
    raw = tuple(spec.values)
    if len(raw) != grid.steps:
        sink.add(SeriesLength, where,
                 f"series '{spec.name}' lists {len(raw)} value{'s' if len(raw) != 1 else ''} "
                 f"but the horizon has {grid.steps} step{'s' if grid.steps != 1 else ''}",
                 "an inline list needs exactly one value per step; "
                 "for longer data use a CSV file")
        return None
    values = np.full(len(raw), np.nan)
    bad = []
    for k, x in enumerate(raw):
        try:
            values[k] = float(x)
        except (TypeError, ValueError, OverflowError):
            pass
        if not np.isfinite(values[k]):
            bad.append(k)
    if bad:
        listed = ", ".join(str(k + 1) for k in bad[:_LISTED_MORE])
        sink.add(SeriesBadValue, where,
                 f"series '{spec.name}': list entr{'ies' if len(bad) > 1 else 'y'} {listed} "
                 f"{'are' if len(bad) > 1 else 'is'} not a finite number")
        return None
    with np.errstate(all="ignore"):
        values = values * spec.factor
    if not np.isfinite(values).all():
        sink.add(SeriesBadValue, where, f"series '{spec.name}': the list's values are too large")
        return None
    if _implausible_in_values(spec, values, "list entry", where, sink):
        return None
    if spec.quantity == "power":
        neg = np.flatnonzero(values < 0)
        if neg.size:
            k = int(neg[0])
            sink.add(SeriesNegative, where,
                     f"power series '{spec.name}' has a negative value "
                     f"({raw[k]!r}, entry {k + 1} of the list)",
                     *_negative_notes(neg.size - 1, "entries", []))
            return None
    return _make_series(spec, values, f"inline list of {len(raw)} values")


def _load_constant(spec: SeriesSpec, grid: _Grid, sink: Sink) -> Optional[Series]:
    try:
        value = float(spec.constant)
    except (TypeError, ValueError, OverflowError):
        value = float("nan")
    if not np.isfinite(value):
        sink.add(SeriesBadValue, spec.span,
                 f"series '{spec.name}': {spec.constant!r} is not a finite number")
        return None
    value *= spec.factor
    if _implausible_in_values(spec, np.array([value]), "the constant, value", spec.span, sink):
        return None
    if spec.quantity == "power" and value < 0:
        sink.add(SeriesNegative, spec.span,
                 f"power series '{spec.name}' is negative ({spec.constant!r})",
                 *_negative_notes(0, "", []))
        return None
    return _make_series(spec, np.full(grid.steps, value), f"constant {spec.constant:g}")


def _negative_notes(more: int, what: str, lines: List[int]) -> Tuple[str, ...]:
    notes = ["a power profile gives MW available or needed and cannot be negative; "
             "the direction comes from how the series is used (inflow or demand)"]
    if more > 0:
        notes.insert(0, _more_note(more, what, lines))
    return tuple(notes)


def _more_note(more: int, what: str, lines: List[int]) -> str:
    text = f"and {more} more {what}".rstrip()
    if lines:
        shown = ", ".join(str(n) for n in lines[:_LISTED_MORE])
        tail = ", ..." if len(lines) > _LISTED_MORE else ""
        text += f" (line{'s' if len(lines) > 1 else ''} {shown}{tail})"
    return text


# ---------------------------------------------------------------------------
# CSV files
# ---------------------------------------------------------------------------

class _Unreadable(Exception):
    """A series file cannot be read; the message says why."""


@dataclass
class _Table:
    """A CSV file's header, and its data rows read on request.

    Two ways of reading give the same cells.  The careful way runs Python's
    ``csv`` module over every line (any quoting).  The lean way, for a file
    of plain ASCII without quotes, finds lines and separators in the bytes
    with numpy and keeps only the columns asked for (:meth:`keep`); the
    careful records are made from the text only when a fault is reported.
    """

    shown: str                 # path for spans and messages
    delimiter: str
    header: List[str]          # stripped header cells
    header_line: int
    lines: Optional[Sequence[int]]   # file line of each data record (blank lines dropped); lean: set by keep
    data: bytes = b""          # the file's bytes
    lean: bool = False
    _records: Optional[List[List[str]]] = None
    _raw: Optional[List[str]] = None
    _columns: Optional[Dict[int, Tuple[np.ndarray, np.ndarray]]] = None

    @property
    def text(self) -> str:
        return self.data.decode("utf-8-sig")

    @property
    def raw(self) -> List[str]:
        """Every physical line of the file."""
        if self._raw is None:
            self._raw = list(io.StringIO(self.text, newline=""))
        return self._raw

    @property
    def rows(self) -> List[List[str]]:
        """Data records as lists of cells (made from the text when first asked in lean mode)."""
        if self._records is None:
            parsed = _parse_records(self.raw, self.delimiter, '"' in self.text)
            self._records = parsed[2]
        return self._records

    def __len__(self) -> int:
        if self.lines is None:
            self.keep([])
        return len(self.lines)

    def span(self, row: int, col: int) -> Span:
        """Span of one cell: its file line and, when easy, its columns."""
        line = int(self.lines[row]) if row >= 0 else self.header_line
        text = self.raw[line - 1].rstrip("\r\n") if line - 1 < len(self.raw) else ""
        record = self.rows[row] if row >= 0 else self.header
        if '"' not in text:                  # unquoted: the record is this one line
            fields = text.split(self.delimiter)
            if col < len(fields):
                start = sum(len(f) + 1 for f in fields[:col])
                cell = fields[col]
                lead = len(cell) - len(cell.lstrip())
                c0 = start + lead + 1
                return Span(self.shown, line, c0, line, c0 + len(cell.strip()))
            if len(record) <= col:           # a short row: point past its end
                return Span(self.shown, line, len(text) + 1, line, len(text) + 1)
        return Span(self.shown, line, 1, line, len(text) + 1)

    def keep(self, cols: Sequence[int]) -> None:
        """Read the columns ``cols`` (lean mode; the careful mode has them all)."""
        if self.lean and (self._columns is None or not set(cols) <= set(self._columns)):
            found = _lean_columns(self.data, self.delimiter, self.header_line, sorted(set(cols)))
            self.lines = found.pop("lines")
            self._columns = found

    def column(self, col: int) -> Tuple[np.ndarray, np.ndarray]:
        """Stripped cells of one column as a bytes or str array ('' where a row
        is too short), and the mask of the rows too short to have it."""
        if self._columns is not None and col in self._columns:
            return self._columns[col]
        rows = self.rows
        missing = np.fromiter((col >= len(r) for r in rows), dtype=bool, count=len(rows))
        texts = np.array([r[col].strip() if col < len(r) else "" for r in rows], dtype=str)
        return texts, missing

    def cell(self, row: int, col: int) -> Optional[str]:
        """One stripped cell; ``None`` where the row is too short."""
        if self._columns is not None and col in self._columns:
            texts, missing = self._columns[col]
            return None if missing[row] else texts[row].decode("ascii")
        r = self.rows[row]
        return r[col].strip() if col < len(r) else None


# a quote, NUL, and whitespace to str.strip that bytes.strip keeps: the careful way reads these
_NOT_LEAN = (b'"', b"\x00", b"\x1c", b"\x1d", b"\x1e", b"\x1f")
_CHUNK = 1 << 14                                  # numbers parsed at a time
_TIME_CHUNK = 1 << 12                             # timestamps parsed at a time (str arrays)
_BLOCK = 1 << 18                                  # bytes scanned at a time by the lean reader
_WIDE = 64                                        # wider cells are cut out one by one


def _read_table(resolved: Path, shown: str) -> _Table:
    """Read one CSV file; raise :class:`_Unreadable` when it cannot be read."""
    try:
        data = files.read_bytes(resolved)
    except files.InputError as e:
        raise _Unreadable(str(e)) from None
    except FileNotFoundError:
        raise _Unreadable("no such file") from None
    except IsADirectoryError:
        raise _Unreadable("it is a directory, not a file") from None
    except PermissionError:
        raise _Unreadable("permission denied") from None
    except OSError as e:
        raise _Unreadable(e.strerror or str(e)) from None
    if _leanable(data):
        return _lean_table(data, shown)
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as e:
        line = data.count(b"\n", 0, e.start) + 1
        raise _Unreadable(f"it is not UTF-8 text (byte 0x{data[e.start]:02x} on line {line})") from None
    if "\x00" in text:
        raise _Unreadable("it contains NUL bytes (is it a binary file?)")
    raw = list(io.StringIO(text, newline=""))
    delimiter = _sniff_delimiter(raw)
    header, header_line, rows, lines = _parse_records(raw, delimiter, '"' in text)
    if not header:
        return _Table(shown, delimiter, [], 1, [], data, _records=[], _raw=raw)
    return _Table(shown, delimiter, header, header_line, lines, data, _records=rows, _raw=raw)


def _parse_records(raw: List[str], delimiter: str, quoted: bool):
    """The careful reading: (header, its line, data records, their lines)."""
    reader = csv.reader(raw, delimiter=delimiter, skipinitialspace=True, strict=False)
    try:
        if not quoted:
            # no quoting: record k is physical line k + 1 (csv gives [] for a blank line)
            records = list(reader)
            starts = range(1, len(records) + 1)
        else:
            records, starts, previous = [], [], 0
            for record in reader:
                records.append(record)
                starts.append(previous + 1)
                previous = reader.line_num
    except csv.Error as e:
        raise _Unreadable(f"it is not valid CSV near line {reader.line_num}: {e}") from None
    kept = [k for k, r in enumerate(records) if r and (len(r) > 1 or r[0].strip())]
    if not kept:
        return [], 1, [], []
    first = kept[0]
    header = [c.strip() for c in records[first]]
    return (header, starts[first], [records[k] for k in kept[1:]],
            [starts[k] for k in kept[1:]])


def _leanable(data: bytes) -> bool:
    """Plain ASCII without quotes, NULs or odd whitespace, no line past the csv field limit."""
    if not data.isascii() or any(c in data for c in _NOT_LEAN):
        return False
    limit, b = csv.field_size_limit(), np.frombuffer(data, dtype=np.uint8)
    last = -1                                        # the last line end seen
    for pos in range(0, len(b), _BLOCK):             # a block at a time: small masks
        part = b[pos:pos + _BLOCK]
        ends = np.flatnonzero((part == 10) | (part == 13)) + pos
        if np.diff(ends, prepend=last).max(initial=0) > limit:
            return False
        last = int(ends[-1]) if ends.size else last
    return len(b) - last <= limit


def _lines_of(b: np.ndarray, base: int) -> Tuple[np.ndarray, np.ndarray]:
    """Starts and content ends (exclusive) of the physical lines in ``b`` as
    ``io.StringIO(newline="")`` splits them (at \\n, \\r\\n or a lone \\r)."""
    n = len(b)
    nl = np.flatnonzero(b == 10)
    cr = np.flatnonzero(b == 13)
    nxt = cr + 1
    lone = cr[(nxt >= n) | (b[np.minimum(nxt, n - 1)] != 10)] if cr.size else cr
    terms = np.sort(np.concatenate((nl, lone)))
    starts = np.concatenate(([0], terms + 1))
    ends = np.concatenate((terms, [n]))
    if starts[-1] >= n:                       # the file ends with a line end
        starts, ends = starts[:-1], ends[:-1]
    crlf = (ends < n) & (b[np.minimum(ends, n - 1)] == 10) & (ends > starts)
    crlf &= b[np.maximum(ends - 1, 0)] == 13
    ends = ends - crlf
    return starts + base, ends + base


def _lean_table(data: bytes, shown: str) -> _Table:
    """Header of a plain file; the data rows wait for :meth:`_Table.keep`."""
    size, n = 1 << 16, len(data)
    while True:
        lines = list(io.StringIO(data[:size].decode("ascii"), newline=""))
        hit = next((k for k, ln in enumerate(lines) if ln.strip()), None)
        if size >= n or (hit is not None and hit < len(lines) - 1):
            break
        size *= 4
    if hit is None:
        return _Table(shown, ",", [], 1, [], data, lean=True, _records=[])
    first = lines[hit]
    delimiter = next((d for d in (",", ";", "\t") if d in first), ",")
    header = [c.strip() for c in first.rstrip("\r\n").split(delimiter)]
    return _Table(shown, delimiter, header, hit + 1, None, data, lean=True)


def _lean_columns(data: bytes, delimiter: str, header_line: int, cols: List[int]) -> dict:
    """Cells of columns ``cols`` of the data rows after the header, block by block."""
    b = np.frombuffer(data, dtype=np.uint8)
    d = ord(delimiter)
    out_lines, parts = [], {c: ([], []) for c in cols}
    line_no, pos, n = 0, 0, len(b)
    while pos < n:
        cut = data.rfind(b"\n", pos, pos + _BLOCK) + 1
        if cut <= pos:
            cut = data.rfind(b"\r", pos, pos + _BLOCK) + 1
        if cut <= pos or pos + _BLOCK >= n:
            cut = n
        block = b[pos:cut]
        starts, ends = _lines_of(block, 0)
        numbers = np.arange(line_no + 1, line_no + 1 + len(starts))
        line_no += len(starts)
        dpos = np.flatnonzero(block == d)
        first = np.searchsorted(dpos, starts)
        count = np.searchsorted(dpos, ends) - first
        after = numbers > header_line
        plain = after & (count == 0)
        if plain.any():                       # a line without separators is kept unless blank
            blank = np.array([not data[pos + s:pos + e].strip()
                              for s, e in zip(starts[plain], ends[plain])], dtype=bool)
            idx = np.flatnonzero(plain)[blank]
            after[idx] = False
        keep = np.flatnonzero(after)
        out_lines.append(numbers[keep])
        starts, ends, first, count = starts[keep], ends[keep], first[keep], count[keep]
        for c in cols:
            has = count >= c
            lo = starts.copy() if c == 0 else np.where(has, dpos[np.minimum(first + c - 1, len(dpos) - 1)] + 1 if len(dpos) else starts, starts)
            hi = np.where(count > c, dpos[np.minimum(first + c, len(dpos) - 1)] if len(dpos) else ends, ends)
            hi = np.where(has, hi, lo)
            parts[c][0].append(_cut_cells(block, lo, hi))
            parts[c][1].append(~has)
        pos = cut
    result: dict = {"lines": np.concatenate(out_lines) if out_lines else np.zeros(0, dtype=np.int64)}
    for c in cols:
        texts = [t for t in parts[c][0]]
        width = max((t.dtype.itemsize for t in texts), default=1)
        joined = np.concatenate([t.astype(f"S{width}") for t in texts]) if texts else np.zeros(0, "S1")
        result[c] = (joined, np.concatenate(parts[c][1]) if texts else np.zeros(0, bool))
    return result


class _Cells:
    """``cells[row]``: one stripped cell of a column, ``None`` where the row is too short."""

    def __init__(self, table: _Table, col: int):
        self.table, self.col = table, col

    def __getitem__(self, row) -> Optional[str]:
        return self.table.cell(int(row), self.col)


def _cut_cells(block: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """The stripped byte strings ``block[lo:hi]``, as one fixed-width bytes array."""
    size = hi - lo
    width = int(size.max()) if size.size else 0
    if width == 0:
        return np.zeros(len(lo), dtype="S1")
    if width > _WIDE:
        raw = block.tobytes()
        cells = np.array([raw[a:z] for a, z in zip(lo.tolist(), hi.tolist())], dtype=f"S{width}")
    else:
        offs = np.arange(width, dtype=np.int32)
        idx = lo.astype(np.int32)[:, None] + offs
        np.minimum(idx, len(block) - 1, out=idx)
        grid = block[idx]
        del idx
        grid[offs >= size[:, None]] = 0
        cells = np.ascontiguousarray(grid).view(f"S{width}").ravel()
    return np.strings.strip(cells)


def _sniff_delimiter(raw: List[str]) -> str:
    """Comma, unless the header line has none and has semicolons or tabs."""
    first = next((ln for ln in raw if ln.strip()), "")
    for d in (",", ";", "\t"):
        if d in first:
            return d
    return ","


def _find_column(table: _Table, wanted: Optional[str], role: str,
                 default: Optional[int]) -> Tuple[Optional[int], str]:
    """Index of a column, or ``None`` and the reason."""
    header = table.header
    if wanted is None:
        if default is not None and default < len(header):
            return default, ""
        return None, f"the file has no {role} column to take by default; name one"
    hits = [i for i, h in enumerate(header) if h == wanted]
    if len(hits) == 1:
        return hits[0], ""
    if len(hits) > 1:
        where = ", ".join(str(i + 1) for i in hits)
        return None, f"column '{wanted}' appears {len(hits)} times in the header (positions {where})"
    return None, f"no column '{wanted}' in {table.shown}"


def _column_notes(table: _Table, wanted: Optional[str]) -> List[str]:
    header = table.header
    notes = ["columns in the file: " + ", ".join(f"'{h}'" for h in header)]
    if wanted is not None:
        folded = [h for h in header if h.casefold() == wanted.casefold()]
        close = folded or difflib.get_close_matches(wanted, header, n=1, cutoff=0.6)
        if close:
            notes.insert(0, f"did you mean '{close[0]}'?")
    if header and _looks_like_time(header[0]):
        notes.append(f"the first line ({table.shown}:{table.header_line}) looks like data: "
                     "the file needs a header row naming its columns")
    return notes


def _looks_like_time(text: str) -> bool:
    if not re.match(r"^\d{4}-?\d{2}-?\d{2}", text):
        return False
    return not pd.isna(pd.to_datetime(text, format="ISO8601", errors="coerce", utc=True))


@dataclass
class _Times:
    ns: np.ndarray        # int64, UTC nanoseconds, strictly increasing
    hold: int             # how long the last row holds (median spacing), ns


def _load_file(resolved: Path, shown: str, group: List[Tuple[int, SeriesSpec]],
               grid: _Grid, sink: Sink) -> Dict[int, Series]:
    try:
        table = _read_table(resolved, shown)
    except _Unreadable as e:
        for _, spec in group:
            sink.add(SeriesFileMissing, spec.path_span or spec.span,
                     f"series '{spec.name}': cannot read file '{spec.path}': {e}",
                     f"looked for {resolved}")
        return {}
    specs = [spec for _, spec in group]
    if table.header:                     # read only the columns the specs can name, at once
        found = [_find_column(table, spec.time_column, "time", 0)[0] for _, spec in group]
        for (_, spec), t_idx in zip(group, found):
            others = [j for j in range(len(table.header)) if j != (t_idx or 0)]
            found.append(_find_column(table, spec.column, "value",
                                      others[0] if len(others) == 1 else None)[0])
        table.keep([c for c in found if c is not None])
    if not len(table):
        what = "is empty" if not table.header else "has a header but no data rows"
        sink.add(SeriesEmpty, Span(shown, table.header_line, 1, table.header_line, 1),
                 f"series file {shown} {what}", *(_declared(s) for s in specs))
        return {}

    # columns: (time index, value index) per spec; P402 for the rest
    wanted: List[Tuple[int, SeriesSpec, int, int]] = []
    for i, spec in group:
        t_idx, t_why = _find_column(table, spec.time_column, "time", 0)
        ok = True
        if t_idx is None:
            sink.add(SeriesColumnMissing, spec.time_column_span or spec.path_span or spec.span,
                     f"series '{spec.name}': {t_why}", *_column_notes(table, spec.time_column))
            ok = False
        others = [j for j in range(len(table.header)) if j != (t_idx if t_idx is not None else 0)]
        v_idx, v_why = _find_column(table, spec.column, "value",
                                    others[0] if len(others) == 1 else None)
        if v_idx is None:
            sink.add(SeriesColumnMissing, spec.column_span or spec.path_span or spec.span,
                     f"series '{spec.name}': {v_why}", *_column_notes(table, spec.column))
            ok = False
        if ok:
            wanted.append((i, spec, t_idx, v_idx))
    if not wanted:
        return {}

    times: Dict[int, Optional[_Times]] = {}
    for t_idx in dict.fromkeys(t for _, _, t, _ in wanted):
        users = [s for _, s, t, _ in wanted if t == t_idx]
        times[t_idx] = _parse_times(table, t_idx, grid.zone, users, sink)
    numbers: Dict[int, Optional[np.ndarray]] = {}
    for v_idx in dict.fromkeys(v for _, _, _, v in wanted):
        users = [s for _, s, _, v in wanted if v == v_idx]
        numbers[v_idx] = _parse_numbers(table, v_idx, users, sink)

    # beyond plausibility: once per (column, quantity, factor)
    implausible: Dict[Tuple[int, str, float], bool] = {}
    for _, spec, _, v_idx in wanted:
        raw = numbers[v_idx]
        key = (v_idx, spec.quantity, spec.factor)
        if raw is None or key in implausible:
            continue
        users = [s for _, s, _, v in wanted
                 if v == v_idx and (s.quantity, s.factor) == (spec.quantity, spec.factor)]
        with np.errstate(all="ignore"):
            scaled = raw * spec.factor
        implausible[key] = _report_implausible(table, v_idx, scaled, spec.quantity, users, sink)

    # negative power: once per (column, sign of factor)
    negative: Dict[Tuple[int, bool], bool] = {}
    for _, spec, _, v_idx in wanted:
        raw = numbers[v_idx]
        if spec.quantity != "power" or raw is None:
            continue
        key = (v_idx, spec.factor >= 0)
        if key not in negative:
            users = [s for _, s, _, v in wanted
                     if v == v_idx and s.quantity == "power" and (s.factor >= 0) == key[1]]
            with np.errstate(all="ignore"):
                scaled = raw * spec.factor
            negative[key] = _report_negative(table, v_idx, scaled, users, sink)

    out: Dict[int, Series] = {}
    for i, spec, t_idx, v_idx in wanted:
        t, raw = times[t_idx], numbers[v_idx]
        if t is None or raw is None:
            continue
        if spec.quantity == "power" and negative.get((v_idx, spec.factor >= 0)):
            continue
        if implausible.get((v_idx, spec.quantity, spec.factor)):
            continue
        if not _covers(spec, table, t, t_idx, grid, sink):
            continue
        with np.errstate(all="ignore"):
            values = _step_average(t.ns, raw * spec.factor, t.hold, grid)
        if not np.isfinite(values).all():
            sink.add(SeriesBadValue, spec.column_span or spec.span,
                     f"series '{spec.name}': the values in column '{table.header[v_idx]}' "
                     "are too large to average")
            continue
        origin = f'{shown} column "{table.header[v_idx]}"'
        out[i] = _make_series(spec, values, origin, source=resolved)
    return out


def _report_cells(kind, table: _Table, col: int, bad: np.ndarray, message, users,
                  sink: Sink, extra: Sequence[str] = ()) -> None:
    """Up to MAX_REPORTED diagnostics for the rows in ``bad``; the last says how many more."""
    declared = [_declared(s) for s in users]
    shown = [int(r) for r in bad[:MAX_REPORTED]]
    rest = [table.lines[int(r)] for r in bad[MAX_REPORTED:]]
    for n, row in enumerate(shown):
        notes = list(extra) + declared
        if n == len(shown) - 1 and rest:
            notes.insert(0, _more_note(len(rest), f"in column '{table.header[col]}'", rest))
        sink.add(kind, table.span(row, col), message(row), *notes)


def _parse_numbers(table: _Table, col: int, users, sink: Sink) -> Optional[np.ndarray]:
    texts, _ = table.column(col)
    values = np.empty(len(texts))
    for k in range(0, len(texts), _CHUNK):             # pandas' parser, a slice at a time
        part = texts[k:k + _CHUNK]
        if part.dtype.kind == "S":
            part = part.astype("U")
        values[k:k + _CHUNK] = pd.to_numeric(part, errors="coerce")
    bad = np.flatnonzero(~np.isfinite(values))
    if not bad.size:
        return values
    name = table.header[col]

    def message(row: int) -> str:
        cell, line = table.cell(row, col), table.lines[row]
        if cell is None:
            n = len(table.rows[row])
            return (f"line {line} has no cell for column '{name}' "
                    f"(it has {n} field{'s' if n != 1 else ''})")
        if cell == "":
            return f"empty cell in column '{name}' on line {line}"
        text = f"{cell!r} in column '{name}' on line {line} is not a number"
        if _DECIMAL_COMMA.match(cell):
            text += " (write decimals with a point, not a comma)"
        elif np.isinf(values[row]):
            text = f"{cell!r} in column '{name}' on line {line} is not a finite number"
        return text

    _report_cells(SeriesBadValue, table, col, bad, message, users, sink)
    return None


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


def _parse_times(table: _Table, col: int, zone: str, users, sink: Sink) -> Optional[_Times]:
    column, _ = table.column(col)
    name = table.header[col]
    n = len(column)
    local = np.empty(n, dtype=np.int64)
    offset = np.empty(n)
    for k in range(0, n, _TIME_CHUNK):                # a slice at a time: the str arrays stay small
        part = column[k:k + _TIME_CHUNK]
        texts, offset[k:k + _TIME_CHUNK] = (_split_one_layout(part) or _split_offsets(
            part.astype("U") if part.dtype.kind == "S" else part))
        local[k:k + _TIME_CHUNK] = _parse_local(texts)
    readable = local != _NAT
    aware = readable & ~np.isnan(offset)
    naive = readable & np.isnan(offset)
    ns = np.zeros(n, dtype=np.int64)
    ok = aware.copy()
    dst = np.zeros(n, dtype=bool)
    ns[aware] = local[aware] - (offset[aware] * 60e9).astype(np.int64)
    if naive.any():
        where = np.flatnonzero(naive)
        stamps = pd.DatetimeIndex(local[where].view("datetime64[ns]"))
        placed = stamps.tz_localize(zone, ambiguous="NaT", nonexistent="NaT")
        good = ~placed.isna()
        ns[where[good]] = placed.asi8[good]
        ok[where[good]] = True
        dst[where[~good]] = True

    cells = _Cells(table, col)
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
        _report_cells(SeriesBadTime, table, col, unreadable, message, users, sink,
                      extra=[f"timestamps look like {_TIME_EXAMPLES}"])
    gaps = np.flatnonzero(dst)
    if gaps.size:
        good_rows = np.flatnonzero(ok)
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
        _report_cells(SeriesUnsorted, table, col, back, message, users, sink,
                      extra=["timestamps must strictly increase down the file"])
        return None
    hold = int(round(float(np.median(step)))) if step.size else 0
    return _Times(ns, hold)


def _report_dst(table: _Table, col: int, cells, rows: np.ndarray, local: np.ndarray,
                zone: str, example: str, users, sink: Sink) -> None:
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

    _report_cells(SeriesDstGap, table, col, rows, message, users, sink, extra=[advice])


def _plausible_limit(quantity: str) -> Tuple[float, str]:
    """The largest magnitude a series of this quantity may hold (units.PLAUSIBLE)."""
    return U.PLAUSIBLE[U.POWER if quantity == "power" else U.PRICE]


def _implausible_in_values(spec: SeriesSpec, values: np.ndarray, what: str, where: Span,
                           sink: Sink) -> bool:
    """P411 for a list or constant holding a value beyond plausibility."""
    limit, shown = _plausible_limit(spec.quantity)
    bad = np.flatnonzero(np.abs(values) > limit)
    if not bad.size:
        return False
    sink.add(SeriesImplausible, where,
             f"series '{spec.name}': {what} {bad[0] + 1} is {values[bad[0]]:g} {shown}, beyond any "
             f"plausible plant or market (at most {limit:g} {shown}); check the number and its unit")
    return True


def _report_rows(kind, table: _Table, col: int, bad: np.ndarray, text, users, sink: Sink,
                 extra=()) -> bool:
    """Report the rows ``bad`` of column ``col``; ``text(cell, column, line)`` words each."""
    if not bad.size:
        return False
    name, cells = table.header[col], _Cells(table, col)
    _report_cells(kind, table, col, bad, lambda row: text(cells[row], name, table.lines[row]),
                  users, sink, extra=extra)
    return True


def _report_implausible(table: _Table, col: int, values: np.ndarray, quantity: str,
                        users, sink: Sink) -> bool:
    limit, shown = _plausible_limit(quantity)
    return _report_rows(
        SeriesImplausible, table, col, np.flatnonzero(np.abs(values) > limit),
        lambda cell, name, line: (f"value {cell} in column '{name}' on line {line} is beyond any "
                                  f"plausible plant or market (at most {limit:g} {shown})"),
        users, sink)


def _report_negative(table: _Table, col: int, values: np.ndarray, users, sink: Sink) -> bool:
    return _report_rows(
        SeriesNegative, table, col, np.flatnonzero(values < 0),
        lambda cell, name, line: f"negative value {cell} in power column '{name}' on line {line}",
        users, sink, extra=_negative_notes(0, "", []))


def _covers(spec: SeriesSpec, table: _Table, t: _Times, col: int, grid: _Grid,
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


def _step_average(ns: np.ndarray, values: np.ndarray, hold: int, grid: _Grid) -> np.ndarray:
    """Time-weighted mean of the step function over every horizon step.

    Row ``k`` holds ``values[k]`` on ``[ns[k], ns[k+1])`` and the last row for
    ``hold``.  The data must cover the grid.  Works on the cumulative
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
