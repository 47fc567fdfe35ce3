"""Benchmark: start-up of the command (not collected by pytest).

    python tests/bench/bench_startup.py [--runs 7] [--baseline REV]

Median wall time of `portfolio --help` and of `portfolio lint` on the demo,
each a fresh process, and the slowest imports of the lint (from
`python -X importtime`).  Issue target: each ≤ 0.3 s on an idle machine.
With ``--baseline``, the package at that commit (`git archive` into a
temporary folder) and the working tree lint the demo in turn, each in a fresh
process, and the medians and their ratio are printed: a side-by-side
before/after for docs/performance.md.  Beside the whole lint, the first parse
of the demo (``syntax.parse`` once its modules are imported: making the parser
and reading the text) is timed inside the same processes.

Every child process may write and read Python's bytecode cache (an
environment that sets PYTHONDONTWRITEBYTECODE otherwise compiles every module
from source at each start), and each side runs once unmeasured first, so both
are measured as an installed package starts: with its bytecode cached.
"""

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "examples" / "kestrel_bay" / "kestrel_bay.folio"


def median_wall(argv, runs):
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        subprocess.run(argv, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=False)
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


LINT = "import sys; sys.path.insert(0, %r); from portfolio.api import lint_file; lint_file(%r)"
# The first parse of the demo, its imports done: making the parser and reading the text.
PARSE = ("import sys, time; sys.path.insert(0, %r); from portfolio import syntax; "
         "from portfolio.diagnostics import Sink; text = open(%r, encoding='utf-8').read(); "
         "t0 = time.perf_counter(); syntax.parse(text, 'demo', Sink()); print(time.perf_counter() - t0)")
CHILD_ENV = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}


def _child(code):
    return subprocess.run([sys.executable, "-c", code], check=True, capture_output=True, text=True,
                          env=CHILD_ENV).stdout


def side_by_side(rev, runs):
    """Median wall time of an in-process lint of the demo, and of its first parse:
    the package at ``rev`` against the working tree, alternating fresh processes."""
    with tempfile.TemporaryDirectory() as tmp:
        archive = subprocess.run(["git", "-C", str(ROOT), "archive", rev, "portfolio"],
                                 check=True, capture_output=True).stdout
        subprocess.run(["tar", "-x", "-C", tmp], input=archive, check=True)
        lint = {tmp: [], str(ROOT): []}
        parse = {tmp: [], str(ROOT): []}
        for root in lint:   # unmeasured: writes the bytecode cache
            _child(LINT % (root, str(DEMO)))
        for _ in range(runs):
            for root in lint:
                t0 = time.perf_counter()
                _child(LINT % (root, str(DEMO)))
                lint[root].append(time.perf_counter() - t0)
                parse[root].append(float(_child(PARSE % (root, str(DEMO)))))
        for what, times in (("lint_file(demo), fresh process", lint), ("first parse of the demo", parse)):
            b, a = statistics.median(times[tmp]), statistics.median(times[str(ROOT)])
            print(f"{what}: {rev} median {b:.3f} s, now median {a:.3f} s, now / before {a / b:.2f}")


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=7)
    ap.add_argument("--baseline", help="a commit to compare the lint's start-up with")
    args = ap.parse_args()
    if args.baseline:
        side_by_side(args.baseline, args.runs)
    exe = shutil.which("portfolio", path=str(Path(sys.executable).parent)) or "portfolio"
    print(f"portfolio --help: median {median_wall([exe, '--help'], args.runs):.3f} s")
    print(f"portfolio lint demo: median {median_wall([exe, 'lint', str(DEMO)], args.runs):.3f} s")
    out = subprocess.run([sys.executable, "-X", "importtime", "-c",
                          "from portfolio.api import lint_file; lint_file(%r)" % str(DEMO)],
                         capture_output=True, text=True).stderr.splitlines()
    rows = []
    for line in out:
        parts = line.split("|")
        if len(parts) == 3 and parts[1].strip().isdigit():
            rows.append((int(parts[1]), parts[2].rstrip()))
    print("slowest imports (cumulative µs):")
    for us, name in sorted(rows, reverse=True)[:8]:
        print(f"  {us:>9} {name}")


if __name__ == "__main__":
    main()
