"""What the command says when no schedule came back: the cause that stopped
the solver, not a guess (a longer time limit helps only when one was set)."""

from __future__ import annotations

from portfolio.cli_output import _no_schedule_reason


def test_a_memory_limit_is_named():
    text = _no_schedule_reason({"solver_status": "Memory limit reached", "time_limit": None})
    assert "out of memory" in text and "time-limit" not in text


def test_a_time_limit_is_named_with_its_value():
    text = _no_schedule_reason({"solver_status": "Time limit reached", "time_limit": 5.0})
    assert "time limit (5 s)" in text and "--time-limit" in text


def test_without_a_limit_no_longer_limit_is_suggested():
    text = _no_schedule_reason({"solver_status": "Interrupted by user", "time_limit": None})
    assert "--time-limit" not in text and "Interrupted by user" in text
