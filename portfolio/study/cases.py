"""A study's cases: the combinations of its values, each applied to the checked model.

A case never edits text: :func:`apply` makes the case's model from the
checked one with ``dataclasses.replace``.  Varying a storage's ``energy``
scales its state-of-charge bounds, start and end value with it (they stay
the same shares of the capacity); an ``efficiency round trip`` splits evenly
(each way its square root), as the language does.

:func:`case_key` hashes what a case's result depends on — the case's model
(every setting and every series value, spans left out, so a comment or a
moved line does not count), the solve options — and names the case's folder
after it: a re-run skips a case whose key is unchanged.
"""

from __future__ import annotations

import hashlib
import itertools
import math
from dataclasses import dataclass, fields, is_dataclass, replace
from datetime import datetime
from typing import List, Mapping, Tuple

import numpy as np

from .. import model as M

KEY_VERSION = "study-case-2"     # change when what a case computes changes
_SKIPPED = ("span", "spans", "studies", "path", "source", "origin")


@dataclass(frozen=True)
class Case:
    """One case: ``settings`` ((target, setting, value), ...) and ``scenarios``
    ((series, scenario name, position in its set), ...), in the study's order."""

    index: int
    settings: Tuple[tuple, ...]
    scenarios: Tuple[tuple, ...]


def cases(study: M.Study) -> List[Case]:
    """Every case of ``study``: the cross product of its dimensions (the last varying
    fastest), or, paired, the i-th value of each together."""
    choices = [range(len(d.values)) for d in study.dimensions]
    combos = zip(*choices) if study.cases == M.CASES_PAIRED else itertools.product(*choices)
    out = []
    for i, combo in enumerate(combos):
        settings, scenarios = [], []
        for d, j in zip(study.dimensions, combo):
            if isinstance(d, M.Varied):
                settings.append((d.target, d.setting, d.values[j]))
            else:
                scenarios.append((d.series, d.names[j], j))
        out.append(Case(i, tuple(settings), tuple(scenarios)))
    return out


def apply(p: M.Portfolio, study: M.Study, case: Case) -> M.Portfolio:
    """The model of ``case``: ``p`` with the case's values and scenario series, and no studies."""
    storages, connections, sites = dict(p.storages), dict(p.connections), dict(p.sites)
    for target, setting, v in case.settings:
        if target in storages:
            storages[target] = _storage(storages[target], setting, v)
        else:
            group = connections if target in connections else sites
            field_name = "export_max" if setting == "export max" else "import_max"
            group[target] = replace(group[target], **{field_name: v})
    series = dict(p.series)
    sets = {d.series: d for d in study.dimensions if isinstance(d, M.ScenarioSet)}
    for name, scenario, j in case.scenarios:
        d = sets[name]
        series[name] = replace(series[name], values=np.asarray(d.values[j], dtype=float),
                               origin=f"scenario {scenario}", source=d.sources[j] if d.sources else None)
    return replace(p, storages=storages, connections=connections, sites=sites, series=series, studies={})


def _storage(s: M.Storage, setting: str, v: float) -> M.Storage:
    if setting == "energy":
        k = v / s.energy
        return replace(s, energy=v, soc_min=s.soc_min * k, soc_max=s.soc_max * k,
                       soc_start=s.soc_start * k, end_value=s.end_value * k)
    if setting == "charge max":
        return replace(s, charge_max=v)
    if setting == "discharge max":
        return replace(s, discharge_max=v)
    if setting == "efficiency round trip":
        each = math.sqrt(v)
        return replace(s, eta_charge=each, eta_discharge=each)
    if setting == "efficiency charge":
        return replace(s, eta_charge=v)
    if setting == "efficiency discharge":
        return replace(s, eta_discharge=v)
    raise ValueError(f"a study cannot vary '{setting}' of a storage")


def case_key(p_case: M.Portfolio, options) -> str:
    """The SHA-256 (hex) of what the case's result depends on: its model and the options."""
    h = hashlib.sha256(KEY_VERSION.encode())
    _feed(h, p_case)
    _feed(h, options)
    return h.hexdigest()


def _feed(h, x) -> None:
    if is_dataclass(x) and not isinstance(x, type):
        h.update(f"<{type(x).__name__}".encode())
        for f in fields(x):
            if f.name not in _SKIPPED:
                h.update(f.name.encode())
                _feed(h, getattr(x, f.name))
        h.update(b">")
    elif isinstance(x, Mapping):
        h.update(b"{")
        for k in sorted(x, key=str):
            _feed(h, k)
            _feed(h, x[k])
        h.update(b"}")
    elif isinstance(x, (tuple, list)):
        h.update(b"(")
        for v in x:
            _feed(h, v)
        h.update(b")")
    elif isinstance(x, np.ndarray):
        a = np.ascontiguousarray(x, dtype=float)
        h.update(f"a{a.shape}".encode())
        h.update(a.tobytes())
    elif isinstance(x, datetime):
        h.update(x.isoformat().encode())
    elif isinstance(x, float):
        h.update(repr(x).encode())
    elif x is None or isinstance(x, (str, int, bool)):
        h.update(repr(x).encode())
    else:
        raise TypeError(f"cannot hash a {type(x).__name__} into a case key")
