"""Studies: ``study NAME { vary ...  scenario NAME for SERIES SOURCE ...  cases cross|paired }``.

Checked after the declarations and the portfolio's own series, since what a
study varies must exist: every fault is a coded diagnostic at its text
(P209 a target that does not exist, P302 a value of the wrong dimension,
P314 an empty range or list, P315 a value its setting does not allow, P316
paired lists of different lengths, P417 a scenario series that does not
cover the horizon).  The result is a :class:`portfolio.model.Study` of plain
values in canonical units; nothing is run here (portfolio.study runs it).
"""

from __future__ import annotations

import math
from typing import Dict, List, Optional

from .. import model as M
from .. import units as U
from ..diagnostics import (DuplicateName, DuplicateSetting, ScenarioHorizon, SeriesCoverage, Sink,
                           StudyEmptyRange, StudyTargetUnknown, StudyUnpaired, StudyValueOutOfRange)
from ..series import load_series
from .names import a, suggest
from .quantities import fmt
from .sources import series_spec
from .tree import Block, ListSource, Scenario, ValueRange, Vary, said

MAX_VALUES = 100_000       # values of one setting
MAX_CASES = 1_000_000      # cases of one study

_DIMS = {"MWh": U.ENERGY, "MW": U.POWER, "%": U.FRACTION}
_DECL_FIELDS = {"storage": "storages", "connection": "connections", "site": "sites"}


def check_studies(ck, stmts, found: dict, series: Dict[str, M.Series]) -> Dict[str, M.Study]:
    """The studies of the file, checked against the declarations in ``found`` and ``series``."""
    out: Dict[str, M.Study] = {}
    for st in stmts:
        if st.key == "study":
            study = _study(ck, st, found, series)
            if study is not None and st.name.text not in out:
                out[st.name.text] = study
    return out


def _study(ck, st: Block, found: dict, series: Dict[str, M.Series]) -> Optional[M.Study]:
    dims: List[object] = []
    cases, cases_node = M.CASES_CROSS, None
    seen: Dict[tuple, object] = {}
    groups: Dict[str, list] = {}       # series -> its scenario lines, in the order written
    order: List[object] = []           # Vary nodes and series names, in the order first written
    ok = True
    for item in st.settings:
        if item.key == "cases":
            if cases_node is not None:
                ck.sink.add(DuplicateSetting, item.span, f"study '{st.name.text}' says 'cases' twice",
                            f"note: first said at {cases_node.span}")
                ok = False
            cases, cases_node = item.value.text, item
            continue
        if isinstance(item, Scenario):
            key = (item.series.text, item.name.text)
            if key in seen:
                ck.sink.add(DuplicateName, item.name.span, f"scenario '{item.name.text}' of '{item.series.text}' "
                            "is named twice", f"note: first named at {seen[key].span}")
                ok = False
                continue
            seen[key] = item
            if item.series.text not in groups:
                groups[item.series.text] = []
                order.append(item.series.text)
            groups[item.series.text].append(item)
            continue
        key = (item.target.text, said(item.setting.key))
        if key in seen:
            ck.sink.add(DuplicateSetting, item.span, f"study '{st.name.text}' varies '{' '.join(key)}' twice",
                        f"note: first varied at {seen[key].span}")
            ok = False
            continue
        seen[key] = item
        order.append(item)
    if not order:
        ck.sink.add(StudyEmptyRange, st.span, f"study '{st.name.text}' varies nothing",
                    "note: add e.g. 'vary cells energy from 20 MWh to 60 MWh step 10 MWh'")
        return None
    for thing in order:
        dim = _vary(ck, thing, found) if isinstance(thing, Vary) else _scenarios(ck, thing, groups[thing], series)
        if dim is None:
            ok = False
        else:
            dims.append(dim)
    if not ok:
        return None
    sizes = [len(d.values) for d in dims]
    if cases == M.CASES_PAIRED and len(set(sizes)) > 1:
        ck.sink.add(StudyUnpaired, cases_node.span,
                    f"study '{st.name.text}' pairs its values, but they come in lists of "
                    f"{', '.join(str(n) for n in sizes)}",
                    *(f"note: {_label(d)} has {len(d.values)}" for d in dims),
                    "fix: give every list the same length, or say 'cases cross' for every combination")
        return None
    count = sizes[0] if cases == M.CASES_PAIRED else math.prod(sizes)
    if count > MAX_CASES:
        ck.sink.add(StudyValueOutOfRange, st.name.span,
                    f"study '{st.name.text}' has {count:,} cases, more than {MAX_CASES:,}",
                    "note: split it into several studies, or vary fewer values at once")
        return None
    return M.Study(name=st.name.text, span=st.span, dimensions=tuple(dims), cases=cases)


