"""Storages: presets, the merged settings of a store, and what they mean.

A storage's settings are its preset's (and that preset's parent's, ...) with
its own over them.  :class:`StorageBuilder` reads the merged settings into a
:class:`portfolio.model.Storage` in canonical units; the state a store
carries in from before the horizon (``was ...``) is read by
:mod:`portfolio.check.state`.
"""

from __future__ import annotations

import math
from typing import Dict, Optional, Tuple

from .. import model as M
from .. import units as U
from ..diagnostics import (DuplicateSetting, EfficiencyCountedTwice, LimitInconsistent, MissingSetting,
                           OutOfRange, RuleTooLong, SocInconsistent, UnusedSetting, WrongDimension)
from ..spans import Span
from .context import Context
from .names import listed_once, suggest
from .quantities import Water, fmt
from .sources import series_spec
from .state import check_carried_state, steps_rounded_up
from .tree import Block, Quantity, said


# -- presets and merged settings ---------------------------------------------------------

def preset_settings(ck: Context, name: str, chain: Tuple[str, ...], at: Span,
                    use: bool = True) -> Optional[Dict[str, object]]:
    """The settings preset ``name`` gives, its parents' first; None when one is unknown or in a circle."""
    node = ck.presets.get(name)
    if node is None:
        return None
    if name in chain:
        circle = frozenset(chain[chain.index(name):])
        if circle not in ck.circles:
            ck.circles.add(circle)
            ck.sink.add(LimitInconsistent, at, f"presets take each other in a circle: {' -> '.join(chain + (name,))}")
        return None
    if use:
        ck.used_presets.add(name)
    merged: Dict[str, object] = {}
    if node.other is not None:
        parent = ck.names.ref(node.other, ("preset",), "preset")
        if not parent:
            return None
        got = preset_settings(ck, parent, chain + (name,), node.other.span, use)
        if got is None:
            return None
        merged.update(got)
    merged.update(storage_settings(ck, node.settings, f"preset '{name}'"))
    return merged


def check_preset_chain(ck: Context, st: Block) -> None:
    # Presets are checked through the storages that take them; a circle is reported once here.
    preset_settings(ck, st.name.text, (), st.name.span, use=False)


def storage_settings(ck: Context, nodes, what: str) -> Dict[str, object]:
    """Settings by key (each 'soc' part its own; 'round trip' is the efficiency); repeats reported."""
    out: Dict[str, object] = {}
    for n in nodes:
        parts = n.value if n.key == "soc" else (n,)
        for part in parts:
            key = "efficiency" if part.key == "round_trip" else part.key
            if key in out:
                ck.sink.add(DuplicateSetting, part.span, f"'{said(key)}' is given twice in {what}",
                            f"note: first given at {out[key].span}")
                continue
            out[key] = part
    if "supply" in out and what.startswith("preset"):
        ck.sink.add(LimitInconsistent, out["supply"].span,
                    "a preset cannot hold a supply (each supply needs its own name); put it in the storage")
        del out["supply"]
    return out


def check_storage(ck: Context, node: Block, site: str) -> Optional[M.Storage]:
    nm = node.name.text
    settings: Dict[str, object] = {}
    if node.other is not None:
        pname = ck.names.ref(node.other, ("preset",), "preset")
        got = preset_settings(ck, pname, (), node.other.span) if pname else None
        if got is None:
            # the preset is unknown or broken (reported): settings would be missing for no fault of this storage
            storage_settings(ck, node.settings, f"storage '{nm}'")
            return None
        settings.update(got)
    settings.update(storage_settings(ck, node.settings, f"storage '{nm}'"))
    return StorageBuilder(ck, nm, site, node.span, settings).build()


# -- one storage ---------------------------------------------------------------------------

