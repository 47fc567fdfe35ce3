"""What the command says about settings it cannot use: each message names what the user
wrote and what to do, with exit code 2 and nothing written (and no traceback, no warning
from the arithmetic); and what it says it did is what it did."""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path
from types import SimpleNamespace

import pytest

sys.path.insert(0, str(Path(__file__).parent))
from cli_support import DEMO, run  # noqa: E402

from portfolio.cli import _print_windows, main  # noqa: E402
from portfolio.windows import Foresight, Windows, WindowsError, plan  # noqa: E402


def _refused(out: Path, *argv):
    """``portfolio dispatch DEMO --out OUT ARGV...``: the error text, after checking it is
    exit 2, one message, nothing written."""
    code, text, err = run("dispatch", DEMO, "--out", out, *argv)
    assert code == 2, (code, text, err)
    assert "Traceback" not in err and "Warning" not in err, err
    assert not out.exists()
    return err


# -- 1. an end value per MWh beyond any market, a duration beyond any number ---------------

@pytest.mark.parametrize("value", ["1e308", "-1e308", "1e9", "-2e8", "nan", "inf", "-inf"])
def test_an_implausible_end_value_is_refused_before_any_solve(tmp_path, value):
    err = _refused(tmp_path / "o", "--foresight", "12h", "--commit", "6h", f"--window-end={value}")
    assert "W005" in err and "per MWh" in err
    assert "from -100,000,000 to 100,000,000" in err          # says what may be written
    assert ("not a finite number" in err) == (not math.isfinite(float(value)))


def test_the_end_value_limit_is_the_price_limit_either_way():
    plan(Foresight(12, 6, 1e8), 96, 0.5)
    plan(Foresight(12, 6, -1e8), 96, 0.5)
    for bad in (1e8 * 1.001, -1e8 * 1.001, float("nan")):
        with pytest.raises(WindowsError) as e:
            plan(Foresight(12, 6, bad), 96, 0.5)
        assert e.value.code == "W005"


@pytest.mark.parametrize("flags, code, words", [
    (["--windows=0.0000000000000000001h"], "W003", "shorter than one 30-minute step"),
    (["--foresight=12h", "--commit=0.0000000000000000001h"], "W003", "shorter than one"),
    (["--windows=" + "9" * 400 + "h"], "W004", "too large a number"),
    (["--windows=1d/" + "9" * 400 + "h"], "W004", "too large a number"),
    (["--foresight=" + "9" * 400 + "h"], "W004", "too large a number")])
def test_durations_that_round_to_nothing_or_overflow_are_coded(tmp_path, flags, code, words):
    err = _refused(tmp_path / "o", *flags)
    assert f"portfolio: error: {code}: " in err and words in err, err
    assert "inf h" not in err


def test_an_overlap_past_the_horizon_sees_to_its_end():
    assert plan(Windows(24, 100), 96, 0.5) == [(0, 48, 96), (48, 48, 48)]


# -- 2. --windows FILE ------------------------------------------------------------------

def test_windows_before_file_says_it_took_the_file(tmp_path, capsys):
    for argv in (["--windows", DEMO, "--out", tmp_path / "o"],
                 ["--out", tmp_path / "o", "--windows", DEMO]):
        assert main(["dispatch", *map(str, argv)]) == 2
        err = capsys.readouterr().err
        assert f"--windows took '{DEMO}' as its value" in err, err
        assert "so no FILE was left" in err and "put FILE before --windows" in err
        assert "--windows=1d/1d" in err and "required" not in err
    assert not (tmp_path / "o").exists()


def test_windows_taking_a_file_with_file_given_too_says_so(tmp_path):
    code, _, err = run("dispatch", "--windows", DEMO, "--out", tmp_path / "o", DEMO)
    assert code == 2 and not (tmp_path / "o").exists()
    assert f"--windows took '{DEMO}'" in err and "a file, not a duration" in err, err
    assert "W004" not in err


