"""Small helpers shared by the family modules."""

from __future__ import annotations

import math
from typing import Dict, List, Optional, Tuple

from .. import expressions as E
from ..context import Ctx, Origin
from ...model import PRIOR_CHARGE, PRIOR_DISCHARGE, PRIOR_IDLE, PRIOR_WORDS, Storage


def charge_terms(ctx: Ctx, k: str, t: int, coef: float = 1.0) -> List[Tuple[float, object]]:
    """Total charge of storage ``k`` at ``t`` (:func:`.expressions.total_charge`)."""
    parts = ctx.memo.get(("total_charge", k))
    if parts is None:
        parts = ctx.memo[("total_charge", k)] = E.total_charge(ctx.topo, k)
    return E.terms(ctx, parts, t, coef)


def discharge_terms(ctx: Ctx, k: str, t: int, coef: float = 1.0) -> List[Tuple[float, object]]:
    v = ctx.v(E.DISCHARGE, k, t)
    return [(coef, v)] if v is not None else []


def can_charge(ctx: Ctx, k: str) -> bool:
    return ctx.p.storages[k].charge_max > 0


def can_discharge(ctx: Ctx, k: str) -> bool:
    return ctx.p.storages[k].discharge_max > 0


def fmt(x: float) -> str:
    return f"{x:g}"


def whole_steps(hours: float, dt: float) -> int:
    """Whole steps, rounded UP (40 min on 30-min steps is 2 steps), as lint P310 says."""
    return int(math.ceil(hours / dt - 1e-9)) if hours > 0 else 0


def mode_before(s: Storage) -> Dict[str, float]:
    """u[-1] per mode ("charge", "discharge"): 1 for the mode the store was running in
    before the horizon, else 0 (also when no state is declared: idle and rested)."""
    return {m: 1.0 if s.prior_mode == m else 0.0 for m in (PRIOR_CHARGE, PRIOR_DISCHARGE)}


def steps_before(s: Storage, dt: float) -> Optional[int]:
    """Whole steps the store had been in its carried-in state (None: longer than any rule)."""
    return None if s.prior_h is None else whole_steps(s.prior_h, dt)


def prior_origin(k: str, s: Storage) -> Origin:
    """The origin of every row built from a store's carried-in state: its 'was' statement."""
    text = f'storage "{k}" was {PRIOR_WORDS[s.prior_mode]}'
    if s.prior_h is not None:
        text += f" for {fmt(s.prior_h)} h"
    if s.prior_mode != PRIOR_IDLE:
        text += f" at {fmt(abs(s.prior_net_mw))} MW"
    return Origin(s.where("prior_mode"), text + " before the horizon")
