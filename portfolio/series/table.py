"""The table with positions: a CSV file's bytes -> header and cells, each with its line:col span.

Two ways of reading give the same cells (see :class:`Table`): the careful
way (Python's ``csv`` over every line, any quoting) and the lean way (numpy
over the bytes of a plain ASCII file, only the columns asked for).
"""

from __future__ import annotations

import csv
import difflib
import io
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Dict, List, Optional, Sequence, Tuple

import numpy as np

from .. import files
from ..spans import Span


class Unreadable(Exception):
    """A series file cannot be read; the message says why."""


@dataclass
class Table:
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
    _widths: Optional[np.ndarray] = None      # lean: fields on each data row, set by keep

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
            self._widths = found.pop("widths")
            self._columns = found

    def widths(self) -> np.ndarray:
        """The number of fields on each data row (the header's count on a well-formed file)."""
        if self.lean:
            self.keep([])
            return self._widths
        return np.fromiter((len(r) for r in self.rows), dtype=np.int64, count=len(self.rows))

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


_NOT_LEAN = (b'"', b"\x00", b"\x1c", b"\x1d", b"\x1e", b"\x1f")


_BLOCK = 1 << 18                                  # bytes scanned at a time by the lean reader


_WIDE = 64                                        # wider cells are cut out one by one


def read_table(resolved: Path, shown: str) -> Table:
    """Read one CSV file; raise :class:`Unreadable` when it cannot be read."""
    try:
        data = files.read_bytes(resolved)
    except files.InputError as e:
        raise Unreadable(str(e)) from None
    except FileNotFoundError:
        raise Unreadable("no such file") from None
    except IsADirectoryError:
        raise Unreadable("it is a directory, not a file") from None
    except PermissionError:
        raise Unreadable("permission denied") from None
    except OSError as e:
        raise Unreadable(e.strerror or str(e)) from None
    if leanable(data):
        return _lean_table(data, shown)
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as e:
        line = data.count(b"\n", 0, e.start) + 1
        raise Unreadable(f"it is not UTF-8 text (byte 0x{data[e.start]:02x} on line {line})") from None
    if "\x00" in text:
        raise Unreadable("it contains NUL bytes (is it a binary file?)")
    raw = list(io.StringIO(text, newline=""))
    delimiter = _sniff_delimiter(raw)
    header, header_line, rows, lines = _parse_records(raw, delimiter, '"' in text)
    if not header:
        return Table(shown, delimiter, [], 1, [], data, _records=[], _raw=raw)
    return Table(shown, delimiter, header, header_line, lines, data, _records=rows, _raw=raw)


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
        raise Unreadable(f"it is not valid CSV near line {reader.line_num}: {e}") from None
    kept = [k for k, r in enumerate(records) if r and (len(r) > 1 or r[0].strip())]
    if not kept:
        return [], 1, [], []
    first = kept[0]
    header = [c.strip() for c in records[first]]
    return (header, starts[first], [records[k] for k in kept[1:]],
            [starts[k] for k in kept[1:]])


def leanable(data: bytes) -> bool:
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


def _lean_table(data: bytes, shown: str) -> Table:
    """Header of a plain file; the data rows wait for :meth:`Table.keep`."""
    size, n = 1 << 16, len(data)
    while True:
        lines = list(io.StringIO(data[:size].decode("ascii"), newline=""))
        hit = next((k for k, ln in enumerate(lines) if ln.strip()), None)
        if size >= n or (hit is not None and hit < len(lines) - 1):
            break
        size *= 4
    if hit is None:
        return Table(shown, ",", [], 1, [], data, lean=True, _records=[])
    first = lines[hit]
    delimiter = next((d for d in (",", ";", "\t") if d in first), ",")
    header = [c.strip() for c in first.rstrip("\r\n").split(delimiter)]
    return Table(shown, delimiter, header, hit + 1, None, data, lean=True)


def _lean_columns(data: bytes, delimiter: str, header_line: int, cols: List[int]) -> dict:
    """Cells of columns ``cols`` of the data rows after the header, block by block."""
    b = np.frombuffer(data, dtype=np.uint8)
    d = ord(delimiter)
    out_lines, out_widths, parts = [], [], {c: ([], []) for c in cols}
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
        out_widths.append(count + 1)
        for c in cols:
            has = count >= c
            lo = starts.copy() if c == 0 else np.where(has, dpos[np.minimum(first + c - 1, len(dpos) - 1)] + 1 if len(dpos) else starts, starts)
            hi = np.where(count > c, dpos[np.minimum(first + c, len(dpos) - 1)] if len(dpos) else ends, ends)
            hi = np.where(has, hi, lo)
            parts[c][0].append(_cut_cells(block, lo, hi))
            parts[c][1].append(~has)
        pos = cut
    result: dict = {"lines": np.concatenate(out_lines) if out_lines else np.zeros(0, dtype=np.int64),
                    "widths": (np.concatenate(out_widths).astype(np.int64) if out_widths
                               else np.zeros(0, dtype=np.int64))}
    for c in cols:
        texts = [t for t in parts[c][0]]
        width = max((t.dtype.itemsize for t in texts), default=1)
        joined = np.concatenate([t.astype(f"S{width}") for t in texts]) if texts else np.zeros(0, "S1")
        result[c] = (joined, np.concatenate(parts[c][1]) if texts else np.zeros(0, bool))
    return result


class Cells:
    """``cells[row]``: one stripped cell of a column, ``None`` where the row is too short."""

    def __init__(self, table: Table, col: int):
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


def find_column(table: Table, wanted: Optional[str], role: str,
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


def column_notes(table: Table, wanted: Optional[str]) -> List[str]:
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
    import pandas as pd

    return not pd.isna(pd.to_datetime(text, format="ISO8601", errors="coerce", utc=True))
