"""Ctrl-C on the real command, as a terminal sends it: SIGINT to the process
group of a running ``portfolio dispatch`` (its SIGINT handler at the default,
as a shell leaves it).  What must hold: exit code 130 with one line on stderr
and no traceback; a prompt stop (HiGHS is asked to stop at its next callback,
not left to finish a phase that would run for a minute); the previous output
folder untouched; nothing half-written beside it.  For ``portfolio study``
(its local Dask cluster's workers are in the same process group and share
its stderr, so the output ends only when they are gone, and anything they
print is seen): the same one line, the finished cases kept whole, and a
re-run that resumes.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests" / "bench"))

# Not a performance target: an uninterrupted run takes minutes, so stopping
# within this many seconds of the signal shows the interrupt was honoured
# mid-run rather than after it; generous for a loaded machine.
STOP_WITHIN = 20.0


def _command():
    exe = shutil.which("portfolio", path=str(Path(sys.executable).parent))
    if exe is None:
        pytest.skip("the portfolio command is not installed beside this Python")
    return exe


def _month_of_quarter_hours(folder: Path) -> Path:
    """Ten storages with exclusive modes, minimum output and run rules over
    30 days of quarter-hours: a build of about a second, then a warm start
    and a search that run for minutes on two cores."""
    from bench_scaling import make_text

    text = make_text(10)
    steps = 96 * 30
    rng = np.random.default_rng(1)

    def values(base):
        q = np.arange(steps)
        v = base + 30 * np.sin(q / 96 * 2 * np.pi) + rng.normal(0, 8, steps)
        return "[" + ", ".join(f"{x:.2f}" for x in v) + "]"

    text = text.replace("length 24 h", "length 720 h")
    text = re.sub(r"price north values \[[^\]]*\]", "price north values " + values(55), text)
    text = re.sub(r"price valley values \[[^\]]*\]", "price valley values " + values(50), text)
    path = folder / "month.folio"
    path.write_text(text)
    return path


def _year_lp(folder: Path) -> Path:
    """Forty stores on twenty sites over an hourly year with no binary rule:
    one LP of about 1.4 million columns, a few seconds of build, then half a
    minute or more of simplex."""
    rng = np.random.default_rng(2)
    t = np.arange(8760)
    price = 50 + 20 * np.sin(2 * np.pi * (t - 7) / 24) + rng.normal(0, 6, 8760)
    lines = ["portfolio year_lp", 'horizon start 2027-01-01T00:00 length 8760 h step 1 h zone "UTC"',
             "price spot values [" + ", ".join(f"{x:.2f}" for x in price) + "]",
             "connection grid { export max 200 MW import max 200 MW sell at spot buy at spot plus 2 per MWh }"]
    for site in range(20):
        lines.append(f"site s{site} at grid {{ export max 15 MW import max 15 MW")
        for k in range(2):
            lines.append(f"  storage b{site}_{k} {{ energy {8 + k} MWh charge max 4 MW discharge max 4 MW "
                         f"efficiency charge 94% discharge 94% soc start 4 MWh }}")
        lines.append("}")
    path = folder / "year_lp.folio"
    path.write_text("\n".join(lines) + "\n")
    return path


@pytest.fixture()
def previous(tmp_path):
    """An output folder from an earlier, finished dispatch of the demo."""
    out = tmp_path / "out"
    demo = ROOT / "examples" / "kestrel_bay" / "kestrel_bay.folio"
    done = subprocess.run([_command(), "dispatch", str(demo), "--out", str(out), "--quiet"],
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    return out, {p.name: p.read_bytes() for p in out.iterdir()}


def _interrupt(argv, after: float):
    p = _start(argv)
    time.sleep(after)
    return _ctrl_c(p)


def _start(argv) -> subprocess.Popen:
    """The command in a process group of its own, its SIGINT handler at the default."""
    return subprocess.Popen(argv, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))


def _ctrl_c(p: subprocess.Popen):
    """SIGINT to ``p``'s whole process group, as a terminal sends it: (code, out, err, seconds to stop)."""
    sent = time.monotonic()
    os.killpg(p.pid, signal.SIGINT)
    try:
        out, err = p.communicate(timeout=STOP_WITHIN + 60)
    except subprocess.TimeoutExpired:
        os.killpg(p.pid, signal.SIGKILL)
        p.communicate()
        pytest.fail("the command did not stop after Ctrl-C")
    return p.returncode, out, err, time.monotonic() - sent


def _same_as_before(previous):
    out, files = previous
    assert {p.name: p.read_bytes() for p in out.iterdir()} == files
    assert sorted(p.name for p in out.parent.iterdir() if p.name.startswith(".out")) == []


@pytest.mark.parametrize("extra, after", [((), 6.0), (("--no-warm-start",), 6.0)],
                         ids=["during the warm start", "during the search"])
def test_ctrl_c_stops_promptly_and_keeps_the_previous_folder(tmp_path, previous, extra, after):
    src = _month_of_quarter_hours(tmp_path)
    code, out, err, took = _interrupt(
        [_command(), "dispatch", str(src), "--out", str(previous[0]), *extra], after)
    assert code == 130, (code, err)
    assert "Traceback" not in err and "interrupted" in err
    assert took < STOP_WITHIN, took
    _same_as_before(previous)


def test_ctrl_c_during_a_long_lp_stops_promptly(tmp_path, previous):
    src = _year_lp(tmp_path)
    code, out, err, took = _interrupt([_command(), "dispatch", str(src), "--out", str(previous[0])], 12.0)
    assert code == 130, (code, err)
    # in the simplex, which checks for an interrupt every few iterations
    assert "Traceback" not in err and took < STOP_WITHIN, took
    _same_as_before(previous)


