"""Inputs that would hang, exhaust memory or take quadratic time."""

from __future__ import annotations

import os

import pytest

from portfolio import syntax
from portfolio.api import lint_file, lint_text

SERIES = ('portfolio x\nhorizon start 2027-01-01T00:00 length 3 h step 1 h\n'
          'price p from "{path}" column "a"\nconnection g {{ sell at p buy at p }}\n')


@pytest.mark.parametrize("device", ["/dev/zero", "/dev/urandom"])
def test_a_device_is_not_read_as_a_portfolio_or_a_series(device):
    if not os.path.exists(device):
        pytest.skip(f"no {device}")
    r = lint_file(device)
    assert [d.code for d in r.diagnostics] == ["P001"] and "not a regular file" in r.diagnostics[0].message
    r = lint_text(SERIES.format(path=device), "x.folio")
    assert "P401" in [d.code for d in r.diagnostics]
    assert any("not a regular file" in d.message for d in r.diagnostics)


def test_a_fifo_does_not_block(tmp_path):
    # nobody writes to it: opening it for reading would wait forever
    fifo = tmp_path / "pipe.csv"
    os.mkfifo(fifo)
    assert [d.code for d in lint_file(fifo).diagnostics] == ["P001"]
    r = lint_text(SERIES.format(path=fifo), "x.folio")
    assert any(d.code == "P401" and "not a regular file" in d.message for d in r.diagnostics)


def test_the_size_cap_is_a_diagnostic_and_can_be_raised(tmp_path, monkeypatch):
    csv = tmp_path / "p.csv"
    csv.write_text("time,a\n" + "".join(f"2027-01-01T0{h}:00,{h}\n" for h in range(3)))
    text = SERIES.format(path=csv)
    monkeypatch.setenv("PORTFOLIO_MAX_INPUT_MB", "0.00001")      # about 10 bytes
    r = lint_text(text, "x.folio")
    assert any(d.code == "P401" and "PORTFOLIO_MAX_INPUT_MB" in d.message for d in r.diagnostics)
    big = tmp_path / "big.folio"
    big.write_text(text)
    assert "PORTFOLIO_MAX_INPUT_MB" in lint_file(big).diagnostics[0].message
    monkeypatch.setenv("PORTFOLIO_MAX_INPUT_MB", "1")
    assert not any(d.code == "P401" for d in lint_text(text, "x.folio").diagnostics)


def test_a_long_digit_run_before_a_syntax_error_is_searched_in_a_bounded_window(monkeypatch):
    # structural, not timed: every search for "number, then keyword" looks at
    # no more than the window before the token, however long the digit run
    real = syntax._NUMBER_THEN_WORD
    spans = []

    class Spy:
        def search(self, text, pos=0, endpos=None):
            endpos = len(text) if endpos is None else endpos
            spans.append(endpos - pos)
            return real.search(text, pos, endpos)

    monkeypatch.setattr(syntax, "_NUMBER_THEN_WORD", Spy())
    digits = "4" * 200_000
    r = lint_text("portfolio x\nsite a at b { storage s { energy " + digits + " charge max 1 MW } }\n",
                  "x.folio")
    assert spans and max(spans) <= syntax._TAIL
    d = r.diagnostics[0]
    assert d.code == "P101" and d.span.col == 34                    # where the number starts
    assert f"the number {digits} needs a unit" in d.message


def test_escape_sequences_from_a_csv_header_never_reach_the_terminal(tmp_path):
    import io

    from portfolio.cli import main

    csv = tmp_path / "p.csv"
    csv.write_text("time,\x1b]0;owned\x07\x1b[2J\n2027-01-01T00:00,1\n")   # a title and clear-screen
    folio = tmp_path / "x\x1b[31mred.folio"
    folio.write_text(SERIES.format(path=csv))
    out, err = io.StringIO(), io.StringIO()
    code = main(["lint", str(folio)], out=out, err=err)
    shown = out.getvalue() + err.getvalue()
    assert code == 1 and "code  P4" in shown        # the column is not found, and says which it saw
    assert "\x1b" not in shown and "\x07" not in shown
    assert "\\x1b" in shown                                   # shown, visibly escaped


def test_old_mac_and_windows_line_endings_read_like_any_other(tmp_path):
    import io

    from portfolio.cli import main

    lines = ['portfolio cr', '# a comment', 'horizon start 2027-01-01T00:00 length 3 h step 1 h',
             'site s at g { storage b { energy 4 MW } }']
    for ending in ("\r", "\r\n"):
        src = tmp_path / f"e{len(ending)}.folio"
        src.write_bytes(ending.join(lines).encode() + ending.encode())
        out = io.StringIO()
        assert main(["lint", str(src)], out=out, err=io.StringIO()) == 1
        shown = out.getvalue()
        # the faults are on line 4, and its text is what is shown under them
        assert f"{src}:4:11: error: " in shown and f"{src}:4:34: error: " in shown
        assert "    text  site s at >>g<< { storage b { energy 4 MW } }" in shown
        assert "    text  site s at g { storage b { energy >>4 MW<< } }" in shown


@pytest.mark.parametrize("kind", ["/dev/zero", "fifo"])
def test_the_command_reports_a_device_or_a_pipe_and_returns(tmp_path, kind):
    """The finding was right but printing it read the file again, to show its line: on
    /dev/zero or a FIFO that never ended. A subprocess with a timeout, so that a hang fails
    the test instead of the run (not a performance target)."""
    import subprocess
    import sys
    path = kind
    if kind == "fifo":
        path = str(tmp_path / "x.folio")
        os.mkfifo(path)
    elif not os.path.exists(kind):
        pytest.skip(f"no {kind}")
    for argv in (["lint", path], ["dispatch", path, "--out", str(tmp_path / "out")]):
        done = subprocess.run([sys.executable, "-m", "portfolio", *argv], capture_output=True,
                              text=True, timeout=120)
        assert done.returncode == 2, done.stderr
        said = done.stdout + done.stderr
        assert "P001" in said and "not a regular file" in said and "Traceback" not in said
    assert not (tmp_path / "out").exists()
