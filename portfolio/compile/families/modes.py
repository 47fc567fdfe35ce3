"""Operating modes: binaries only where a rule needs them.

A storage needs modes when it is exclusive (no simultaneous charge and
discharge), has a minimum output when running (charge_min, discharge_min),
or a minimum run or rest.  c = total charge, d = discharge.

Variant "tight":

* exclusive only (no minimum output, run or rest) and both directions
  possible: ONE binary u[k,t] (1 = may charge):
      c <= charge_max * u                    (family ``mode_charge_on``)
      d <= discharge_max * (1 - u)           (family ``mode_discharge_on``)
* otherwise one binary per possible direction, uc[k,t] and ud[k,t] (a store
  with charge_max 0 has only ud):
      c <= charge_max * uc,   c >= charge_min * uc   (``mode_charge_on``, ``mode_charge_min``)
      d <= discharge_max * ud, d >= discharge_min * ud (``mode_discharge_on``, ``mode_discharge_min``)
      uc + ud <= 1   if exclusive  (``mode_exclusive``; a minimum output, run or
                     rest always makes a store exclusive: ``model.rules_make_exclusive``)

Variant "plain" always uses the two-binary form (for benchmarks).

A storage with only one possible direction and no other rule needs no
binary at all.  Publishes ``ctx.expr["mode_bins"][k] = {"charge": name or
None, "discharge": name or None}`` for :mod:`.run_rest`.
"""

from __future__ import annotations

from ..context import Ctx, Origin
from ._common import can_charge, can_discharge, charge_terms, discharge_terms, fmt


def build(ctx: Ctx) -> None:
    p = ctx.p
    one, two = [], []
    for k, s in p.storages.items():
        if not s.needs_modes:
            continue
        hc, hd = can_charge(ctx, k), can_discharge(ctx, k)
        only_exclusive = not (s.charge_min > 0 or s.discharge_min > 0
                              or s.min_run_h > 0 or s.min_rest_h > 0)
        if only_exclusive:
            if not (hc and hd):
                continue   # nothing to keep apart
            (one if ctx.variant == "tight" else two).append(k)
        else:
            two.append(k)
    bins = {}
    ctx.add_var("mode_u", one, binary=True)
    ctx.add_var("mode_charge", [k for k in two if can_charge(ctx, k)], binary=True)
    ctx.add_var("mode_discharge", [k for k in two if can_discharge(ctx, k)], binary=True)
    for k in one:
        s = p.storages[k]
        o = Origin(s.where("exclusive"), f'storage "{k}" may not charge and discharge at once')
        for t in ctx.steps:
            u = ctx.v("mode_u", k, t)
            ctx.row("mode_charge_on", (k, t), charge_terms(ctx, k, t) + [(-s.charge_max, u)],
                    hi=0.0, origin=o)
            ctx.row("mode_discharge_on", (k, t), discharge_terms(ctx, k, t) + [(s.discharge_max, u)],
                    hi=s.discharge_max, origin=o)
        bins[k] = {"one": "mode_u"}
    for k in two:
        s = p.storages[k]
        hc, hd = ctx.has("mode_charge", k), ctx.has("mode_discharge", k)
        rule_field = next((f for f in ("charge_min", "discharge_min", "min_run_h", "min_rest_h",
                                       "exclusive") if f in s.spans), "exclusive")
        o_on = Origin(s.where(rule_field), f'operating modes of storage "{k}"')
        o_cmin = Origin(s.where("charge_min"),
                        f'minimum charge of storage "{k}" when charging ({fmt(s.charge_min)} MW)')
        o_dmin = Origin(s.where("discharge_min"),
                        f'minimum discharge of storage "{k}" when discharging ({fmt(s.discharge_min)} MW)')
        o_excl = Origin(s.where("exclusive"), f'storage "{k}" may not charge and discharge at once')
        for t in ctx.steps:
            if hc:
                uc = ctx.v("mode_charge", k, t)
                ctx.row("mode_charge_on", (k, t), charge_terms(ctx, k, t) + [(-s.charge_max, uc)],
                        hi=0.0, origin=o_on)
                if s.charge_min > 0:
                    ctx.row("mode_charge_min", (k, t), charge_terms(ctx, k, t) + [(-s.charge_min, uc)],
                            lo=0.0, origin=o_cmin)
            if hd:
                ud = ctx.v("mode_discharge", k, t)
                ctx.row("mode_discharge_on", (k, t), discharge_terms(ctx, k, t) + [(-s.discharge_max, ud)],
                        hi=0.0, origin=o_on)
                if s.discharge_min > 0:
                    ctx.row("mode_discharge_min", (k, t),
                            discharge_terms(ctx, k, t) + [(-s.discharge_min, ud)], lo=0.0, origin=o_dmin)
            if hc and hd and s.exclusive:
                ctx.row("mode_exclusive", (k, t), [(1.0, uc), (1.0, ud)], hi=1.0, origin=o_excl)
        bins[k] = {"charge": "mode_charge" if hc else None,
                   "discharge": "mode_discharge" if hd else None}
    ctx.expr["mode_bins"] = bins
