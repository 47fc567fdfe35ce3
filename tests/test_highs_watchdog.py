"""The time limit is kept even where HiGHS keeps no watch (portfolio/solve/highs.py).

Structural, not timed: a stand-in for HiGHS's threaded run that never ends,
or ends only when asked, with the grace period shrunk to a few hundredths of
a second; what is checked is what the watchdog does, not how long it takes.
"""

from __future__ import annotations

import time

import highspy
import pytest

from portfolio.solve import highs as H


class _Stub(H._Highs):
    """startSolve/wait/cancelSolve of a run that ends only when asked (or never)."""

    def __init__(self, obeys: bool):
        super().__init__()
        self.obeys = obeys
        self.cancelled = 0

    def startSolve(self):
        return None

    def cancelSolve(self):
        self.cancelled += 1

    def wait(self, timeout=-1.0):
        time.sleep(min(timeout, 0.01))
        if self.obeys and self.cancelled:
            return True, highspy.HighsStatus.kOk
        return False, None


@pytest.fixture(autouse=True)
def short_grace(monkeypatch):
    monkeypatch.setattr(H, "GRACE", 0.03)


def test_a_run_past_its_limit_is_asked_to_stop_and_returns():
    h = _Stub(obeys=True)
    h.stop_at = time.monotonic()               # its limit has passed
    assert h.run() == highspy.HighsStatus.kOk
    assert h.cancelled == 1


def test_a_run_that_will_not_stop_is_left_and_never_read():
    h = _Stub(obeys=False)
    h.stop_at = time.monotonic()
    before = len(H._abandoned)
    with pytest.raises(H.Abandoned):
        h.run()
    assert h.cancelled == 1
    assert H._abandoned[before:] == [h]        # kept alive: its thread may still use it
    H._abandoned.remove(h)


def test_without_a_limit_nothing_is_cancelled():
    class Ends(_Stub):
        def wait(self, timeout=-1.0):
            return True, highspy.HighsStatus.kOk

    h = Ends(obeys=True)
    assert h.stop_at is None and h.run() == highspy.HighsStatus.kOk and h.cancelled == 0


def _option(h, name):
    got = h.getOptionValue(name)            # (status, value) in some highspy releases
    return got[-1] if isinstance(got, tuple) else got


def test_new_highs_gives_the_run_its_limit():
    from portfolio.solve import SolveOptions
    t0 = time.monotonic()
    h = H.new_highs(SolveOptions(), 5.0)
    assert _option(h, "time_limit") == 5.0
    assert t0 + 5.0 <= h.stop_at <= time.monotonic() + 5.0
    H.set_limit(h, 1.0)
    assert _option(h, "time_limit") == 1.0 and h.stop_at <= time.monotonic() + 1.0