def test_ctrl_c_at_start_up_gives_no_traceback(tmp_path, previous):
    demo = ROOT / "examples" / "kestrel_bay" / "kestrel_bay.folio"
    code, out, err, took = _interrupt(
        [_command(), "dispatch", str(demo), "--out", str(previous[0])], 0.4)
    assert "Traceback" not in err
    assert code in (130, 0), (code, err)       # 0 only if it had already finished
    if code == 130:
        _same_as_before(previous)


def _ends_quietly_with_130(code: str) -> None:
    """Run ``code`` in a fresh interpreter with SIGINT at its default."""
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60,
                       preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    assert p.returncode == 130 and p.stderr == "portfolio: interrupted\n", (p.returncode, p.stderr)


def test_a_ctrl_c_during_the_imports_ends_quietly():
    # deterministic: the interrupt arrives right after the entry module is
    # imported, while the rest would still be importing
    code = ("import portfolio._entry, os, signal, time\n"
            "os.kill(os.getpid(), signal.SIGINT)\n"
            "time.sleep(5)\n")
    _ends_quietly_with_130(code)


def test_a_ctrl_c_turned_into_another_error_by_an_import_still_ends_quietly():
    # NumPy's C code, interrupted while importing its datetime module, reports
    # an ImportError instead of the KeyboardInterrupt (seen about once in 15
    # runs of the start-up test above); made deterministic here
    code = ("import os, signal, time\n"
            "import portfolio.cli as cli\n"
            "signal.signal(signal.SIGINT, cli.on_interrupt)\n"
            "def main():\n"
            "    try:\n"
            "        os.kill(os.getpid(), signal.SIGINT); time.sleep(5)\n"
            "    except KeyboardInterrupt:\n"
            "        raise ImportError('PyCapsule_Import could not import module \"datetime\"')\n"
            "cli.main = main\n"
            "cli.run()\n")
    _ends_quietly_with_130(code)


def test_a_ctrl_c_inside_a_garbage_collector_callback_is_not_lost():
    # Dask keeps a gc callback (distributed.gc.GCDiagnosis); Python cannot raise out of one, so
    # a Ctrl-C landing there was printed as "Exception ignored" and lost, and a study ran on
    # to its end with exit 0 (seen twice in full runs under load); made deterministic here:
    # the SIGINT is sent from inside such a callback
    code = ("import gc, os, signal, time\n"
            "import portfolio.cli as cli\n"
            "cli.install_interrupt_handling()\n"
            "def once(phase, info):\n"
            "    if phase == 'start' and once.armed:\n"
            "        once.armed = False\n"
            "        signal.raise_signal(signal.SIGINT)\n"
            "once.armed = True\n"
            "def main():\n"
            "    gc.callbacks.append(once)\n"
            "    gc.collect()\n"
            "    time.sleep(5)\n"
            "    return 0\n"
            "cli.main = main\n"
            "cli.run()\n")
    _ends_quietly_with_130(code)


def test_an_error_without_a_ctrl_c_is_not_taken_for_one():
    code = ("import portfolio.cli as cli\n"
            "def main():\n"
            "    raise ImportError('a real fault')\n"
            "cli.main = main\n"
            "cli.run()\n")
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert p.returncode == 1 and "a real fault" in p.stderr, (p.returncode, p.stderr)


def _study_file(folder: Path) -> Path:
    """The benchmark's study (tests/bench/bench_study.py), 60 cases of five storages over
    a week: each case a small MILP, the whole study some tens of seconds on two cores."""
    from bench_study import text
    path = folder / "sweep.folio"
    path.write_text(text(60, hours=168))
    return path


def test_ctrl_c_during_a_study_keeps_finished_cases_and_a_rerun_resumes(tmp_path):
    """Ctrl-C as a terminal sends it: SIGINT to the whole process group, which holds the
    tool, the local cluster's nannies and its workers.  The tool exits 130 with one line and
    no traceback (nor any from the workers: they ignore SIGINT and are closed by the tool);
    every case file present is whole; a re-run solves only the cases not yet written."""
    from portfolio.study.run import CASE_FILE, CASES_DIR
    src = _study_file(tmp_path)
    out = tmp_path / "study"
    argv = [_command(), "study", str(src), "--out", str(out), "--workers", "2", "-q"]
    p = _start(argv)
    deadline = time.monotonic() + 180          # not a performance target: a hung start fails
    while time.monotonic() < deadline and p.poll() is None:
        if (out / CASES_DIR).is_dir() and len(list((out / CASES_DIR).glob(f"*/{CASE_FILE}"))) >= 2:
            break
        time.sleep(0.05)
    if p.poll() is not None:
        p.communicate()
        pytest.skip("the study finished before it could be interrupted")
    code, _, err, _ = _ctrl_c(p)
    assert code == 130, (code, err)
    assert err == "portfolio: interrupted\n", err
    kept = sorted((out / CASES_DIR).glob(f"*/{CASE_FILE}"))
    assert kept
    for f in kept:
        row = json.loads(f.read_text())
        assert row["status"] == "optimal" and f.parent.name == row["case"]
    assert [f for f in out.rglob(".*.tmp")] == []
    assert not (out / "cases.csv").exists()      # the table is written only by a finished run
    total = 60
    assert len(kept) < total
    again = subprocess.run(argv, capture_output=True, text=True, timeout=600)
    assert again.returncode == 0, again.stderr
    assert f"{total - len(kept)} solved now, {len(kept)} done before" in again.stdout