def test_windows_given_a_file_with_equals_does_not_suggest_equals(tmp_path):
    code, _, err = run("dispatch", DEMO, "--out", tmp_path / "o", f"--windows={DEMO}")
    assert code == 2 and not (tmp_path / "o").exists()
    assert "names a file, not windows" in err and "put FILE before" not in err, err


def test_a_missing_file_after_a_duration_is_just_missing(tmp_path, capsys):
    assert main(["dispatch", "--windows", "24h", "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert "required: FILE" in err and "took" not in err


# -- 3. how many at once, one window ----------------------------------------------------

def test_workers_beyond_the_windows_say_the_real_number_at_once(tmp_path):
    out = tmp_path / "o"
    code, text, err = run("dispatch", DEMO, "--out", out, "--windows", "24h", "--workers", "64",
                          "--quiet")
    assert code == 0, err
    assert "2 at once" in text and "64 at once" not in text, text
    summary = json.loads((out / "summary.json").read_text())
    assert summary["windows"]["count"] == 2 and summary["windows"]["workers"] == 2
    assert any("(2 at once)" in n for n in summary["notes"]), summary["notes"]


def test_one_window_is_one_window(tmp_path):
    code, text, err = run("dispatch", DEMO, "--out", tmp_path / "a", "--windows", "48h")
    assert code == 0, err
    assert "1 windows" not in text and "dispatched in 1 window of 48 h, seeing" in text.replace(
        "\n  ", " ")
    assert "windows: 1 of 48 h" in text and "at its end" in text
    code, text, err = run("dispatch", DEMO, "--out", tmp_path / "b", "--foresight", "48h",
                          "--commit", "48h")
    assert code == 0, err
    flat = text.replace("\n  ", " ")
    assert "1 windows" not in flat and "limited foresight: 1 window committing" in flat
    assert "the one window committed 48 h" in flat


def test_the_windows_line_never_says_more_at_once_than_windows():
    w = {"count": 3, "workers": 8, "commit_h": 8.0, "overlap_h": 0.0, "foresight_h": None,
         "end": "pin", "resolved": 1, "gap": 0.0, "lp_bound": 1.0}
    lines = []
    _print_windows(SimpleNamespace(summary={"windows": w}),
                   SimpleNamespace(write=lines.append, flush=lambda: None))
    text = "".join(lines)
    assert "3 at once" in text and "8 at once" not in text, text


# -- 4. --bound with a dispatch that is one MILP: say what made it one ---------------------

def _long(tmp_path) -> Path:
    """33 days of hourly prices and a store with exclusive modes: windows by default."""
    steps = 24 * 33
    prices = ", ".join(f"{50 + 30 * math.sin(t * 2 * math.pi / 24):.2f}" for t in range(steps))
    f = tmp_path / "long.folio"
    f.write_text(f'portfolio longrun\ncurrency EUR\n'
                 f'horizon start 2027-01-01T00:00 length {steps} h step 1 h zone "UTC"\n'
                 f'price spot values [{prices}] per MWh\n'
                 'connection grid {\n  export max 10 MW\n  import max 10 MW\n'
                 '  sell at spot\n  buy at spot\n}\n'
                 'site s at grid {\n  storage b {\n    energy 2 MWh\n    charge max 1 MW\n'
                 '    discharge max 1 MW\n    modes exclusive\n  }\n}\n')
    return f


def test_bound_refused_because_of_marginal_values_names_it(tmp_path):
    f = _long(tmp_path)
    code, _, err = run("dispatch", f, "--out", tmp_path / "o", "--marginal-values",
                       "--bound", "whole")
    assert code == 2 and not (tmp_path / "o").exists()
    assert "--bound goes with windows" in err
    assert "--marginal-values makes this dispatch one MILP" in err, err
    assert "leave out --bound, or --marginal-values" in err
    code, _, err = run("dispatch", f, "--out", tmp_path / "o", "--whole", "--bound", "split")
    assert code == 2 and "--whole makes this dispatch one MILP" in err, err
    assert "--marginal-values" not in err


def test_marginal_values_on_a_long_horizon_say_it_is_one_milp(tmp_path):
    """A horizon that would go by windows is one MILP with --marginal-values: said on
    stderr and kept in summary.json's notes (it was silent)."""
    f = _long(tmp_path)
    code, _, err = run("dispatch", f, "--out", tmp_path / "o", "--marginal-values")
    assert code == 0, err
    assert "one MILP over the whole horizon, not by windows" in err and "--marginal-values" in err
    notes = json.loads((tmp_path / "o" / "summary.json").read_text())["notes"]
    assert any("not by windows" in n for n in notes)
    assert not (tmp_path / "o" / "windows.csv").exists()
    code, _, err = run("dispatch", f, "--out", tmp_path / "w", "--marginal-values", "--whole")
    assert code == 0 and "not by windows" not in err        # asked for: nothing to say


def test_bound_on_a_short_horizon_does_not_blame_marginal_values(tmp_path):
    err = _refused(tmp_path / "o", "--marginal-values", "--bound", "whole")
    assert "this dispatch is one MILP" in err and "--marginal-values makes" not in err, err


# -- 5. W008, W007, W003 in the user's terms ---------------------------------------------

def test_w008_with_workers_speaks_of_workers_not_pin(tmp_path):
    err = _refused(tmp_path / "o", "--windows", "12h", "--workers", "2", "--bound", "split")
    assert "W008" in err and "windows in parallel (2 workers)" in err, err
    assert "'pin'" not in err and "bound 'whole'" in err


def test_w008_with_a_written_end_rule_names_it(tmp_path):
    err = _refused(tmp_path / "o", "--windows", "12h", "--window-end", "target", "--bound", "split")
    assert "W008" in err and "end-of-window rule 'target'" in err, err


def test_w007_with_workers_speaks_of_workers_not_pinned(tmp_path):
    err = _refused(tmp_path / "o", "--windows", "12h/6h", "--workers", "2")
    assert "W007" in err and "windows in parallel (2 workers)" in err, err
    assert "pinned" not in err


def test_w003_with_foresight_speaks_of_the_commit_not_an_overlap(tmp_path):
    err = _refused(tmp_path / "o", "--foresight", "12h", "--commit", "0h")
    assert "W003" in err and "commit length must be above zero" in err, err
    assert "overlap" not in err


def test_w003_with_windows_names_the_part_that_is_wrong(tmp_path):
    err = _refused(tmp_path / "o", "--windows=1d/-1h")
    assert "W003" in err and "overlap (after '/') must not be negative" in err, err
    assert "commit" not in err


# -- 6. --out that is a file -------------------------------------------------------------

def test_out_that_is_the_portfolio_file_says_so_and_leaves_it(tmp_path):
    before = DEMO.read_bytes()
    code, _, err = run("dispatch", DEMO, "--out", DEMO)
    assert code == 2 and DEMO.read_bytes() == before
    assert "is the portfolio file itself, not a folder" in err, err
    assert "holds" not in err and "kestrel_bay_out" in err


def test_out_that_is_another_file_says_it_is_a_file(tmp_path):
    mine = tmp_path / "notes.txt"
    mine.write_text("mine")
    code, _, err = run("dispatch", DEMO, "--out", mine)
    assert code == 2 and mine.read_text() == "mine"
    assert "is an existing file, not a folder" in err, err


def test_out_that_holds_the_portfolio_file_says_holds():
    code, _, err = run("dispatch", DEMO, "--out", DEMO.parent)
    assert code == 2 and "holds the portfolio file itself" in err, err


# -- 7. study --scheduler --workers -------------------------------------------------------

def test_study_refuses_workers_with_a_scheduler(tmp_path):
    code, text, err = run("study", DEMO, "--out", tmp_path / "s", "--scheduler",
                          "tcp://127.0.0.1:8786", "--workers", "3")
    assert code == 2 and text == ""
    assert "--workers sets the size of the local cluster only" in err, err
    assert "leave out --workers" in err
    assert not (tmp_path / "s").exists()
