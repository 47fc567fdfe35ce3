"""Units: the language's vocabulary, parsed and converted by pint.

Quantities are converted once, here, to the canonical units of
:mod:`portfolio.model` (MW, MWh, h, fractions, money per MWh).  Money itself
carries no unit: a price is written ``9.5 per MWh`` and means the user's
currency per MWh.

pint owns the vocabulary (``portfolio/units.txt``) and every factor, but it is
slow to import, so it is imported only when needed: the factors of every
``unit per unit`` the vocabulary can spell are a table that pint computed
(``portfolio/units_table.py``, written by ``python -m portfolio.units``;
``tests/test_units.py`` checks that pint gives the same dimension and the same
float for every pair of words).  A word outside the table (a plural such as
``hours``, a typing error) goes to pint itself.
"""

from __future__ import annotations

import os
import sys
import tempfile
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Dict, Optional, Tuple

from . import units_table


@lru_cache(maxsize=1)
def registry():
    """pint's registry over the vocabulary (imports pint)."""
    import pint

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
# Water, for reservoirs declared in volume: converted to MWh and MW by the store's energy
# equivalent (MWh per m3) in the checker (check/quantities.py); the model never holds them.
VOLUME = Dim("volume", "m3", "a volume of water", "120 hm3")
FLOW = Dim("flow", "m3/h", "a flow of water", "40 m3 per s")
EQUIVALENT = Dim("equivalent", "MWh/m3", "an energy per volume", "0.25 kWh per m3")

ALL = (POWER, ENERGY, TIME, FRACTION, PRICE, RATE, RAMP, VOLUME, FLOW, EQUIVALENT)
_BY_KEY = {d.key: d for d in ALL}
_OTHER_KIND = "a quantity of another kind"

# The largest magnitude accepted per dimension, in canonical units: far beyond
# any plant or market (1 TW, 1 PWh, 1e8 money per MWh, which leaves room for
# currencies with small units), and small enough that the solver's arithmetic
# stays sound.  A value beyond is a typing error (lint P313, P411 for a
# series).  Durations, fractions and rates have their own range checks.
PLAUSIBLE = {POWER: (1e6, "MW"), ENERGY: (1e9, "MWh"), PRICE: (1e8, "per MWh"),
             RAMP: (1e7, "MW per h"), VOLUME: (1e13, "m3"), FLOW: (1e9, "m3 per h"),
             EQUIVALENT: (0.01, "MWh per m3")}   # 10 kWh per m3 is a head of some 4 km
FACTOR_PLAUSIBLE = 1e3     # a route's factor (a plain number)

# The words offered when a unit is not understood ("did you mean"), in the
# order they are offered; tests/test_units.py checks each is in units.txt.
SUGGESTED = ("MW", "kW", "GW", "MWh", "kWh", "GWh", "%", "h", "min", "s", "d", "m3", "hm3")


SECONDS_PER_HOUR = 3600.0


def water_m3(mwh, mwh_per_m3: float):
    """Content in MWh as water in m3, by a store's energy equivalent (the checker's inverse)."""
    return mwh / mwh_per_m3


def water_m3_per_s(mw, mwh_per_m3: float):
    """A flow of content in MW (MWh per h) as water in m3 per s."""
    return mw / (mwh_per_m3 * SECONDS_PER_HOUR)


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
    words = units_table.WORDS
    if (unit is None or unit in words) and (per is None or per in words):
        key, f = units_table.FACTORS.get((words.get(unit), words.get(per)), (None, 0.0))
        for dim in dims:
            if dim.key == key:
                return dim, f
        raise UnitProblem("dimension", _BY_KEY[key].words if key else _OTHER_KIND)
    return pint_factor(unit, per, dims)


def pint_factor(unit: Optional[str], per: Optional[str], dims: Tuple[Dim, ...]) -> Tuple[Dim, float]:
    """:func:`factor` asked of pint itself (what the table was made from)."""
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
    return _OTHER_KIND


def known_units() -> list:
    return list(SUGGESTED)


# ---------------------------------------------------------------------------
# the table, made by pint
# ---------------------------------------------------------------------------

def build_table() -> Tuple[Dict[str, str], Dict[tuple, Tuple[Optional[str], float]]]:
    """(every word of units.txt -> its unit's name, (name or None, name or None) ->
    (dimension key or None, factor)) as pint gives them."""
    ureg = registry()
    words = {w: ureg.get_name(w) for w in sorted(ureg._units)}
    names = [None] + sorted(set(words.values()))
    factors: Dict[tuple, Tuple[Optional[str], float]] = {}
    for unit in names:
        for per in names:
            try:
                dim, f = pint_factor(unit, per, ALL)
                factors[(unit, per)] = (dim.key, f)
            except UnitProblem:
                factors[(unit, per)] = (None, float("nan"))
    return words, factors


def write_table(path: Path) -> None:
    """Write the table module (atomically: a temporary file, then rename)."""
    words, factors = build_table()
    lines = ['"""The units table: written by `python -m portfolio.units` from units.txt with pint;',
             "do not edit.  tests/test_units.py checks that pint gives these factors.",
             '"""', "", "WORDS = {"]
    lines += [f"    {w!r}: {n!r}," for w, n in words.items()]
    lines += ["}", "", "# (unit, per) -> (dimension key, factor to its canonical unit); None: no dimension of ours",
              "FACTORS = {"]
    lines += [f"    {k!r}: ({d!r}, {f!r})," for k, (d, f) in factors.items() if d is not None]
    lines += ["}", ""]
    text = "\n".join(lines)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=".units_table.", suffix=".tmp")
    with os.fdopen(fd, "w", encoding="utf-8") as out:
        out.write(text)
    os.replace(tmp, path)


if __name__ == "__main__":      # python -m portfolio.units: rewrite the table after editing units.txt
    write_table(Path(__file__).with_name("units_table.py"))
    sys.exit(0)
