"""Row shape: every data row has as many fields as the header.

P413 (a row with more fields: one would be dropped, as a decimal comma in a
comma-separated file does) and P414 (a row with fewer fields, though the
cells the series read are there; a row that lacks such a cell is P403 or
P404 there) are reported here.  Both ways of reading a table count fields
alike (:meth:`Table.widths`).
"""

from __future__ import annotations

import re
from typing import Sequence

import numpy as np

from ..diagnostics import SeriesRowTooLong, SeriesRowTooShort, Sink
from .report import MAX_REPORTED, declared, more_note
from .table import Table

_WHOLE = re.compile(r"^[+-]?\d+$")
_DIGITS = re.compile(r"^\d+$")


def _plural(n: int, word: str) -> str:
    return f"{n} {word}" + ("s" if n != 1 else "")


def check_widths(table: Table, used: Sequence[int], users, sink: Sink) -> bool:
    """Report rows whose field count is not the header's; ``True`` when there are any.

    ``used``: the columns the series of this file read (a short row that lacks
    one of them is left to the cell checks, which name the missing cell).
    """
    widths = table.widths()
    n = len(table.header)
    long = np.flatnonzero(widths > n)
    short = np.flatnonzero((widths < n) & (widths > max(used, default=-1)))
    _report(SeriesRowTooLong, table, long, lambda row: _too_long(table, row, n), users, sink,
            [f"the header ({table.shown}:{table.header_line}) has {_plural(n, 'field')}"])
    _report(SeriesRowTooShort, table, short, lambda row: _too_short(table, row, n), users, sink,
            [f"the header ({table.shown}:{table.header_line}) has {_plural(n, 'field')}; "
             "a missing separator can shift the cells after it into the wrong columns"])
    return bool(long.size or short.size)


def _too_long(table: Table, row: int, n: int) -> str:
    record = [c.strip() for c in table.rows[row]]
    line, extra = table.lines[row], record[n:]
    shown = ", ".join(repr(c) for c in extra)
    text = (f"line {line} has {_plural(len(record), 'field')} but the header has {n}: "
            f"the extra field{'s' if len(extra) > 1 else ''} {shown} would be dropped")
    before = record[n - 1] if n >= 1 else ""
    if _WHOLE.match(before) and _DIGITS.match(extra[0]):
        number = f"{before},{extra[0]}"
        text += (f"; it looks like a decimal comma: {number}? write {before}.{extra[0]} "
                 "(decimals always take a point), or export the file with '.' as its "
                 "decimal separator")
    elif all(c == "" for c in extra):
        text += " (a separator at the end of the row?)"
    return text


def _too_short(table: Table, row: int, n: int) -> str:
    width, line = len(table.rows[row]), table.lines[row]
    missing = ", ".join(f"'{h}'" for h in table.header[width:])
    return (f"line {line} has {_plural(width, 'field')} but the header has {n}: "
            f"no cell for column{'s' if n - width > 1 else ''} {missing}")


def _report(kind, table: Table, bad: np.ndarray, message, users, sink: Sink, extra) -> None:
    """Up to MAX_REPORTED diagnostics, each at the row's first field past the short or long end."""
    declarations = [declared(s) for s in users]
    shown = [int(r) for r in bad[:MAX_REPORTED]]
    rest = [int(table.lines[int(r)]) for r in bad[MAX_REPORTED:]]
    n = len(table.header)
    for k, row in enumerate(shown):
        notes = list(extra) + declarations
        if k == len(shown) - 1 and rest:
            notes.insert(0, more_note(len(rest), "such rows", rest))
        col = n if kind is SeriesRowTooLong else len(table.rows[row])
        sink.add(kind, table.span(row, col), message(row), *notes)
