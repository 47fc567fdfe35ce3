"""How a horizon is cut into windows: :class:`Windows`, :class:`Foresight`, their checks and plan.

A window commits ``commit_h`` hours and sees ``overlap_h`` more (clipped at
the horizon's end); windows start every ``commit_h`` hours.  With limited
foresight (:class:`Foresight`) a window sees ``foresight_h`` hours from its
start and nothing of the whole horizon.  Mistakes are :class:`WindowsError`
with a stable code (docs/windows.md lists them); the CLI prints them as
``portfolio: error: W00n: ...`` and exits 2.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import List, Optional, Tuple, Union

import numpy as np

from ..units import PLAUSIBLE, PRICE

END_VALUE = "value"      # non-last windows value what is left in store at the LP's marginal value
END_TARGET = "target"    # non-last windows must end with at least the LP's state of charge
END_PIN = "pin"          # non-last windows end exactly at the LP's state of charge (no overlap):
#                          windows then do not wait for each other, so they can run in parallel
END_MODES = (END_VALUE, END_TARGET, END_PIN)

# limited foresight: what is left in store at a window's end is worth ...
HOLD = "hold"            # ... it must be at least the level the portfolio's end asks for (its
#                          'end at least' / 'end exactly' value), else what the portfolio started with
FREE = "free"            # ... nothing
OPEN = "open"            # (a fallback only) nothing, and no floor either: cut.reach_floor

DAY_H = 24.0

# the largest money value per MWh a window's end may take (either sign): the language's own
# limit for a price (portfolio.units.PLAUSIBLE, lint P313); beyond it a value is a typing
# error and would wreck the solver's arithmetic
END_VALUE_LIMIT = PLAUSIBLE[PRICE][0]

# where the bound (and, for perfect foresight, the value of what windows leave in store) comes from
BOUND_WHOLE = "whole"    # the whole horizon's LP relaxation, solved once (exact, memory ~ the horizon)
BOUND_SPLIT = "split"    # by pieces (portfolio/windows/split.py): never the whole horizon at once
BOUND_AUTO = "auto"      # split above SPLIT_ABOVE storage-steps, else whole
BOUND_METHODS = (BOUND_AUTO, BOUND_WHOLE, BOUND_SPLIT)
SPLIT_ABOVE = 200_000    # storages x steps: 10 x 8,760 h stays whole, 20 x 35,040 quarter-hours splits

# codes (stable; docs/windows.md)
NOT_WHOLE = "W001"       # a duration is not a whole number of steps
TOO_LONG = "W002"        # commit longer than the horizon
NOT_POSITIVE = "W003"    # commit not above zero (or below one step), or overlap negative
UNREADABLE = "W004"      # a duration text cannot be read
BAD_END = "W005"         # unknown end-of-window rule
SHORT_SIGHT = "W006"     # foresight shorter than the commit length, or longer than the horizon
PIN_OVERLAP = "W007"     # pinned ends with an overlap, or parallel windows without pinned ends
SPLIT_NEEDS = "W008"     # an unknown bound method, or by pieces with ends/workers that need the LP's soc
CODES = {
    NOT_WHOLE: "a window length is not a whole number of steps",
    TOO_LONG: "the commit length is longer than the horizon",
    NOT_POSITIVE: "the commit length is not above zero (or shorter than one step), or the overlap "
                  "after it is negative",
    UNREADABLE: "a window length cannot be read (write e.g. 24h, 1d, 90min, 1w)",
    BAD_END: "the end-of-window rule is not one of 'value', 'target', 'pin' (or, with limited "
             "foresight, 'hold', 'free' or a money value per MWh from -100,000,000 to "
             "100,000,000)",
    SHORT_SIGHT: "the foresight is shorter than the commit length, or longer than the horizon",
    PIN_OVERLAP: "windows in parallel (workers) need ends 'pin', and windows with ends 'pin' or in "
                 "parallel take no overlap",
    SPLIT_NEEDS: "the bound is not one of 'whole', 'split', 'auto', or it is 'split' (by pieces, no "
                 "state of charge to aim at) with ends 'target' or 'pin' or with windows in parallel "
                 "(workers), which need the whole horizon's LP ('whole')",
}


class WindowsError(ValueError):
    """A window setting that cannot be used: ``code`` and a message in plain words."""

    def __init__(self, code: str, message: str):
        super().__init__(f"{code}: {message}")
        self.code = code
        self.message = message


@dataclass(frozen=True)
class Windows:
    """Dispatch by windows: commit ``commit_h`` hours, seeing ``overlap_h`` more
    (None: one day); ``end`` is how a window that is not the last values its
    end state (:data:`END_VALUE` or :data:`END_TARGET`)."""

    commit_h: float = DAY_H
    overlap_h: Optional[float] = None
    end: str = END_VALUE
    workers: int = 1          # windows solved at once (processes); above 1 needs ``end="pin"``
    bound: str = BOUND_AUTO   # BOUND_WHOLE, BOUND_SPLIT or BOUND_AUTO (:func:`bound_method`)

    @property
    def overlap(self) -> float:
        if self.overlap_h is None:
            return 0.0 if self.end == END_PIN else DAY_H
        return float(self.overlap_h)


@dataclass(frozen=True)
class Foresight:
    """Limited foresight: each window commits ``commit_h`` hours seeing ``foresight_h`` hours
    from its start, and nothing else of the horizon; what is left in store at a window's end
    is worth ``end``: :data:`HOLD` (keep at least the level the portfolio's own end asks
    for, or, when that is free, what the portfolio started with: each day gives back what
    the first began with — common practice for daily cycling), :data:`FREE` (nothing) or a
    number (money per MWh, the same for every storage)."""

    foresight_h: float = 2 * DAY_H
    commit_h: float = DAY_H
    end: Union[str, float] = HOLD
    bound: str = BOUND_AUTO   # the perfect-foresight bound it is compared with (:func:`bound_method`)

    @property
    def overlap(self) -> float:
        return float(self.foresight_h) - float(self.commit_h)


def _steps(hours: float, dt: float, what: str) -> int:
    n = hours / dt
    if not math.isfinite(n) or abs(n - round(n)) > 1e-9 * max(1.0, abs(n)):
        raise WindowsError(NOT_WHOLE, f"the {what} ({hours:g} h) is not a whole number of "
                                      f"{dt * 60:g}-minute steps")
    return int(round(n))


def plan(spec, steps: int, step_hours: float) -> List[Tuple[int, int, int]]:
    """``(start, commit, length)`` of every window of ``spec`` (:class:`Windows` or
    :class:`Foresight`), in steps; raises :class:`WindowsError`."""
    sighted = isinstance(spec, Foresight)
    if sighted:
        _check_foresight(spec, steps, step_hours)
    else:
        _check_windows(spec)
    if not (spec.commit_h > 0):
        raise WindowsError(NOT_POSITIVE, f"the commit length must be above zero (got "
                                         f"{spec.commit_h:g} h): each window keeps that much of "
                                         f"its schedule")
    if not sighted and not (spec.overlap >= 0):
        raise WindowsError(NOT_POSITIVE, f"the overlap (what a window sees after its commit "
                                         f"length) must not be negative (got {spec.overlap:g} h)")
    horizon_h = steps * step_hours
    if spec.commit_h > horizon_h * (1 + 1e-9):
        raise WindowsError(TOO_LONG, f"the commit length ({spec.commit_h:g} h) is longer than the "
                                     f"horizon ({horizon_h:g} h)")
    commit = _steps(float(spec.commit_h), step_hours, "commit length")
    if commit < 1:
        raise WindowsError(NOT_POSITIVE, f"the commit length ({spec.commit_h:g} h) is shorter than "
                                         f"one {step_hours * 60:g}-minute step")
    if sighted:
        overlap = _steps(float(spec.foresight_h), step_hours, "foresight") - commit
    else:
        # seeing past the horizon's end is seeing to it: an overlap is clipped there anyway
        overlap = _steps(min(spec.overlap, horizon_h), step_hours, "overlap")
    out = []
    for start in range(0, steps, commit):
        keep = min(commit, steps - start)
        out.append((start, keep, min(steps - start, commit + overlap)))
    return out


def _check_bound(spec) -> None:
    if spec.bound not in BOUND_METHODS:
        raise WindowsError(SPLIT_NEEDS, f"unknown bound {spec.bound!r} (use 'whole', 'split' or 'auto')")
    if spec.bound != BOUND_SPLIT or not isinstance(spec, Windows):
        return
    if isinstance(spec.workers, int) and spec.workers > 1:
        raise WindowsError(SPLIT_NEEDS, f"windows in parallel ({spec.workers} workers) each start "
                                        f"and end at the whole horizon's LP state of charge, which "
                                        f"the bound by pieces ('split') never solves: use the bound "
                                        f"'whole' with workers, or solve the windows one at a time "
                                        f"(no workers)")
    if spec.end in (END_TARGET, END_PIN):
        raise WindowsError(SPLIT_NEEDS, f"the end-of-window rule '{spec.end}' aims at the whole "
                                        f"horizon's LP state of charge, which the bound by pieces "
                                        f"('split') never solves: use the end rule 'value' with it, "
                                        f"or the bound 'whole'")


def bound_method(spec, p) -> str:
    """BOUND_WHOLE or BOUND_SPLIT for ``spec`` on ``p``: as asked, or with ``auto`` split when the
    horizon has more than :data:`SPLIT_ABOVE` storage-steps (and the ends do not need the whole
    LP's state of charge)."""
    if spec.bound != BOUND_AUTO:
        return spec.bound
    if isinstance(spec, Windows) and spec.end in (END_TARGET, END_PIN):
        return BOUND_WHOLE
    size = max(1, len(p.storages)) * p.horizon.steps
    return BOUND_SPLIT if size > SPLIT_ABOVE else BOUND_WHOLE


def _check_windows(spec: Windows) -> None:
    _check_bound(spec)
    if spec.end not in END_MODES:
        raise WindowsError(BAD_END, f"unknown end-of-window rule {spec.end!r} (use 'value', 'target' "
                                    f"or 'pin')")
    if not isinstance(spec.workers, int) or spec.workers < 1:
        raise WindowsError(NOT_POSITIVE, f"the number of workers must be a whole number above zero "
                                         f"(got {spec.workers!r})")
    if spec.workers > 1 and spec.end != END_PIN:
        raise WindowsError(PIN_OVERLAP, f"windows in parallel ({spec.workers} workers) need pinned "
                                        f"ends (end 'pin'), not {spec.end!r}: a window must know where "
                                        f"the one before it ends without waiting for it")
    if spec.end == END_PIN and spec.overlap != 0:
        who = (f"windows in parallel ({spec.workers} workers)" if spec.workers > 1 else
               "windows with the end rule 'pin'")
        raise WindowsError(PIN_OVERLAP, f"{who} end exactly at the LP's state of charge, so they "
                                        f"take no overlap (got {spec.overlap:g} h; write e.g. "
                                        f"'1d' or '1d/0h')")


def _check_foresight(spec: Foresight, steps: int, step_hours: float) -> None:
    _check_bound(spec)
    end = spec.end
    if isinstance(end, (int, float)) and not isinstance(end, bool):
        if not math.isfinite(end) or abs(end) > END_VALUE_LIMIT:
            why = "not a finite number" if not math.isfinite(end) else "beyond any plausible market"
            raise WindowsError(BAD_END, f"the end-of-window value {end:g} per MWh is {why}: write "
                                        f"a money value per MWh from "
                                        f"{-END_VALUE_LIMIT:,.0f} to {END_VALUE_LIMIT:,.0f} (or "
                                        f"'hold' or 'free')")
    elif end not in (HOLD, FREE):
        raise WindowsError(BAD_END, f"unknown end-of-window rule {end!r} with limited foresight "
                                    f"(use 'hold', 'free' or a money value per MWh)")
    if spec.commit_h > 0 and spec.foresight_h < spec.commit_h:
        raise WindowsError(SHORT_SIGHT, f"the foresight ({spec.foresight_h:g} h) is shorter than the "
                                        f"commit length ({spec.commit_h:g} h): a window cannot commit "
                                        f"hours it does not see")
    if spec.foresight_h > steps * step_hours + 1e-9:
        raise WindowsError(SHORT_SIGHT, f"the foresight ({spec.foresight_h:g} h) is longer than the "
                                        f"horizon ({steps * step_hours:g} h): dispatch without windows")


_UNITS = {"min": 1 / 60, "m": 1 / 60, "h": 1.0, "d": 24.0, "w": 168.0}
_DURATION = re.compile(r"^\s*([0-9]+(?:\.[0-9]+)?)\s*(min|m|h|d|w)\s*$")


def hours(text: str) -> float:
    """``24h``, ``1d``, ``90min``, ``1w`` -> hours; raises :class:`WindowsError`."""
    m = _DURATION.match(text or "")
    if not m:
        raise WindowsError(UNREADABLE, f"'{text}' is not a duration: write a number and a unit, "
                                       f"e.g. 24h, 1d, 90min, 1w")
    h = float(m.group(1)) * _UNITS[m.group(2)]
    if not math.isfinite(h):
        shown = text.strip() if len(text.strip()) <= 24 else text.strip()[:20] + "..."
        raise WindowsError(UNREADABLE, f"'{shown}' is too large a number to be a duration: write "
                                       f"e.g. 24h, 1d, 90min, 1w")
    return h


def parse(text: str, end: str = END_VALUE, workers: int = 1) -> Windows:
    """``COMMIT[/OVERLAP]`` (``1d``, ``24h/12h``, ``1d/0h``; empty: the defaults)."""
    text = (text or "").strip()
    if not text:
        return Windows(end=end, workers=workers)
    commit, _, overlap = text.partition("/")
    if text.startswith("-"):
        raise WindowsError(NOT_POSITIVE, f"'{text}': the commit length must be above zero")
    if overlap.strip().startswith("-"):
        raise WindowsError(NOT_POSITIVE, f"'{text}': the overlap (after '/') must not be negative")
    return Windows(hours(commit), hours(overlap) if overlap.strip() else None, end, workers)


def foresight(sight: str, commit: Optional[str] = None, end: str = HOLD) -> Foresight:
    """``--foresight 48h --commit 24h``: read both (``commit`` None: one day), and the end
    rule: ``hold``, ``free`` or a number (money per MWh)."""
    rule: Union[str, float] = end
    if end not in (HOLD, FREE):
        try:
            rule = float(end)
        except (TypeError, ValueError):
            raise WindowsError(BAD_END, f"unknown end-of-window rule {end!r} with limited foresight "
                                        f"(use 'hold', 'free' or a money value per MWh)") from None
    return Foresight(hours(sight), DAY_H if commit is None else hours(commit), rule)


AUTO_DAYS = 31.0         # above this, with binary rules, a dispatch goes by windows by default


def binary_rules(p) -> List[str]:
    """What in ``p`` makes binary variables (read off the checked model, nothing compiled):
    storages with exclusive modes (minimum output, run or rest make them so), connections
    that may not import and export at once or whose buy price falls below the sell price."""
    out = [f'storage "{k}"' for k, s in p.storages.items()
           if s.exclusive or (s.min_run_h or 0) > 0 or (s.min_rest_h or 0) > 0]
    for name, c in p.connections.items():
        if c.exclusive:
            out.append(f'connection "{name}"')
            continue
        if np.any(p.price(c.buy) < p.price(c.sell)):
            out.append(f'connection "{name}"')
    return out


def by_default(p) -> Optional[Windows]:
    """The windows a dispatch of ``p`` takes when none are asked for: a day seeing a day
    more, ends valued (:class:`Windows`), when the horizon is longer than
    :data:`AUTO_DAYS` days and something makes binaries (:func:`binary_rules`); else None
    (one MILP).  docs/windows.md, "By default"."""
    h = p.horizon
    if h.steps * h.step_hours <= AUTO_DAYS * DAY_H or not binary_rules(p):
        return None
    return Windows()
