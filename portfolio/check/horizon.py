"""The horizon: its start, step, length or end and time zone; timestamps; zone names."""

from __future__ import annotations

import math
import re
from datetime import datetime, timedelta, timezone
from functools import lru_cache
from typing import Dict, Optional
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError, available_timezones

from .. import model as M
from .. import units as U
from ..diagnostics import BadTimestamp, DuplicateSetting, HorizonMisfit, MissingSetting, OutOfRange, Sink, UnknownZone
from .names import suggest
from .quantities import Quantities, fmt
from .tree import Block, Setting, Word, said

# a leap year of 5-minute steps; a longer horizon is a study for the windowed
# dispatch, not one model (1,000,000 steps of one store took 7.4 GB)
MAX_STEPS = 366 * 288
MIN_STEP_H = 1 / 3600  # one second
# the years a timestamp may fall in: pandas' nanosecond timestamps run from
# 1677-09-21 to 2262-04-11; whole years inside that
FIRST_YEAR, LAST_YEAR = 1678, 2261
_LAST_INSTANT = datetime(2262, 4, 11, 23, 47, 16, 854775, tzinfo=timezone.utc)   # pandas' last
# what datetime.fromisoformat reads exactly as pandas does; anything else in the
# grammar's TIMESTAMP (more than 6 digits of a second, a date with an offset but
# no time) goes to pandas
_PLAIN = re.compile(r"\d{4}-\d{2}-\d{2}(T\d{2}:\d{2}(:\d{2}(\.\d{1,6})?)?(Z|[+-]\d{2}:?\d{2})?)?$")
_NOT_ZONES = {"localtime", "posixrules", "Factory"}   # files of the system's zone folder, not IANA names


@lru_cache(maxsize=1)
def zones() -> frozenset:
    """IANA zone names (the system's aliases such as "localtime", which mean
    something else on every machine, and the posix/ and right/ copies left out)."""
    return frozenset({z for z in available_timezones()
                      if z not in _NOT_ZONES and not z.startswith(("posix/", "right/"))} | {"UTC"})


def check_horizon(node: Block, units: Quantities) -> Optional[M.Horizon]:
    sink = units.sink
    parts: Dict[str, Setting] = {}
    for part in node.settings:
        if part.key in parts:
            sink.add(DuplicateSetting, part.span, f"the horizon's '{said(part.key)}' is given twice")
            continue
        parts[part.key] = part
    zone = "UTC"
    if "h_zone" in parts:
        zone = _zone(parts["h_zone"].value, sink)
        if zone is None:
            return None
    if not _complete(node, parts, sink):
        return None
    start = timestamp(parts["h_start"].value, zone, sink)
    got = units.quantity(parts["h_step"].value, (U.TIME,), "the step")
    if start is None or got is None:
        return None
    step_h = got[1]
    if step_h <= 0:
        sink.add(OutOfRange, parts["h_step"].span, "the step must be longer than zero")
        return None
    if step_h < MIN_STEP_H:
        sink.add(OutOfRange, parts["h_step"].span, "the step must be at least one second")
        return None
    if "h_length" in parts:
        got = units.quantity(parts["h_length"].value, (U.TIME,), "the horizon length")
        if got is None:
            return None
        length_h = got[1]
        lsp = parts["h_length"].span
    else:
        end = timestamp(parts["h_end"].value, zone, sink)
        if end is None:
            return None
        length_h = (_utc(end) - _utc(start)).total_seconds() / 3600
        lsp = parts["h_end"].span
    steps = _whole_steps(length_h, step_h, lsp, sink)
    if steps is None:
        return None
    try:
        beyond = _utc(start) + timedelta(hours=step_h * steps) > _LAST_INSTANT
    except (OverflowError, ValueError):
        beyond = True
    if beyond:
        sink.add(OutOfRange, lsp, f"the horizon ends after {LAST_YEAR}, the last year supported")
        return None
    return M.Horizon(start=start, steps=steps, step_hours=step_h, zone=zone, span=node.span)


def _zone(word: Word, sink: Sink) -> Optional[str]:
    zone = word.text[1:-1]
    try:
        if zone not in zones():
            raise ZoneInfoNotFoundError(zone)
        ZoneInfo(zone)
    except (ZoneInfoNotFoundError, ValueError):
        sink.add(UnknownZone, word.span, f"unknown time zone \"{zone}\"{suggest(zone, zones())}",
                 "note: use an IANA zone name such as \"Europe/Berlin\" or \"UTC\"")
        return None
    return zone


