"""Quantities: a number with its unit, converted to the model's canonical units.

The unit vocabulary and the conversion belong to :mod:`portfolio.units`; this
module turns its answers into diagnostics on the user's text (an unknown
unit, a wrong dimension, a value no plant or market has).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Optional, Tuple

from .. import units as U
from ..diagnostics import Implausible, OutOfRange, Sink, UnknownUnit, VolumeWithoutEquivalent, WrongDimension
from ..syntax import fixed_keywords
from .names import suggest
from .tree import Quantity, Unit


def fmt(x: float) -> str:
    return f"{x:.6g}"


def unit_hint(unit: str) -> str:
    """'mw' -> did you mean 'MW'? (units are case-sensitive: 'mW' is not 'MW')."""
    same = [u for u in U.known_units() if u.casefold() == unit.casefold()]
    return f"; did you mean '{same[0]}'?" if same else suggest(unit, U.known_units())


@dataclass(frozen=True)
class Water:
    """A store's water conversion: where a store's setting means an energy or a power, a
    volume (m3, hm3) or a flow (m3 per s) is also understood, times the store's energy
    equivalent (MWh of content per m3).  The one place volumes become MWh and flows MW."""

    store: str
    mwh_per_m3: Optional[float]     # None: the store has no 'energy equivalent' (a volume is P318)

    @staticmethod
    def dims(dims: Tuple[U.Dim, ...]) -> Tuple[U.Dim, ...]:
        return dims + tuple(w for d, w in ((U.ENERGY, U.VOLUME), (U.POWER, U.FLOW)) if d in dims)

    def convert(self, sink: Sink, dim: U.Dim, value: float, span, what: str) -> Optional[Tuple[U.Dim, float]]:
        """(ENERGY or POWER, value x equivalent) for a volume or flow; other dimensions unchanged."""
        if dim not in (U.VOLUME, U.FLOW):
            return dim, value
        meant = U.ENERGY if dim is U.VOLUME else U.POWER
        if self.mwh_per_m3 is not None and math.isnan(self.mwh_per_m3):
            return None                 # the equivalent itself was wrong, and reported
        if self.mwh_per_m3 is None:
            sink.add(VolumeWithoutEquivalent, span,
                     f"{what} is {dim.words}, but '{self.store}' has no energy equivalent to turn it into "
                     f"{meant.words} ({meant.unit})",
                     f"fix: give '{self.store}' the energy its plant delivers per m3 released, "
                     f"e.g. 'energy equivalent {U.EQUIVALENT.example}', or write {meant.words}, e.g. {meant.example}")
            return None
        return meant, float(f"{value * self.mwh_per_m3:.12g}")


class Quantities:
    def __init__(self, sink: Sink):
        self.sink = sink

    def quantity(self, q: Quantity, dims: Tuple[U.Dim, ...], what: str,
                 water: Optional[Water] = None) -> Optional[Tuple[U.Dim, float]]:
        """Convert a quantity; report unknown units and wrong dimensions.  With ``water``, a
        volume or flow where an energy or power is meant is converted by the store's equivalent."""
        if water is not None:
            got = self.quantity(q, Water.dims(dims), what)
            return None if got is None else water.convert(self.sink, got[0], got[1], q.span, what)
        number, unit, per = q.number.text, q.unit.unit, q.unit.per
        value = float(number)
        try:
            dim, f = U.factor(unit, per, dims)
        except U.UnitProblem as p:
            if p.kind == "unknown":
                bad = str(p)
                if bad in fixed_keywords():    # 'energy 40 charge ...': the next keyword was read as the unit
                    self.sink.add(UnknownUnit, q.number.span,
                                  f"the number {number} for {what} needs a unit, e.g. {dims[0].example}")
                else:
                    self.sink.add(UnknownUnit, q.unit.span,
                                  f"unknown unit '{bad}'{unit_hint(bad)}",
                                  "note: units are MW, kW, GW, MWh, kWh, GWh, %, h, min, s, d (and m3, hm3 for water) "
                                  "and 'per' between them")
            else:
                want = " or ".join(d.words for d in dims)
                self.sink.add(WrongDimension, q.span,
                              f"{what} must be {want}, e.g. {dims[0].example}; "
                              f"'{number} {U.written(unit, per)}' is {p}")
            return None
        if not math.isfinite(value) or not math.isfinite(value * f):
            self.sink.add(OutOfRange, q.span, f"{what} must be a finite number")
            return None
        limit, shown = U.PLAUSIBLE.get(dim, (None, ""))
        if limit is not None and abs(value * f) > limit:
            self.sink.add(Implausible, q.span, f"{what} is {number} {U.written(unit, per)}, beyond any plausible "
                          f"plant or market (at most {limit:g} {shown}); check the number and its unit",
                          "note: values this large are typing errors, and they would wreck the solver's arithmetic")
            return None
        return dim, float(f"{value * f:.12g}")  # 95 % -> 0.95, not 0.9500000000000001

    def power(self, q: Quantity, what: str, allow_zero: bool = True,
              water: Optional[Water] = None) -> Optional[float]:
        got = self.quantity(q, (U.POWER,), what, water)
        if got is None:
            return None
        v = got[1]
        if v < 0 or (v == 0 and not allow_zero):
            self.sink.add(OutOfRange, q.span,
                          f"{what} must be {'positive' if not allow_zero else 'zero or more'}, found {fmt(v)} MW")
            return None
        return v

    def unit_factor(self, unit: Unit, dims, what: str, water: Optional[Water] = None) -> Optional[float]:
        """The factor a series' unit converts by to its canonical unit (with ``water``, a flow's
        factor includes the store's energy equivalent: m3 per s -> MW)."""
        try:
            if water is not None:
                dim, f = U.factor(unit.unit, unit.per, Water.dims(dims))
                got = water.convert(self.sink, dim, f, unit.span, what)
                return None if got is None else got[1]
            return U.factor(unit.unit, unit.per, dims)[1]
        except U.UnitProblem as p:
            if p.kind == "unknown":
                self.sink.add(UnknownUnit, unit.span, f"unknown unit '{p}'{unit_hint(str(p))}")
            else:
                self.sink.add(WrongDimension, unit.span,
                              f"{what} must be in units of {dims[0].words}, e.g. {dims[0].example}; "
                              f"'{U.written(unit.unit, unit.per)}' is {p}")
            return None