class StorageBuilder:
    """Interprets a storage's merged settings (preset first, own settings over it).

    ``build`` reads them in a fixed order, each part a method: a later part
    depends on an earlier one (the state of charge on the energy, the carried
    state on the power limits and rules), and diagnostics come out in that order.
    """

    RULE_WORDS = (("charge_min", "minimum charge when running"),
                  ("discharge_min", "minimum discharge when running"),
                  ("min_run_h", "minimum run"), ("min_rest_h", "minimum rest"))

    def __init__(self, ck: Context, name: str, site: str, span: Span, s: Dict[str, object]):
        self.ck, self.name, self.site, self.span_, self.s = ck, name, site, span, s
        self.sink = ck.sink
        self.spans: Dict[str, Span] = {}
        self.vals: dict = {}
        self.water = Water(name, None)    # set by energy_equivalent(), read before any volume

    def q(self, key, dims, what):
        return self.ck.units.quantity(self.s[key].value, dims, f"{what} of '{self.name}'", self.water)

    def sp(self, key) -> Span:
        return self.s[key].span

    def build(self) -> Optional[M.Storage]:
        before = len(self.sink.errors)
        self.kind()
        self.energy_equivalent()
        energy = self.energy()
        if energy is None:
            return None
        self.power_limits()
        self.efficiency()
        self.state_of_charge(energy)
        self.loss_and_wear()
        self.run_and_rest()
        self.exclusive_from_rules()
        self.ramp()
        check_carried_state(self)
        self.spill()
        self.own_supply()
        self.charge_sources()
        self.cycle_limits()
        v = self.vals
        needs = (v.get("exclusive") or v.get("charge_min", 0.0) > 0 or v.get("discharge_min", 0.0) > 0
                 or v.get("min_run_h", 0) > 0 or v.get("min_rest_h", 0) > 0)
        if needs and v.get("charge_max", 0.0) <= 0 and v.get("discharge_max", 0.0) <= 0:
            self.sink.add(LimitInconsistent, self.span_, f"'{self.name}' has operating rules but can neither charge nor discharge")
        if len(self.sink.errors) > before:
            return None
        v = {k: x for k, x in v.items() if x is not None}
        return M.Storage(name=self.name, site=self.site, span=self.span_, spans=dict(self.spans), **v)

    def kind(self) -> None:
        if "kind" not in self.s:
            return
        kind = self.vals["kind"] = self.s["kind"].value.text
        self.spans["kind"] = self.sp("kind")
        if kind not in M.KNOWN_KINDS:
            hint = suggest(kind, M.KNOWN_KINDS)
            if hint:
                self.sink.add(UnusedSetting, self.sp("kind"), f"'{kind}' is not a kind the checks know{hint}",
                              "note: battery, reservoir and thermal decide which routes are allowed; any other label is 'other'")

    def energy(self) -> Optional[float]:
        if "energy" not in self.s:
            self.sink.add(MissingSetting, self.span_, f"storage '{self.name}' needs an 'energy' capacity, e.g. 'energy 40 MWh'")
            return None
        got = self.q("energy", (U.ENERGY,), "the energy")
        if got is None:
            return None
        energy = got[1]
        self.spans["energy"] = self.sp("energy")
        if energy <= 0:
            self.sink.add(OutOfRange, self.sp("energy"), f"the energy of '{self.name}' must be above zero, found {fmt(energy)} MWh")
            return None
        self.vals["energy"] = energy
        return energy

    def power_limits(self) -> None:
        ck, v, nm = self.ck, self.vals, self.name
        for key in ("charge", "discharge"):
            if key not in self.s:
                continue
            self.spans[f"{key}_max"] = self.sp(key)
            lim = self.s[key].value
            if lim.max is None:      # 'off'
                v[f"{key}_max"] = 0.0
                continue
            # a turbine's flow may be given in m3 per s; a pump's limit is its power (MW drawn)
            water = self.water if key == "discharge" else None
            mx = ck.units.power(lim.max, f"the {key} max of '{nm}'", water=water)
            if mx is None:
                continue
            v[f"{key}_max"] = mx
            if lim.min is not None:
                mn = ck.units.power(lim.min, f"the {key} min of '{nm}'", water=water)
                self.spans[f"{key}_min"] = lim.min.span
                if mn is not None:
                    if mn > mx:
                        self.sink.add(LimitInconsistent, lim.min.span,
                                      f"the {key} min when running ({fmt(mn)} MW) is above the {key} max ({fmt(mx)} MW)")
                    v[f"{key}_min"] = mn

    def efficiency(self) -> None:
        if "efficiency" not in self.s:
            return
        node, units, v = self.s["efficiency"], self.ck.units, self.vals
        self.spans["eta_charge"] = self.spans["eta_discharge"] = node.span
        if node.key == "round_trip":
            got = units.quantity(node.value, (U.FRACTION,), f"the round-trip efficiency of '{self.name}'")
            if got and self.fraction_ok(got[1], node.value, "round-trip efficiency"):
                v["eta_charge"] = v["eta_discharge"] = math.sqrt(got[1])
            self.efficiency_counted_twice(node)
            return
        for q, key in ((node.value.first, "eta_charge"), (node.value.second, "eta_discharge")):
            got = units.quantity(q, (U.FRACTION,), f"the {key[4:]} efficiency of '{self.name}'")
            if got and self.fraction_ok(got[1], q, f"{key[4:]} efficiency"):
                v[key] = got[1]
        self.efficiency_counted_twice(node)

    def efficiency_counted_twice(self, node) -> None:
        """A store declared in volume counts its content as the energy its plant delivers per m3
        (the equivalent includes head and turbine): a discharge efficiency below 100 % on top
        takes the turbine's losses off twice (docs/model.md, "Reservoir content")."""
        eta, eq = self.vals.get("eta_discharge"), self.water.mwh_per_m3
        if eq is None or eta is None or eta >= 1:
            return
        pct = fmt(eta * 100)
        at_site = fmt(eq * eta * 1000)
        self.sink.add(EfficiencyCountedTwice, node.span,
                      f"'{self.name}' is declared in volume: its energy equivalent ({fmt(eq * 1000)} kWh per m3) "
                      f"is already the energy its plant delivers, so a discharge efficiency of {pct} % counts "
                      "the plant's losses twice",
                      f"note: if {fmt(eq * 1000)} kWh per m3 is the water's energy before the turbine, "
                      f"write 'energy equivalent {at_site} kWh per m3' instead",
                      "fix: make the discharge efficiency 100 % (a pump's losses go in the charge efficiency)")

    def energy_equivalent(self) -> None:
        """'energy equivalent X per m3': the MWh of content one m3 of water is worth (what the
        plant delivers per m3 released, from its head and efficiency).  Read first: every
        volume and flow in the store's settings is converted with it."""
        if "energy_equivalent" not in self.s:
            return
        self.spans["mwh_per_m3"] = self.sp("energy_equivalent")
        got = self.ck.units.quantity(self.s["energy_equivalent"].value, (U.EQUIVALENT,),
                                     f"the energy equivalent of '{self.name}'")
        if got is None:
            self.water = Water(self.name, float("nan"))   # reported: its volumes are not reported again
            return
        if got[1] <= 0:
            self.sink.add(OutOfRange, self.s["energy_equivalent"].value.span,
                          f"the energy equivalent of '{self.name}' must be above zero, found {fmt(got[1])} MWh per m3")
            self.water = Water(self.name, float("nan"))
            return
        self.vals["mwh_per_m3"] = got[1]
        self.water = Water(self.name, got[1])

    def state_of_charge(self, energy: float) -> None:
        """A percentage means a share of the energy capacity."""
        s, spans = self.s, self.spans
        soc = {}
        for key in ("soc_min", "soc_max", "soc_start"):
            if key in s:
                val = self.energy_or_share(s[key].value, energy, f"the soc {key[4:]}")
                spans[key] = self.sp(key)
                if val is not None:
                    soc[key] = val
        lo = soc.get("soc_min", 0.0)
        hi = soc.get("soc_max", energy)
        start = soc.get("soc_start", lo)
        self.vals.update(soc_min=lo, soc_max=hi, soc_start=start)
        end_rule, end_val = M.END_AT_LEAST, start
        if "soc_end" in s:
            spans["end_rule"] = spans["end_value"] = self.sp("soc_end")
            rule = s["soc_end"].value
            if rule.key == "end_free":
                end_rule = M.END_FREE
            else:
                end_rule = M.END_AT_LEAST if rule.key == "end_at_least" else M.END_EQUAL
                if rule.value is not None:
                    got = self.energy_or_share(rule.value, energy, "the soc end")
                    end_val = got if got is not None else start
        self.vals.update(end_rule=end_rule, end_value=end_val)
        self.check_soc(lo, hi, start, end_rule, end_val, energy)

    def loss_and_wear(self) -> None:
        s, v = self.s, self.vals
        if "loss" in s:
            got = self.loss_per_hour()
            self.spans["loss_per_h"] = self.sp("loss")
            if got is not None:
                v["loss_per_h"] = got
        if "wear" in s:
            got = self.q("wear", (U.PRICE,), "the wear cost")
            self.spans["wear"] = self.sp("wear")
            if got is not None:
                if got[1] < 0:
                    self.sink.add(OutOfRange, self.sp("wear"), "the wear cost cannot be negative")
                v["wear"] = got[1]
        if "modes" in s:
            v["exclusive"] = s["modes"].value.text == "exclusive"
            self.spans["exclusive"] = self.sp("modes")

    def run_and_rest(self) -> None:
        ck, s, v = self.ck, self.s, self.vals
        step = ck.horizon.step_hours if ck.horizon else None
        for key, fld, word in (("min_run", "min_run_h", "run"), ("min_rest", "min_rest_h", "rest")):
            if key not in s:
                continue
            got = self.q(key, (U.TIME,), f"the minimum {word}")
            self.spans[fld] = self.sp(key)
            if got is None:
                continue
            if got[1] < 0:
                self.sink.add(OutOfRange, self.sp(key), f"the minimum {word} cannot be negative")
                continue
            v[fld] = got[1]
            if step:
                whole = steps_rounded_up(got[1], step)
                if ck.horizon and got[1] / step > ck.horizon.steps:
                    self.sink.add(RuleTooLong, self.sp(key), f"the minimum {word} is longer than the whole horizon")
                elif whole is not None:
                    self.sink.add(RuleTooLong, self.sp(key), f"the minimum {word} of {fmt(got[1])} h is not a whole "
                                  f"number of steps; it is rounded up to {whole} steps")
        for key, what in (("min_run", "holds each charge or discharge run on for at least {h}, but without "
                                      "a minimum output a run may go on at 0 MW: the rule then only keeps "
                                      "the other direction blocked for that long"),
                          ("min_rest", "keeps it idle for at least {h} after each run, but without a minimum "
                                       "output a run may go on at 0 MW instead of stopping: the rest then only "
                                       "separates a charge run from a discharge run")):
            h = v.get(f"{key}_h", 0)
            if h > 0 and v.get("charge_min", 0) <= 0 and v.get("discharge_min", 0) <= 0:
                self.sink.add(UnusedSetting, self.sp(key),
                              f"'{said(key)}' on '{self.name}' {what.format(h=f'{fmt(h)} h')}",
                              "note: add 'min P when running' to 'charge max' or 'discharge max' "
                              "if a run must deliver power")

    def exclusive_from_rules(self) -> None:
        """A minimum output, run or rest makes the modes exclusive (:func:`model.rules_make_exclusive`):
        charging and discharging at once could net below a minimum output, keep a run alive
        or skip a rest.  The rows that keep the modes apart then point at the first such rule."""
        v, spans = self.vals, self.spans
        rules = [(f, words) for f, words in self.RULE_WORDS if (v.get(f) or 0) > 0]
        if not rules or v.get("exclusive"):
            return
        if "modes" in self.s:   # 'modes free', or it would be exclusive already
            said_ = " and ".join(f"its {words}" for _, words in rules)
            self.sink.add(UnusedSetting, self.sp("modes"),
                          f"'modes free' is overridden on '{self.name}': {said_} "
                          f"make{'s' if len(rules) == 1 else ''} its modes exclusive",
                          "note: charging and discharging at once could net below a minimum output, "
                          "keep a run alive or skip a rest; remove 'modes free'")
        v["exclusive"] = True
        spans["exclusive"] = spans.get(rules[0][0], self.span_)

    def ramp(self) -> None:
        if "ramp" not in self.s:
            return
        got = self.q("ramp", (U.RAMP,), "the ramp limit")
        self.spans["ramp_mw_per_h"] = self.sp("ramp")
        if got is not None:
            if got[1] <= 0:
                self.sink.add(OutOfRange, self.sp("ramp"), "the ramp limit must be above zero")
            self.vals["ramp_mw_per_h"] = got[1]

    def spill(self) -> None:
        if "spill" not in self.s:
            return
        allowed, mx = self.s["spill"].value.first, self.s["spill"].value.second
        self.spans["spill_allowed"] = self.sp("spill")
        self.vals["spill_allowed"] = allowed.text == "allowed"
        if mx is not None:
            self.spans["spill_max"] = mx.span
            self.vals["spill_max"] = self.ck.units.power(mx, f"the spill max of '{self.name}'", water=self.water)
            if not self.vals["spill_allowed"]:
                self.sink.add(UnusedSetting, mx.span, "a spill max has no effect when spill is forbidden")

    def own_supply(self) -> None:
        if "supply" not in self.s:
            return
        node = self.s["supply"]
        self.spans["supply"] = node.span
        series_spec(self.ck.units, self.ck.specs, node.name, node.other, "power", node.span, self.water)
        if node.settings:
            self.sink.add(UnusedSetting, node.settings[0].span,
                          "a supply inside a storage always flows into that storage; 'into' and 'curtail' do not apply here "
                          "(use 'spill allowed' to let the storage shed what it cannot hold)")
        self.vals["supply"] = node.name.text

    def charge_sources(self) -> None:
        """'charge only from A, B': the store charges from those supplies alone, never from its
        site (so never from the grid).  Whether each feeds the store is checked once the
        supplies are known (:func:`portfolio.check.network.check_charging_sources`)."""
        if "charge_from" not in self.s:
            return
        node = self.s["charge_from"]
        self.spans["charge_sources"] = node.span
        names = listed_once(self.sink, ((self.ck.names.ref(w, ("supply",), "supply"), w.span) for w in node.value))
        if self.vals.get("charge_max", 0.0) <= 0:
            self.sink.add(LimitInconsistent, node.span,
                          f"'{self.name}' charges only from {', '.join(repr(n) for n in names) or 'its sources'}, "
                          "but it has no charge power",
                          "fix: give it 'charge max P' (the most it may take from those sources)")
        self.vals["charge_sources"] = tuple(names)

    def cycle_limits(self) -> None:
        """'cycles max N per day' and/or 'cycles max N' (over the horizon): plain numbers above zero."""
        if "cycles" not in self.s:
            return
        node = self.s["cycles"]
        seen: Dict[str, Span] = {}
        for lim in node.value:
            text = lim.number.text
            value = float(text)
            unit = lim.unit
            if unit is None:
                fld = "cycles_horizon"
            else:
                fld = "cycles_per_day" if self._per_day(unit) else None
                if fld is None:
                    self.sink.add(WrongDimension, lim.span,
                                  f"a cycle limit is a plain number (over the horizon) or a number 'per day'; "
                                  f"found '{text} {U.written(unit.unit, unit.per)}'",
                                  "note: e.g. 'cycles max 1 per day' or 'cycles max 300'")
                    continue
            if fld in seen:
                self.sink.add(DuplicateSetting, lim.span,
                              f"the {'daily' if fld == 'cycles_per_day' else 'horizon'} cycle limit of "
                              f"'{self.name}' is given twice", f"note: first given at {seen[fld]}")
                continue
            seen[fld] = lim.span
            self.spans[fld] = lim.span
            if not math.isfinite(value) or value <= 0:
                self.sink.add(OutOfRange, lim.span,
                              f"a cycle limit must be a finite number above zero, found {text}")
                continue
            self.vals[fld] = value
        if not seen:
            return
        v = self.vals
        if v.get("charge_max", 0.0) <= 0:
            self.sink.add(LimitInconsistent, node.span,
                          f"'{self.name}' cannot charge, so it has no cycles to limit",
                          "note: equivalent full cycles are counted for stores that charge (docs/model.md); "
                          "limit a reservoir's release with 'discharge max' or a route's 'max'")
        elif v.get("soc_max", 0.0) - v.get("soc_min", 0.0) <= 0:
            self.sink.add(LimitInconsistent, node.span,
                          f"'{self.name}' has no usable capacity (its soc min equals its soc max), "
                          "so a cycle limit cannot be measured",
                          "note: one equivalent full cycle is the energy between soc min and soc max")

    @staticmethod
    def _per_day(unit) -> bool:
        if unit.unit is not None or unit.per is None:
            return False
        try:
            dim, f = U.factor(None, unit.per, (U.RATE,))
        except U.UnitProblem:
            return False
        return abs(f * 24.0 - 1.0) < 1e-9

    # -- helpers --------------------------------------------------------------------------
    def loss_per_hour(self) -> Optional[float]:
        """``X% per P``: lose X % of the content over each period P, compounded.

        50 % per d is 1 - 0.5 ** (1/24) = 2.85 % per h, so a day loses exactly
        half; 0.5 % per h is 0.5 % per h.
        """
        node = self.s["loss"].value
        got = self.ck.units.quantity(node, (U.RATE,), f"the loss of '{self.name}'")
        if got is None:
            return None
        per = node.unit.per
        period_h = U.factor(per, None, (U.TIME,))[1] if per else 1.0
        share = got[1] * period_h               # the fraction lost per stated period
        if not 0 <= share < 1:
            self.sink.add(OutOfRange, self.sp("loss"), f"the loss of '{self.name}' must be from 0 % to below "
                          f"100 % per period, found {fmt(share * 100)} % per {per or 'h'}")
            return None
        return float(f"{1 - (1 - share) ** (1 / period_h):.12g}")

    def fraction_ok(self, val: float, node: Quantity, what: str) -> bool:
        if not 0 < val <= 1:
            self.sink.add(OutOfRange, node.span,
                          f"the {what} of '{self.name}' must be above 0 % and at most 100 %, found {fmt(val * 100)} %")
            return False
        return True

    def energy_or_share(self, qnode: Quantity, energy: float, what: str) -> Optional[float]:
        got = self.ck.units.quantity(qnode, (U.ENERGY, U.FRACTION), f"{what} of '{self.name}'", self.water)
        if got is None:
            return None
        dim, val = got
        if dim is U.FRACTION:
            if not 0 <= val <= 1:
                self.sink.add(OutOfRange, qnode.span, f"{what} of '{self.name}' must be from 0 % to 100 %, found {fmt(val * 100)} %")
                return None
            return val * energy
        if val < 0:
            self.sink.add(OutOfRange, qnode.span, f"{what} of '{self.name}' cannot be negative")
            return None
        return val

    def check_soc(self, lo, hi, start, end_rule, end_val, energy) -> None:
        sink, nm, sp = self.sink, self.name, self.spans
        eps = 1e-9
        if hi > energy + eps:
            sink.add(SocInconsistent, sp.get("soc_max", self.span_), f"the soc max of '{nm}' ({fmt(hi)} MWh) is above its energy capacity ({fmt(energy)} MWh)")
        if lo > hi + eps:
            sink.add(SocInconsistent, sp.get("soc_min", self.span_), f"the soc min of '{nm}' ({fmt(lo)} MWh) is above its soc max ({fmt(hi)} MWh)")
            return
        if not lo - eps <= start <= hi + eps:
            sink.add(SocInconsistent, sp.get("soc_start", sp.get("soc_min", self.span_)),
                     f"the soc start of '{nm}' ({fmt(start)} MWh) is outside its bounds {fmt(lo)}..{fmt(hi)} MWh")
            if "end_rule" not in sp:
                return  # the default end rule (at least start) would only repeat this
        if end_rule != M.END_FREE and end_val > hi + eps:
            sink.add(SocInconsistent, sp.get("end_rule", self.span_), f"the soc end of '{nm}' ({fmt(end_val)} MWh) is above its soc max ({fmt(hi)} MWh)")
        if end_rule == M.END_EQUAL and end_val < lo - eps:
            sink.add(SocInconsistent, sp.get("end_rule", self.span_), f"the soc end of '{nm}' ({fmt(end_val)} MWh) is below its soc min ({fmt(lo)} MWh)")
