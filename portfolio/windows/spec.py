"""How a horizon is cut into windows: :class:`Windows`, its checks and its plan.

A window commits ``commit_h`` hours and sees ``overlap_h`` more (clipped at
the horizon's end); windows start every ``commit_h`` hours.  Mistakes are
:class:`WindowsError` with a stable code (docs/windows.md lists them); the
CLI prints them as ``portfolio: error: W00n: ...`` and exits 2.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import List, Optional, Tuple

END_VALUE = "value"      # non-last windows value what is left in store at the LP's marginal value
END_TARGET = "target"    # non-last windows must end with at least the LP's state of charge
END_MODES = (END_VALUE, END_TARGET)

DAY_H = 24.0

# codes (stable; docs/windows.md)
NOT_WHOLE = "W001"       # a duration is not a whole number of steps
TOO_LONG = "W002"        # commit longer than the horizon
NOT_POSITIVE = "W003"    # commit not above zero, or overlap negative
UNREADABLE = "W004"      # a duration text cannot be read
BAD_END = "W005"         # unknown end-of-window rule
CODES = {
    NOT_WHOLE: "a window length is not a whole number of steps",
    TOO_LONG: "the commit length is longer than the horizon",
    NOT_POSITIVE: "the commit length is not above zero, or the overlap is negative",
    UNREADABLE: "a window length cannot be read (write e.g. 24h, 1d, 90min, 1w)",
    BAD_END: "the end-of-window rule is neither 'value' nor 'target'",
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

    @property
    def overlap(self) -> float:
        return DAY_H if self.overlap_h is None else float(self.overlap_h)


def _steps(hours: float, dt: float, what: str) -> int:
    n = hours / dt
    if not math.isfinite(n) or abs(n - round(n)) > 1e-9 * max(1.0, abs(n)):
        raise WindowsError(NOT_WHOLE, f"the {what} ({hours:g} h) is not a whole number of "
                                      f"{dt * 60:g}-minute steps")
    return int(round(n))


def plan(spec: Windows, steps: int, step_hours: float) -> List[Tuple[int, int, int]]:
    """``(start, commit, length)`` of every window, in steps; raises :class:`WindowsError`."""
    if spec.end not in END_MODES:
        raise WindowsError(BAD_END, f"unknown end-of-window rule {spec.end!r} (use 'value' or 'target')")
    if not (spec.commit_h > 0) or not (spec.overlap >= 0):
        raise WindowsError(NOT_POSITIVE, f"the commit length must be above zero and the overlap not "
                                         f"negative (got {spec.commit_h:g} h and {spec.overlap:g} h)")
    commit = _steps(float(spec.commit_h), step_hours, "commit length")
    overlap = _steps(spec.overlap, step_hours, "overlap")
    if commit > steps:
        raise WindowsError(TOO_LONG, f"the commit length ({spec.commit_h:g} h) is longer than the "
                                     f"horizon ({steps * step_hours:g} h)")
    out = []
    for start in range(0, steps, commit):
        keep = min(commit, steps - start)
        out.append((start, keep, min(steps - start, commit + overlap)))
    return out


_UNITS = {"min": 1 / 60, "m": 1 / 60, "h": 1.0, "d": 24.0, "w": 168.0}
_DURATION = re.compile(r"^\s*([0-9]+(?:\.[0-9]+)?)\s*(min|m|h|d|w)\s*$")


def hours(text: str) -> float:
    """``24h``, ``1d``, ``90min``, ``1w`` -> hours; raises :class:`WindowsError`."""
    m = _DURATION.match(text or "")
    if not m:
        raise WindowsError(UNREADABLE, f"'{text}' is not a duration: write a number and a unit, "
                                       f"e.g. 24h, 1d, 90min, 1w")
    return float(m.group(1)) * _UNITS[m.group(2)]


def parse(text: str, end: str = END_VALUE) -> Windows:
    """``COMMIT[/OVERLAP]`` (``1d``, ``24h/12h``, ``1d/0h``; empty: the defaults)."""
    text = (text or "").strip()
    if not text:
        return Windows(end=end)
    commit, _, overlap = text.partition("/")
    if text.startswith("-") or overlap.strip().startswith("-"):
        raise WindowsError(NOT_POSITIVE, f"'{text}': the commit length must be above zero and the "
                                         f"overlap not negative")
    return Windows(hours(commit), hours(overlap) if overlap.strip() else None, end)
