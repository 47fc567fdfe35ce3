"""Wording shared by the jobs: the declaration note, "and N more", the rows of a fault."""

from __future__ import annotations

from typing import TYPE_CHECKING, List, Sequence, Tuple

import numpy as np

from ..diagnostics import Sink
from .spec import SeriesSpec

if TYPE_CHECKING:
    from .table import Table


MAX_REPORTED = 3
"""Diagnostics given for one kind of cell fault in one column; the last one
given says how many more there are."""


LISTED_MORE = 10          # line numbers listed in the "and N more" note


def declared(spec: SeriesSpec) -> str:
    return f"series '{spec.name}' declared at {spec.span}"


def negative_notes(more: int, what: str, lines: List[int]) -> Tuple[str, ...]:
    notes = ["a power profile gives MW available or needed and cannot be negative; "
             "the direction comes from how the series is used (supply or demand)"]
    if more > 0:
        notes.insert(0, more_note(more, what, lines))
    return tuple(notes)


def more_note(more: int, what: str, lines: List[int]) -> str:
    text = f"and {more} more {what}".rstrip()
    if lines:
        shown = ", ".join(str(n) for n in lines[:LISTED_MORE])
        tail = ", ..." if len(lines) > LISTED_MORE else ""
        text += f" (line{'s' if len(lines) > 1 else ''} {shown}{tail})"
    return text


def report_cells(kind, table: Table, col: int, bad: np.ndarray, message, users,
                 sink: Sink, extra: Sequence[str] = ()) -> None:
    """Up to MAX_REPORTED diagnostics for the rows in ``bad``; the last says how many more."""
    declarations = [declared(s) for s in users]
    shown = [int(r) for r in bad[:MAX_REPORTED]]
    rest = [table.lines[int(r)] for r in bad[MAX_REPORTED:]]
    for n, row in enumerate(shown):
        notes = list(extra) + declarations
        if n == len(shown) - 1 and rest:
            notes.insert(0, more_note(len(rest), f"in column '{table.header[col]}'", rest))
        sink.add(kind, table.span(row, col), message(row), *notes)
