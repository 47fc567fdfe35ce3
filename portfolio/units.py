"""Units: the language's vocabulary, parsed and converted by pint.

Quantities are converted once, here, to the canonical units of
:mod:`portfolio.model` (MW, MWh, h, fractions, money per MWh).  Money itself
carries no unit: a price is written ``9.5 per MWh`` and means the user's
currency per MWh.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from typing import Optional, Tuple

import pint


@lru_cache(maxsize=1)
def registry() -> pint.UnitRegistry:
    path = resources.files("portfolio").joinpath("units.txt")
    with resources.as_file(path) as p:
        return pint.UnitRegistry(filename=str(p), autoconvert_offset_to_baseunit=False)


@dataclass(frozen=True)
class Dim:
    """A canonical dimension: its pint unit and how users read it."""

    key: str
    unit: str          # canonical pint unit expression
    words: str         # for messages: "a power", ...
    example: str       # for messages: "20 MW"


POWER = Dim("power", "MW", "a power", "20 MW")
ENERGY = Dim("energy", "MWh", "an energy", "40 MWh")
TIME = Dim("time", "h", "a duration", "1 h or 30 min")
FRACTION = Dim("fraction", "dimensionless", "a percentage", "95%")
PRICE = Dim("price", "1/MWh", "a price per energy", "9.5 per MWh")
RATE = Dim("rate", "1/h", "a percentage per time", "0.05% per h")
RAMP = Dim("ramp", "MW/h", "a power per time", "10 MW per min")

ALL = (POWER, ENERGY, TIME, FRACTION, PRICE, RATE, RAMP)

# The largest magnitude accepted per dimension, in canonical units: far beyond
# any plant or market (1 TW, 1 PWh, 1e8 money per MWh, which leaves room for
# currencies with small units), and small enough that the solver's arithmetic
# stays sound.  A value beyond is a typing error (lint P313, P411 for a
# series).  Durations, fractions and rates have their own range checks.
PLAUSIBLE = {POWER: (1e6, "MW"), ENERGY: (1e9, "MWh"), PRICE: (1e8, "per MWh"),
             RAMP: (1e7, "MW per h")}
FACTOR_PLAUSIBLE = 1e3     # a route's factor (a plain number)


class UnitProblem(Exception):
    """``kind`` is 'unknown' (the unit is not in the vocabulary) or 'dimension'."""

    def __init__(self, kind: str, message: str):
        super().__init__(message)
        self.kind = kind


def expression(unit: Optional[str], per: Optional[str]) -> str:
    if unit and per:
        return f"{unit}/{per}"
    if per:
        return f"1/{per}"
    return unit or "dimensionless"


def written(unit: Optional[str], per: Optional[str]) -> str:
    if unit and per:
        return f"{unit} per {per}"
    if per:
        return f"per {per}"
    return unit or "(no unit)"


@lru_cache(maxsize=512)
def _parse(expr: str):
    ureg = registry()
    return ureg.parse_units(expr)


@lru_cache(maxsize=2048)
def factor(unit: Optional[str], per: Optional[str], dims: Tuple[Dim, ...]) -> Tuple[Dim, float]:
    """Return (the matching dimension, factor to its canonical unit).

    Raises UnitProblem when a unit is unknown or matches none of ``dims``.
    """
    ureg = registry()
    for part in (unit, per):
        if part is None:
            continue
        try:
            _parse(part)
        except Exception:  # pint raises several kinds for junk
            raise UnitProblem("unknown", part) from None
    q = ureg.Quantity(1.0, _parse(expression(unit, per)))
    for dim in dims:
        target = _parse(dim.unit) if dim.unit != "dimensionless" else ureg.dimensionless
        if q.dimensionality == ureg.Quantity(1.0, target).dimensionality:
            return dim, float(q.to(target).magnitude)
    found = _dimension_words(q)
    raise UnitProblem("dimension", found)


def _dimension_words(q) -> str:
    for dim in ALL:
        ureg = registry()
        target = _parse(dim.unit) if dim.unit != "dimensionless" else ureg.dimensionless
        if q.dimensionality == ureg.Quantity(1.0, target).dimensionality:
            return dim.words
    return "a quantity of another kind"


def known_units() -> list:
    return ["MW", "kW", "GW", "MWh", "kWh", "GWh", "%", "h", "min", "s", "d"]
