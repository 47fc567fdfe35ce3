"""The declared series (:class:`SeriesSpec`) and the :class:`~portfolio.model.Series` made from it."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Optional

import numpy as np

from ..model import Series
from ..spans import Span


QUANTITIES = ("power", "price")


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
    gaps: Optional[str] = None          # missing rows of a regular file: None (an error), "hold", "interpolate"
    gaps_span: Optional[Span] = None


def _spans_of(spec: SeriesSpec) -> dict:
    """A plain dict, as every declaration's ``spans`` (a model must pickle: windows and
    studies send it to other processes)."""
    fields = {"path": spec.path_span, "column": spec.column_span,
              "time_column": spec.time_column_span, "values": spec.values_span,
              "gaps": spec.gaps_span}
    return {k: v for k, v in fields.items() if v is not None}


def make_series(spec: SeriesSpec, values: np.ndarray, origin: str,
                source: Optional[Path] = None) -> Series:
    if spec.factor != 1.0:
        origin += f" scaled by {spec.factor:g}"
    return Series(name=spec.name, span=spec.span, spans=_spans_of(spec),
                  values=np.asarray(values, dtype=float), quantity=spec.quantity,
                  origin=origin, source=str(source) if source is not None else None)