def _complete(node: Block, parts: Dict[str, Setting], sink: Sink) -> bool:
    """Start, step and one of length or end are given."""
    ok = True
    for need in ("h_start", "h_step"):
        if need not in parts:
            sink.add(MissingSetting, node.span, f"the horizon needs '{said(need)}'")
            ok = False
    if "h_length" in parts and "h_end" in parts:
        sink.add(DuplicateSetting, parts["h_end"].span, "give the horizon's 'length' or its 'end', not both")
        ok = False
    elif "h_length" not in parts and "h_end" not in parts:
        sink.add(MissingSetting, node.span, "the horizon needs 'length' or 'end'")
        ok = False
    return ok


def _whole_steps(length_h: float, step_h: float, lsp, sink: Sink) -> Optional[int]:
    if length_h <= 0:
        sink.add(OutOfRange, lsp, "the horizon must end after it starts")
        return None
    steps = length_h / step_h
    if not math.isfinite(steps) or steps > MAX_STEPS + 0.5:
        shown = f"{steps:.6g} steps" if math.isfinite(steps) else "too many steps"
        sink.add(OutOfRange, lsp, f"the horizon has {shown}; at most {MAX_STEPS} are supported")
        return None
    if steps < 1 - 1e-6:
        sink.add(HorizonMisfit, lsp, f"the horizon ({fmt(length_h)} h) is shorter than one step ({fmt(step_h)} h)")
        return None
    if abs(steps - round(steps)) > max(1e-6, 1e-9 * steps):  # relative: 1 min is 0.0166666666667 h
        sink.add(HorizonMisfit, lsp, f"the horizon ({fmt(length_h)} h) is not a whole number of "
                 f"{fmt(step_h * 60)}-minute steps ({steps:.3f})")
        return None
    return int(round(steps))


def _utc(t: datetime) -> datetime:
    # aware datetimes sharing one tzinfo subtract as wall times: go through UTC
    return t.astimezone(timezone.utc)


def timestamp(word: Word, zone: str, sink: Sink) -> Optional[datetime]:
    text, sp = word.text, word.span
    m = re.match(r"(\d{4}-\d{2}-\d{2})T24:00(?::00(?:\.0+)?)?(.*)$", text)
    if m:     # ISO 8601's end of day: say which instant it is, in the language's spelling
        try:
            nxt = (datetime.strptime(m.group(1), "%Y-%m-%d") + timedelta(days=1)).strftime("%Y-%m-%d")
            hint = f"; write the next day's start, '{nxt}T00:00{m.group(2)}'"
        except (ValueError, OverflowError):
            hint = ""
        sink.add(BadTimestamp, sp, f"'{text}': 24:00 (the end of a day) is not accepted{hint}")
        return None
    ts = _parse(text)
    if ts is None:
        sink.add(BadTimestamp, sp, f"'{text}' is not a valid date and time")
        return None
    if not FIRST_YEAR <= ts.year <= LAST_YEAR:
        sink.add(BadTimestamp, sp, f"'{text}' is outside the years supported ({FIRST_YEAR} to {LAST_YEAR})")
        return None
    if ts.tzinfo is None:
        ts = _localize(ts, zone)
        if ts is None:
            sink.add(BadTimestamp, sp, f"'{text}' does not name one instant in {zone} "
                     "(a daylight-saving change); add a UTC offset such as +01:00")
            return None
    else:
        ts = ts.astimezone(ZoneInfo(zone))
    return ts


def _parse(text: str) -> Optional[datetime]:
    """The grammar's TIMESTAMP as a datetime (aware when it carries an offset)."""
    if _PLAIN.match(text):
        try:
            return datetime.fromisoformat(text)
        except ValueError:
            return None
    import pandas as pd          # nanoseconds: the careful reading

    try:
        ts = pd.Timestamp(text)
    except (ValueError, OverflowError):
        return None
    return None if ts is pd.NaT else ts


def _localize(ts: datetime, zone: str) -> Optional[datetime]:
    """A wall time in ``zone``, or None when it names no instant (skipped by a
    daylight-saving change) or two (repeated by one)."""
    tz = ZoneInfo(zone)
    first, second = ts.replace(tzinfo=tz, fold=0), ts.replace(tzinfo=tz, fold=1)
    if first.utcoffset() != second.utcoffset():
        return None                                  # repeated or skipped
    back = _utc(first).astimezone(tz).replace(tzinfo=None)
    if back != ts.replace(tzinfo=None):
        return None                                  # skipped
    return first