def _label(dim) -> str:
    if isinstance(dim, M.Varied):
        return f"{dim.target} {dim.setting}"
    return f"the scenarios for {dim.series}"


# ---- vary ----------------------------------------------------------------------------

def _vary(ck, item: Vary, found: dict) -> Optional[M.Varied]:
    setting = said(item.setting.key)
    kinds, unit = M.VARIED[setting]
    nm = item.target.text
    decl_kind = ck.names[nm].kind if nm in ck.names else None
    if decl_kind is None:
        pool = [n for n, d in ck.names.decls.items() if d.kind in kinds]
        ck.sink.add(StudyTargetUnknown, item.target.span,
                    f"the study varies '{setting}' of '{nm}', which is not declared{suggest(nm, pool)}")
        return None
    if decl_kind not in kinds:
        having = " or ".join(a(k) for k in kinds)
        ck.sink.add(StudyTargetUnknown, item.setting.span,
                    f"'{nm}' is {a(decl_kind)}, which has no '{setting}' to vary ({having} has)",
                    f"note: '{nm}' is declared at {ck.names[nm].span}")
        return None
    decl = found[_DECL_FIELDS[decl_kind]].get(nm)
    if decl is None:             # its own declaration had an error, already reported
        return None
    values = _values(ck, item, setting, unit)
    if values is None:
        return None
    if not _allowed(ck, item, decl, setting, values):
        return None
    return M.Varied(target=nm, kind=decl_kind, setting=setting, values=values, span=item.span)


def _values(ck, item: Vary, setting: str, unit: str) -> Optional[tuple]:
    dim = _DIMS[unit]
    what = f"a value of '{item.target.text} {setting}'"
    vals = item.values
    if isinstance(vals, ValueRange):
        got = [ck.units.quantity(q, (dim,), what) for q in (vals.low, vals.high, vals.step)]
        if any(g is None for g in got):
            return None
        low, high, step = (g[1] for g in got)
        if step <= 0 or high < low:
            why = (f"its step is {fmt(step)} {unit}, not above zero" if step <= 0 else
                   f"it runs down from {fmt(low)} to {fmt(high)} {unit}")
            ck.sink.add(StudyEmptyRange, vals.span, f"the range of '{item.target.text} {setting}' is empty: {why}",
                        "fix: write 'from LOW to HIGH step S' with LOW at most HIGH and S above zero")
            return None
        n = int(math.floor((high - low) / step * (1 + 1e-12) + 1e-9)) + 1
        if n > MAX_VALUES:
            ck.sink.add(StudyValueOutOfRange, vals.span,
                        f"the range of '{item.target.text} {setting}' has {n:,} values, more than {MAX_VALUES:,}")
            return None
        return tuple(float(f"{low + i * step:.12g}") for i in range(n))
    assert isinstance(vals, ListSource)
    if not vals.numbers:
        ck.sink.add(StudyEmptyRange, vals.span, f"the list of values of '{item.target.text} {setting}' is empty",
                    "fix: give at least one value, e.g. 'values [20, 40] MW'")
        return None
    factor = ck.units.unit_factor(vals.unit, (dim,), what)
    if factor is None:
        return None
    out = []
    for w in vals.numbers:
        v = float(w.text) * factor
        if not math.isfinite(v):
            ck.sink.add(StudyValueOutOfRange, w.span, f"{what} must be a finite number")
            return None
        out.append(float(f"{v:.12g}"))
    if len(out) > MAX_VALUES:
        ck.sink.add(StudyValueOutOfRange, vals.span, f"the list of '{item.target.text} {setting}' has "
                    f"{len(out):,} values, more than {MAX_VALUES:,}")
        return None
    return tuple(out)


