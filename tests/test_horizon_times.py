"""The horizon's timestamps are read with the standard library (datetime, zoneinfo)
so that checking a file needs no pandas; pandas' reading is the reference here."""

import subprocess
import sys
from zoneinfo import ZoneInfo
from pathlib import Path

import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st

from portfolio.check.horizon import _localize, _parse

ROOT = Path(__file__).resolve().parents[1]
ZONES = ["UTC", "Europe/Berlin", "America/New_York", "Australia/Lord_Howe", "Asia/Kolkata"]


def _pandas(text: str, zone: str):
    """The reading the checker had before: pandas' Timestamp, localized strictly."""
    try:
        ts = pd.Timestamp(text)
    except ValueError:
        return "invalid"
    if ts.tzinfo is None:
        try:
            return ts.tz_localize(zone, nonexistent="raise", ambiguous="raise")
        except Exception:
            return None
    return ts.tz_convert(zone)


def _ours(text: str, zone: str):
    ts = _parse(text)
    if ts is None:
        return "invalid"
    return _localize(ts, zone) if ts.tzinfo is None else ts.astimezone(ZoneInfo(zone))


@st.composite
def stamps(draw):
    t = draw(st.datetimes(min_value=pd.Timestamp("1990-01-01").to_pydatetime(),
                          max_value=pd.Timestamp("2037-12-31").to_pydatetime()))
    form = draw(st.sampled_from(["%Y-%m-%d", "%Y-%m-%dT%H:%M", "%Y-%m-%dT%H:%M:%S", "%Y-%m-%dT%H:%M:%S.%f"]))
    offset = draw(st.sampled_from(["", "", "Z", "+01:00", "-0530", "+13:45", "+02"]))
    return t.strftime(form) + offset


@settings(max_examples=400, deadline=None)
@given(stamps(), st.sampled_from(ZONES))
def test_the_same_instant_as_pandas_reads(text, zone):
    theirs, ours = _pandas(text, zone), _ours(text, zone)
    assert (theirs is None) == (ours is None), (text, zone, theirs, ours)
    if ours is not None and ours != "invalid":
        assert pd.Timestamp(ours) == theirs
        assert ours.utcoffset() == theirs.utcoffset()


@pytest.mark.parametrize("text, zone, names_one", [
    ("2027-03-28T02:30", "Europe/Berlin", False),    # skipped: clocks go 02:00 -> 03:00
    ("2027-10-31T02:30", "Europe/Berlin", False),    # repeated: 03:00 -> 02:00
    ("2027-10-31T01:59", "Europe/Berlin", True),
    ("2027-10-31T03:00", "Europe/Berlin", True),
    ("2027-03-14T02:00", "America/New_York", False),
    ("2027-04-04T01:45", "Australia/Lord_Howe", False),  # a half-hour change, repeated
])
def test_daylight_saving_changes(text, zone, names_one):
    # the dates of the changes: the EU rule (last Sunday of March and October),
    # the US rule (second Sunday of March) and Lord Howe's half-hour shift,
    # as the IANA database holds them; pandas agrees (checked below)
    assert (_localize(_parse(text), zone) is not None) == names_one
    assert (_pandas(text, zone) is not None) == names_one


def test_summer_time_after_2037():
    # pandas' reading of a zone stops applying daylight saving after 2037 (the
    # year its transition tables end); the IANA file's rule for later years
    # (zoneinfo reads it) keeps central European summer time in the same
    # months, as the EU rule has it (from memory: Directive 2000/84/EC)
    t = _localize(_parse("2038-07-01T12:00"), "Europe/Berlin")
    assert t.utcoffset().total_seconds() == 7200


def test_nanoseconds_still_read_by_pandas():
    ts = _parse("2027-03-01T00:00:00.123456789")
    assert ts is not None and pd.Timestamp(ts).nanosecond == 789


def test_checking_a_well_formed_file_imports_no_pandas_pint_or_networkx():
    code = ("import sys, portfolio.api as a\n"
            f"r = a.lint_file({str(ROOT / 'examples/kestrel_bay/kestrel_bay.folio')!r})\n"
            "assert r.ok, r.diagnostics\n"
            "print(sorted(m for m in ('pandas', 'pint', 'networkx') if m in sys.modules))\n")
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert p.returncode == 0, p.stderr
    assert p.stdout.strip() == "[]"
