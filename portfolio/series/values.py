"""Values: a value column's cells, an inline list or a constant -> numbers, checked.

P403 (not a finite number), P408 (a list of the wrong length), P410
(negative power) and P411 (beyond plausibility) are reported here.
"""

from __future__ import annotations

import re
from typing import Optional, Tuple

import numpy as np

from .. import units as U
from ..diagnostics import SeriesBadValue, SeriesImplausible, SeriesLength, SeriesNegative, Sink
from ..model import Series
from ..spans import Span
from . import fast
from .align import Grid
from .report import LISTED_MORE, negative_notes, report_cells
from .spec import SeriesSpec, make_series
from .table import Cells, Table


_DECIMAL_COMMA = re.compile(r"^[+-]?\d+,\d+$")


_CHUNK = 1 << 14                                  # numbers parsed at a time


def load_inline(spec: SeriesSpec, grid: Grid, sink: Sink) -> Optional[Series]:
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
        listed = ", ".join(str(k + 1) for k in bad[:LISTED_MORE])
        sink.add(SeriesBadValue, where,
                 f"series '{spec.name}': list entr{'ies' if len(bad) > 1 else 'y'} {listed} "
                 f"{'are' if len(bad) > 1 else 'is'} not a finite number")
        return None
    with np.errstate(all="ignore"):
        values = values * spec.factor
    if not np.isfinite(values).all():
        sink.add(SeriesBadValue, where, f"series '{spec.name}': the list's values are too large")
        return None
    if implausible_in_values(spec, values, "list entry", where, sink):
        return None
    if spec.quantity == "power":
        neg = np.flatnonzero(values < 0)
        if neg.size:
            k = int(neg[0])
            sink.add(SeriesNegative, where,
                     f"power series '{spec.name}' has a negative value "
                     f"({raw[k]!r}, entry {k + 1} of the list)",
                     *negative_notes(neg.size - 1, "entries", []))
            return None
    return make_series(spec, values, f"inline list of {len(raw)} values")


def load_constant(spec: SeriesSpec, grid: Grid, sink: Sink) -> Optional[Series]:
    try:
        value = float(spec.constant)
    except (TypeError, ValueError, OverflowError):
        value = float("nan")
    if not np.isfinite(value):
        sink.add(SeriesBadValue, spec.span,
                 f"series '{spec.name}': {spec.constant!r} is not a finite number")
        return None
    value *= spec.factor
    if implausible_in_values(spec, np.array([value]), "the constant, value", spec.span, sink):
        return None
    if spec.quantity == "power" and value < 0:
        sink.add(SeriesNegative, spec.span,
                 f"power series '{spec.name}' is negative ({spec.constant!r})",
                 *negative_notes(0, "", []))
        return None
    return make_series(spec, np.full(grid.steps, value), f"constant {spec.constant:g}")


def parse_numbers(table: Table, col: int, users, sink: Sink) -> Optional[np.ndarray]:
    texts, _ = table.column(col)
    values = np.empty(len(texts))
    for k in range(0, len(texts), _CHUNK):             # a slice at a time
        part = texts[k:k + _CHUNK]
        quick = fast.numbers(part)
        if quick is None:                              # anything unusual: pandas' parser
            import pandas as pd

            quick = pd.to_numeric(part.astype("U") if part.dtype.kind == "S" else part,
                                  errors="coerce")
        values[k:k + _CHUNK] = quick
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

    report_cells(SeriesBadValue, table, col, bad, message, users, sink)
    return None


def _plausible_limit(quantity: str) -> Tuple[float, str]:
    """The largest magnitude a series of this quantity may hold (units.PLAUSIBLE)."""
    return U.PLAUSIBLE[U.POWER if quantity == "power" else U.PRICE]


def implausible_in_values(spec: SeriesSpec, values: np.ndarray, what: str, where: Span,
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


def _report_rows(kind, table: Table, col: int, bad: np.ndarray, text, users, sink: Sink,
                 extra=()) -> bool:
    """Report the rows ``bad`` of column ``col``; ``text(cell, column, line)`` words each."""
    if not bad.size:
        return False
    name, cells = table.header[col], Cells(table, col)
    report_cells(kind, table, col, bad, lambda row: text(cells[row], name, table.lines[row]),
                 users, sink, extra=extra)
    return True


def report_implausible(table: Table, col: int, values: np.ndarray, quantity: str,
                       users, sink: Sink) -> bool:
    limit, shown = _plausible_limit(quantity)
    return _report_rows(
        SeriesImplausible, table, col, np.flatnonzero(np.abs(values) > limit),
        lambda cell, name, line: (f"value {cell} in column '{name}' on line {line} is beyond any "
                                  f"plausible plant or market (at most {limit:g} {shown})"),
        users, sink)


def report_negative(table: Table, col: int, values: np.ndarray, users, sink: Sink) -> bool:
    return _report_rows(
        SeriesNegative, table, col, np.flatnonzero(values < 0),
        lambda cell, name, line: f"negative value {cell} in power column '{name}' on line {line}",
        users, sink, extra=negative_notes(0, "", []))