def _allowed(ck, item: Vary, decl, setting: str, values: tuple) -> bool:
    """Each value must be one the setting allows on this declaration (as the checker
    would have required had it been written there)."""
    unit = M.VARIED[setting][1]
    shown = (lambda v: f"{fmt(v * 100)} %") if unit == "%" else (lambda v: f"{fmt(v)} {unit}")
    limit = U.PLAUSIBLE.get(_DIMS[unit], (None, ""))[0]
    for v in values:
        why = None
        if unit == "%":
            if not 0 < v <= 1:
                why = "an efficiency must be above 0 % and at most 100 %"
        elif setting == "energy":
            if v <= 0:
                why = "a storage's energy must be above zero"
        elif v < 0:
            why = "a power limit must be zero or more"
        elif setting == "charge max" and 0 < v < decl.charge_min:
            why = f"it is below the store's minimum charge when running, {fmt(decl.charge_min)} MW"
        elif setting == "discharge max" and 0 < v < decl.discharge_min:
            why = f"it is below the store's minimum discharge when running, {fmt(decl.discharge_min)} MW"
        elif setting == "charge max" and v == 0 and decl.charge_sources:
            why = "the store charges only from its supplies ('charge only from'), which needs a charge max"
        if why is None and limit is not None and abs(v) > limit:
            why = f"it is beyond any plausible plant (at most {limit:g} {unit})"
        if why is not None:
            ck.sink.add(StudyValueOutOfRange, item.values.span,
                        f"the study gives '{item.target.text} {setting}' the value {shown(v)}: {why}")
            return False
    return True


# ---- scenarios -----------------------------------------------------------------------

def _scenarios(ck, nm: str, items: List[Scenario], series: Dict[str, M.Series]) -> Optional[M.ScenarioSet]:
    base = series.get(nm)
    if base is None:
        pool = [n for n, d in ck.names.decls.items() if d.kind in ("price", "supply", "demand")]
        known = nm in ck.names
        ck.sink.add(StudyTargetUnknown, items[0].series.span,
                    f"the study gives scenarios for '{nm}', which is " +
                    (f"{a(ck.names[nm].kind)}, not a series (a price, supply or demand)" if known
                     else f"not declared{suggest(nm, pool)}"))
        return None
    specs, ok = [], True
    for sc in items:
        ok = series_spec(ck.units, specs, sc.name, sc.source, base.quantity, sc.span) is not None and ok
    if not ok:
        return None
    own = Sink()
    loaded = load_series(specs, ck.horizon, ck.base_dir, own, confine=ck.confine)
    for d in own.items:
        if d.code == SeriesCoverage.code:     # a scenario of another period than the portfolio's
            ck.sink.add(ScenarioHorizon, d.span,
                        f"scenario {d.message.removeprefix('series ')} (scenarios of '{nm}' must cover "
                        f"the portfolio's horizon, as '{nm}' does)", *d.notes)
        else:
            ck.sink.items.append(d)
    if own.has_errors or len(loaded) != len(specs):
        return None
    names = tuple(s.name for s in specs)
    return M.ScenarioSet(series=nm, names=names, values=tuple(loaded[n].values for n in names),
                         sources=tuple(loaded[n].source for n in names), span=items[0].span)
