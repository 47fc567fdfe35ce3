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
from typing import List, Mapping, Optional, Tuple

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


def case_key(p_case: M.Portfolio, options, memo: Optional[dict] = None) -> str:
    """The SHA-256 (hex) of what the case's result depends on: its model and the options.

    ``memo`` (:func:`shared_parts` of the study's portfolio, kept for one plan of its
    cases) caches the bytes each part of that portfolio feeds the hash: the cases share
    every part they do not vary (storages, sites, series), so each is walked once, not once
    a case.  What a case makes anew (its own model, a varied storage, a scenario's series)
    is never kept: a study of many year-long cases would hold each case's series bytes.
    The key is the same with or without it."""
    h = hashlib.sha256(KEY_VERSION.encode())
    _feed(h.update, p_case, memo)
    _feed(h.update, options, memo)
    return h.hexdigest()


_LEAVES = (str, float, int, bool, type(None))


def shared_parts(p: M.Portfolio) -> dict:
    """A memo for :func:`case_key` over the cases of ``p``'s studies: ``p``'s model parts
    (dataclass instances, reached as the key walks them), by identity; each holds its part,
    so that while the memo lives no other object takes its id."""
    memo: dict = {}

    def walk(x) -> None:
        if is_dataclass(x) and not isinstance(x, type):
            if id(x) in memo:
                return
            memo[id(x)] = (x, None)
            for f in fields(x):
                if f.name not in _SKIPPED:
                    walk(getattr(x, f.name))
        elif isinstance(x, Mapping):
            for v in x.values():
                walk(v)
        elif isinstance(x, (tuple, list)):
            for v in x:
                walk(v)

    walk(p)
    del memo[id(p)]            # the whole model: each case has its own
    return memo


def _feed(out, x, memo: Optional[dict] = None) -> None:
    t = type(x)
    if t in _LEAVES:                 # the most common, first (exact types: what repr shows)
        out(repr(x).encode())
    elif is_dataclass(x) and not isinstance(x, type):
        if memo is None or id(x) not in memo:
            _fields(out, x, memo)
            return
        got = memo[id(x)]
        if got[1] is None:
            parts: list = []
            _fields(parts.append, x, memo)
            got = memo[id(x)] = (x, b"".join(parts))
        out(got[1])
    elif isinstance(x, Mapping):
        out(b"{")
        for k in sorted(x, key=str):
            _feed(out, k, memo)
            _feed(out, x[k], memo)
        out(b"}")
    elif isinstance(x, (tuple, list)):
        out(b"(")
        for v in x:
            _feed(out, v, memo)
        out(b")")
    elif isinstance(x, np.ndarray):
        a = np.ascontiguousarray(x, dtype=float)
        out(f"a{a.shape}".encode())
        out(a.tobytes())
    elif isinstance(x, datetime):
        out(x.isoformat().encode())
    elif isinstance(x, float):
        out(repr(x).encode())
    elif isinstance(x, (str, int, bool)):
        out(repr(x).encode())
    else:
        raise TypeError(f"cannot hash a {type(x).__name__} into a case key")


def _fields(out, x, memo: Optional[dict]) -> None:
    out(f"<{type(x).__name__}".encode())
    for f in fields(x):
        if f.name not in _SKIPPED:
            out(f.name.encode())
            _feed(out, getattr(x, f.name), memo)
    out(b">")
