"""Checking the state a storage carries in from before the horizon.

``was idle [for D]``, ``was charging [for D] at P``, ``was discharging [for D] at P``
(docs/language.md): what the store did just before step 0, so that minimum
run, minimum rest and ramp limits hold across the start of the horizon.
Interpreted for :class:`portfolio.check.storage.StorageBuilder`; the result goes to
``Storage.prior_mode``, ``prior_h`` and ``prior_net_mw``, and the span of the
``was`` statement to ``spans["prior_mode"]`` (every row built from it points
there).
"""

from __future__ import annotations

import math
from typing import Optional

from .. import model as M
from .. import units as U
from ..diagnostics import LimitInconsistent, OutOfRange, RuleTooLong, UnusedSetting

EPS = 1e-9


def steps_rounded_up(hours: float, step_h: float) -> Optional[int]:
    """The whole steps ``hours`` rounds up to, or None when it is whole already."""
    n = hours / step_h
    if not math.isfinite(n) or n > 1e15:          # far past any horizon: said elsewhere
        return None
    if abs(n - round(n)) > max(1e-6, 1e-9 * n):   # relative: 1 min is 0.0166666666667 h
        return math.ceil(n - 1e-9)
    return None


def check_carried_state(b) -> None:
    """Read ``b.s["was"]`` into ``b.vals``; report bad values on the user's text."""
    if "was" not in b.s:
        return
    ck, v, nm, sink = b.ck, b.vals, b.name, b.ck.sink
    node = b.s["was"].value
    was_span = b.sp("was")
    b.spans["prior_mode"] = was_span
    if node.mode is None:
        mode = M.PRIOR_IDLE
    else:
        mode = M.PRIOR_CHARGE if node.mode.text == "charging" else M.PRIOR_DISCHARGE
    word = M.PRIOR_WORDS[mode]
    ok = True
    hours = None
    rules = (v.get("min_run_h") or 0) > 0 or (v.get("min_rest_h") or 0) > 0
    dur_q = node.duration
    if dur_q is not None:
        b.spans["prior_h"] = dur_q.span
        got = ck.units.quantity(dur_q, (U.TIME,), f"the time '{nm}' was {word} before the horizon")
        if got is None:
            ok = False
        elif got[1] <= 0:
            sink.add(OutOfRange, dur_q.span, f"the time '{nm}' was {word} before the horizon must be "
                     f"above zero, found {got[1]:.6g} h",
                     f"note: leave out 'for ...' if '{nm}' was {word} for longer than any of its rules")
            ok = False
        else:
            hours = got[1]
            whole = steps_rounded_up(hours, ck.horizon.step_hours) if ck.horizon else None
            if whole is not None and rules:
                sink.add(RuleTooLong, dur_q.span, f"'{nm}' was {word} for {hours:.6g} h before the horizon, "
                         f"not a whole number of {ck.horizon.step_hours * 60:.6g}-minute steps; it counts as "
                         f"{whole} step{'s' if whole != 1 else ''}")
    net = 0.0
    out_q = node.output
    if out_q is not None:
        b.spans["prior_net_mw"] = out_q.span
        out = ck.units.power(out_q, f"the output of '{nm}' before the horizon")
        if out is None:
            ok = False
        else:
            ok = _output_fits(b, mode, out, out_q.span, was_span) and ok
            net = out if mode == M.PRIOR_DISCHARGE else -out
    if not ok:
        return
    if not rules and v.get("ramp_mw_per_h") is None:
        sink.add(UnusedSetting, was_span, f"'was {word}' has no effect on '{nm}': it has no run, rest or "
                 "ramp rule to carry across the start of the horizon")
    v.update(prior_mode=mode, prior_h=hours, prior_net_mw=net)


def _output_fits(b, mode, out, out_span, was_span) -> bool:
    """The output before the horizon is one the store could have run at."""
    sink, nm, v = b.ck.sink, b.name, b.vals
    key = "charge" if mode == M.PRIOR_CHARGE else "discharge"
    word = M.PRIOR_WORDS[mode]
    mx, mn = v.get(f"{key}_max") or 0.0, v.get(f"{key}_min") or 0.0
    if mx <= 0:
        sink.add(LimitInconsistent, was_span, f"'{nm}' was {word} before the horizon, but it cannot {key}",
                 f"note: give it a '{key} max', or write 'was idle'")
        return False
    if out > mx + EPS:
        sink.add(LimitInconsistent, out_span, f"the output of '{nm}' before the horizon ({out:.6g} MW) is above "
                 f"its {key} max ({mx:.6g} MW)")
        return False
    if out < mn - EPS:
        sink.add(LimitInconsistent, out_span, f"the output of '{nm}' before the horizon ({out:.6g} MW) is below "
                 f"its minimum {key} when running ({mn:.6g} MW)",
                 f"note: a store that was {word} ran at its minimum or more; write 'was idle' if it was off")
        return False
    return True
