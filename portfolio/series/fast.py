"""The quick way for a well-formed file: timestamps and numbers with numpy alone.

Each function takes a slice of a column's stripped cells and gives what the
careful way (pandas) would give for every cell of the slice, or ``None`` when
anything in the slice is unusual; the caller then reads that slice the
careful way, which also words the diagnostics.  So a fault is always
reported by the careful way, and the quick way only decides what is
certainly fine.  ``tests/test_series_fast.py`` checks both agree on
generated cells.

Timestamps: one layout for the whole slice, ``YYYY-MM-DDTHH:MM`` (or a space
for the ``T``), optional ``:SS``, then ``Z``, ``+HH:MM``, ``+HHMM``, ``+HH``
(or ``-``), or nothing when the horizon's zone is UTC.  Numbers: a sign,
digits and at most one point, at most 15 digits (so a float holds each
exactly before the one rounding both parsers make), no negative zero.
"""

from __future__ import annotations

from typing import Optional

import numpy as np

_UTC_ZONES = ("UTC", "Etc/UTC")
_DIGIT_LIMIT = 15
_DAYS = np.array([0, 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], dtype=np.int64)
_YEARS = (1700, 2200)          # well inside pandas' nanosecond range (1677-2262)
_NS_MINUTE = 60 * 10**9


def _bytes_grid(cells: np.ndarray) -> Optional[np.ndarray]:
    """The cells as an (n, width) uint8 array; ``None`` when not ASCII or empty."""
    if not len(cells):
        return None
    if cells.dtype.kind == "U":
        try:
            cells = cells.astype("S")
        except UnicodeEncodeError:
            return None
    elif cells.dtype.kind != "S":
        return None
    if cells.dtype.itemsize == 0:
        return None
    return np.ascontiguousarray(cells).view(np.uint8).reshape(len(cells), cells.dtype.itemsize)


def _number(grid: np.ndarray, first: int, width: int) -> np.ndarray:
    out = np.zeros(len(grid), dtype=np.int64)
    for c in range(first, first + width):
        out = out * 10 + (grid[:, c].astype(np.int64) - 48)
    return out


def _is(grid: np.ndarray, col: int, chars: bytes) -> bool:
    return bool(np.isin(grid[:, col], np.frombuffer(chars, dtype=np.uint8)).all())


def times(cells: np.ndarray, zone: str) -> Optional[np.ndarray]:
    """UTC nanoseconds of ISO 8601 cells of one common layout, or ``None``."""
    grid = _bytes_grid(cells)
    if grid is None:
        return None
    width = grid.shape[1]
    base = 19 if width >= 19 and _is(grid, 16, b":") else 16
    tail = width - base
    if tail not in (0, 1, 3, 5, 6) or (tail == 0 and zone not in _UTC_ZONES):
        return None
    digits = [0, 1, 2, 3, 5, 6, 8, 9, 11, 12, 14, 15] + ([17, 18] if base == 19 else [])
    if tail > 1:
        digits += [base + 1, base + 2] + ([base + 3, base + 4] if tail == 5 else [])
        digits += [base + 4, base + 5] if tail == 6 else []
    d = grid[:, digits]
    if not ((d >= 48) & (d <= 57)).all():
        return None
    if not (_is(grid, 4, b"-") and _is(grid, 7, b"-") and _is(grid, 10, b"T ")
            and _is(grid, 13, b":")):
        return None
    if tail == 1 and not _is(grid, base, b"Z"):
        return None
    if tail > 1 and not (_is(grid, base, b"+-") and (tail != 6 or _is(grid, base + 3, b":"))):
        return None
    year, month, day = _number(grid, 0, 4), _number(grid, 5, 2), _number(grid, 8, 2)
    hour, minute = _number(grid, 11, 2), _number(grid, 14, 2)
    second = _number(grid, 17, 2) if base == 19 else np.zeros(len(grid), dtype=np.int64)
    leap = (year % 4 == 0) & ((year % 100 != 0) | (year % 400 == 0))
    month_ok = (month >= 1) & (month <= 12)
    last = _DAYS[np.where(month_ok, month, 1)] + (leap & (month == 2))
    fine = (month_ok & (day >= 1) & (day <= last) & (hour <= 23) & (minute <= 59) & (second <= 59)
            & (year >= _YEARS[0]) & (year <= _YEARS[1]))
    offset = np.zeros(len(grid), dtype=np.int64)
    if tail > 1:
        oh = _number(grid, base + 1, 2)
        om = _number(grid, base + 4 if tail == 6 else base + 3, 2) if tail > 3 else np.zeros_like(oh)
        fine &= (oh <= 18) & (om <= 59)
        sign = np.where(grid[:, base] == ord("-"), -1, 1)
        offset = sign * (oh * 60 + om)
    if not fine.all():
        return None
    # days since 1970-01-01 of a proleptic Gregorian date (H. Hinnant, "chrono-Compatible
    # Low-Level Date Algorithms", days_from_civil)
    y = year - (month <= 2)
    era = y // 400
    yoe = y - era * 400
    doy = (153 * ((month + 9) % 12) + 2) // 5 + day - 1
    days = era * 146097 + yoe * 365 + yoe // 4 - yoe // 100 + doy - 719468
    local = (((days * 24 + hour) * 60 + minute) * 60 + second) * 10**9
    return local - offset * _NS_MINUTE


def numbers(cells: np.ndarray) -> Optional[np.ndarray]:
    """Floats of plain decimal cells, or ``None``."""
    grid = _bytes_grid(cells)
    if grid is None:
        return None
    digit = (grid >= 48) & (grid <= 57)
    point = grid == ord(".")
    sign = (grid == ord("+")) | (grid == ord("-"))
    if sign[:, 1:].any() or not (digit | point | sign | (grid == 0)).all():
        return None
    filled = grid != 0
    # the content is one run from the first byte (the cells are stripped: NULs only pad the end)
    if (filled[:, 1:] & ~filled[:, :-1]).any():
        return None
    ndigits = digit.sum(axis=1)
    if (ndigits == 0).any() or (ndigits > _DIGIT_LIMIT).any() or (point.sum(axis=1) > 1).any():
        return None
    values = cells.astype(np.float64) if cells.dtype.kind == "S" else cells.astype("S").astype(np.float64)
    if ((values == 0) & np.signbit(values)).any():
        return None
    return values
