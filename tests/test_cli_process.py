"""The installed command as a process: what a closed pipe, a full disk
behind standard output and absurd options do (no traceback, the schedule
kept)."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "examples" / "kestrel_bay" / "kestrel_bay.folio"


def _command():
    exe = shutil.which("portfolio", path=str(Path(sys.executable).parent))
    if exe is None:
        pytest.skip("the portfolio command is not installed beside this Python")
    return exe


def test_a_reader_that_goes_away_gets_no_traceback():
    # `portfolio codes | head -1`: close the pipe before the command writes
    p = subprocess.Popen([_command(), "codes"], stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    p.stdout.close()
    err = p.stderr.read().decode()
    p.wait(timeout=60)
    assert "Traceback" not in err and p.returncode == 141, err


@pytest.mark.skipif(not os.path.exists("/dev/full"), reason="no /dev/full")
def test_a_full_standard_output_keeps_the_schedule(tmp_path):
    out = tmp_path / "out"
    with open("/dev/full", "w") as full:
        p = subprocess.run([_command(), "dispatch", str(DEMO), "--out", str(out)],
                           stdout=full, stderr=subprocess.PIPE, text=True, timeout=300)
    assert "Traceback" not in p.stderr
    assert p.returncode == 2 and "cannot write to standard output" in p.stderr
    summary = json.loads((out / "summary.json").read_text())
    assert summary["status"] in ("optimal", "feasible") and (out / "schedule.csv").is_file()


@pytest.mark.parametrize("threads", ["0", "100000"])
def test_absurd_thread_counts_are_refused_before_anything_runs(tmp_path, threads):
    p = subprocess.run([_command(), "dispatch", str(DEMO), "--out", str(tmp_path / "o"),
                        "--threads", threads], capture_output=True, text=True, timeout=120)
    assert p.returncode == 2 and "from 1 to 256" in p.stderr and "Traceback" not in p.stderr
    assert not (tmp_path / "o").exists()


def test_two_dispatches_into_one_folder_at_once_both_succeed(tmp_path):
    # seen before the lock: 2 of 60 failed after solving ("Directory not empty")
    out = tmp_path / "out"
    for _ in range(4):
        procs = [subprocess.Popen([_command(), "dispatch", str(DEMO), "--out", str(out), "--quiet"],
                                  stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
                 for _ in range(2)]
        for p in procs:
            _, err = p.communicate(timeout=300)
            assert p.returncode == 0, err
    assert sorted(q.name for q in tmp_path.iterdir()) == ["out"]
    assert json.loads((out / "summary.json").read_text())["status"] == "optimal"
