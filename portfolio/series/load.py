"""The entry: :func:`load_series` reads every spec onto the horizon, each file once."""

from __future__ import annotations

from pathlib import Path
from typing import Dict, List, Optional, Sequence, Set, Tuple

import numpy as np

from .. import files
from ..diagnostics import (SeriesBadValue, SeriesColumnMissing, SeriesEmpty, SeriesFileMissing,
                           SeriesOutsideFolder, Sink)
from ..model import Horizon, Series
from ..spans import Span
from .align import Grid, covers, step_average
from .gaps import Gaps, fill, find_gaps, report as report_gaps, report_filled
from .report import declared
from .rows import check_widths
from .spec import QUANTITIES, SeriesSpec, make_series
from .table import Table, Unreadable, column_notes, find_column, read_table
from .times import Times, parse_times
from .values import load_constant, load_inline, parse_numbers, report_implausible, report_negative


def load_series(specs: Sequence[SeriesSpec], horizon: Horizon, base_dir: Path,
                sink: Sink, confine: bool = False) -> Dict[str, Series]:
    """Load every spec onto ``horizon``; faults go to ``sink``.

    Returns ``{name: Series}`` for the specs that loaded without error, in
    the order of ``specs``.  Each CSV file is read once however many specs
    name it.  ``confine``: read no file outside ``base_dir`` (P412).
    """
    base_dir = Path(base_dir)
    grid = Grid.of(horizon)
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
            s = load_inline(spec, grid, sink)
            if s is not None:
                loaded[i] = s
        else:
            s = load_constant(spec, grid, sink)
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


Wanted = List[Tuple[int, SeriesSpec, int, int]]      # (spec's index, spec, time column, value column)


def _load_file(resolved: Path, shown: str, group: List[Tuple[int, SeriesSpec]],
               grid: Grid, sink: Sink) -> Dict[int, Series]:
    """The series of one file: its faults in the order a reader meets them
    (file, columns, cells, plausibility, sign, coverage)."""
    table = _open_table(resolved, shown, group, sink)
    if table is None:
        return {}
    wanted = _pick_columns(table, group, sink)
    if not wanted:
        return {}
    misshapen = check_widths(table, [c for _, _, t, v in wanted for c in (t, v)],
                             [s for _, s, _, _ in wanted], sink)
    times: Dict[int, Optional[Times]] = {}
    for t_idx in dict.fromkeys(t for _, _, t, _ in wanted):
        users = [s for _, s, t, _ in wanted if t == t_idx]
        times[t_idx] = parse_times(table, t_idx, grid.zone, users, sink)
    numbers: Dict[int, Optional[np.ndarray]] = {}
    for v_idx in dict.fromkeys(v for _, _, _, v in wanted):
        users = [s for _, s, _, v in wanted if v == v_idx]
        numbers[v_idx] = parse_numbers(table, v_idx, users, sink)
    refused = _screen(table, wanted, numbers, sink)

    out: Dict[int, Series] = {}
    gaps: Dict[int, Optional[Gaps]] = {}
    unfilled: Dict[int, List[SeriesSpec]] = {}
    for i, spec, t_idx, v_idx in wanted:
        t, raw = times[t_idx], numbers[v_idx]
        if t is None or raw is None or i in refused or misshapen:
            continue
        if not covers(spec, table, t, t_idx, grid, sink):
            continue
        if t_idx not in gaps:
            gaps[t_idx] = find_gaps(t, grid)
        ns, rows = t.ns, raw
        found = gaps[t_idx]
        if found is not None:           # never filled without the series saying how (P415)
            if spec.gaps is None:
                unfilled.setdefault(t_idx, []).append(spec)
                continue
            with np.errstate(all="ignore"):
                ns, rows = fill(found, spec.gaps, ns, rows)
            report_filled(found, spec, table, grid, sink)
        with np.errstate(all="ignore"):
            values = step_average(ns, rows * spec.factor, t.hold, grid)
        if not np.isfinite(values).all():
            sink.add(SeriesBadValue, spec.column_span or spec.span,
                     f"series '{spec.name}': the values in column '{table.header[v_idx]}' "
                     "are too large to average")
            continue
        origin = f'{shown} column "{table.header[v_idx]}"'
        out[i] = make_series(spec, values, origin, source=resolved)
    for t_idx, users in unfilled.items():
        report_gaps(gaps[t_idx], times[t_idx], table, t_idx, grid, users, sink)
    return out


def _open_table(resolved: Path, shown: str, group: List[Tuple[int, SeriesSpec]],
                sink: Sink) -> Optional[Table]:
    """The file's table with the columns its specs can name read (P401, P409 otherwise)."""
    try:
        table = read_table(resolved, shown)
    except Unreadable as e:
        for _, spec in group:
            sink.add(SeriesFileMissing, spec.path_span or spec.span,
                     f"series '{spec.name}': cannot read file '{spec.path}': {e}",
                     f"looked for {resolved}")
        return None
    if table.header:                     # read only the columns the specs can name, at once
        found = [find_column(table, spec.time_column, "time", 0)[0] for _, spec in group]
        for (_, spec), t_idx in zip(group, found):
            others = [j for j in range(len(table.header)) if j != (t_idx or 0)]
            found.append(find_column(table, spec.column, "value",
                                     others[0] if len(others) == 1 else None)[0])
        table.keep([c for c in found if c is not None])
    if not len(table):
        what = "is empty" if not table.header else "has a header but no data rows"
        sink.add(SeriesEmpty, Span(shown, table.header_line, 1, table.header_line, 1),
                 f"series file {shown} {what}", *(declared(s) for _, s in group))
        return None
    return table


def _pick_columns(table: Table, group: List[Tuple[int, SeriesSpec]], sink: Sink) -> Wanted:
    """(time index, value index) per spec; P402 for the rest."""
    wanted: Wanted = []
    for i, spec in group:
        t_idx, t_why = find_column(table, spec.time_column, "time", 0)
        ok = True
        if t_idx is None:
            sink.add(SeriesColumnMissing, spec.time_column_span or spec.path_span or spec.span,
                     f"series '{spec.name}': {t_why}", *column_notes(table, spec.time_column))
            ok = False
        others = [j for j in range(len(table.header)) if j != (t_idx if t_idx is not None else 0)]
        v_idx, v_why = find_column(table, spec.column, "value",
                                   others[0] if len(others) == 1 else None)
        if v_idx is None:
            sink.add(SeriesColumnMissing, spec.column_span or spec.path_span or spec.span,
                     f"series '{spec.name}': {v_why}", *column_notes(table, spec.column))
            ok = False
        if ok:
            wanted.append((i, spec, t_idx, v_idx))
    return wanted


def _screen(table: Table, wanted: Wanted, numbers: Dict[int, Optional[np.ndarray]],
            sink: Sink) -> Set[int]:
    """P411 once per (column, quantity, factor), then P410 once per (power column,
    sign of factor); the indices of the specs refused."""
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
        implausible[key] = report_implausible(table, v_idx, scaled, spec.quantity, users, sink)
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
            negative[key] = report_negative(table, v_idx, scaled, users, sink)
    return {i for i, spec, _, v_idx in wanted
            if (spec.quantity == "power" and negative.get((v_idx, spec.factor >= 0)))
            or implausible.get((v_idx, spec.quantity, spec.factor))}
