"""Where a series comes from: a CSV column, a list of values or one constant.

Only the declaration is read here, into a :class:`portfolio.series.SeriesSpec`;
the values are loaded and put on the horizon by :mod:`portfolio.series`.
"""

from __future__ import annotations

import math
from typing import List, Optional

from .. import units as U
from ..diagnostics import DuplicateSetting, OutOfRange
from ..series import SeriesSpec
from ..spans import Span
from .quantities import Quantities, Water
from .tree import CsvSource, ListSource, Word, said


def series_spec(units: Quantities, specs: List[SeriesSpec], name: Word, src, quantity: str,
                span: Span, water: Optional[Water] = None) -> Optional[str]:
    """Add the spec of series ``name`` (a price, or a demand's or supply's power) to ``specs``.
    With ``water`` (a store's own supply), a flow in m3 per s is converted to MW by its equivalent."""
    dims = (U.POWER,) if quantity == "power" else (U.PRICE,)
    nm = name.text
    if isinstance(src, CsvSource):
        spec = _csv(units, nm, src, quantity, span, dims, water)
    elif isinstance(src, ListSource):
        spec = _values(units, nm, src, quantity, span, dims, water)
    else:
        got = units.quantity(src.quantity, dims, f"the value of '{nm}'", water)
        spec = None if got is None else SeriesSpec(name=nm, quantity=quantity, span=span, constant=got[1],
                                                   values_span=src.span)  # a negative power is P410 there
    if spec is None:
        return None
    specs.append(spec)
    return nm


def _csv(units: Quantities, nm: str, src: CsvSource, quantity: str, span: Span, dims,
         water: Optional[Water]) -> Optional[SeriesSpec]:
    time_col = time_span = gaps = gaps_span = None
    fac = 1.0
    seen = set()
    for opt in src.options:
        if opt.key in seen:
            units.sink.add(DuplicateSetting, opt.span, f"'{said(opt.key)}' is given twice")
            continue
        seen.add(opt.key)
        if opt.key == "time_column":
            time_col, time_span = _unquote(opt.value), opt.value.span
        elif opt.key == "gaps":
            gaps, gaps_span = opt.value.text, opt.span
        else:
            fac = units.unit_factor(opt.value, dims, f"the unit of series '{nm}'", water)
            if fac is None:
                return None
    return SeriesSpec(name=nm, quantity=quantity, span=span, path=_unquote(src.path), path_span=src.path.span,
                      column=_unquote(src.column), column_span=src.column.span, time_column=time_col,
                      time_column_span=time_span, factor=fac, gaps=gaps, gaps_span=gaps_span)


def _values(units: Quantities, nm: str, src: ListSource, quantity: str, span: Span, dims,
            water: Optional[Water]) -> Optional[SeriesSpec]:
    fac = 1.0
    if src.unit is not None:
        fac = units.unit_factor(src.unit, dims, f"the values of '{nm}'", water)
        if fac is None:
            return None
    values = tuple(float(n.text) for n in src.numbers)
    if not all(math.isfinite(v) for v in values):
        units.sink.add(OutOfRange, src.span, f"the values of '{nm}' must be finite numbers")
        return None
    return SeriesSpec(name=nm, quantity=quantity, span=span, values=values, values_span=src.span, factor=fac)


def _unquote(word: Word) -> str:
    return word.text[1:-1]
