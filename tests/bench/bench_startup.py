"""Benchmark: start-up of the command (not collected by pytest).

    python tests/bench/bench_startup.py [--runs 7] [--baseline REV]

Median wall time of `portfolio --help` and of `portfolio lint` on the demo,
each a fresh process, and the slowest imports of the lint (from
`python -X importtime`).  Issue target: each ≤ 0.3 s on an idle machine.
With ``--baseline``, the package at that commit (`git archive` into a
temporary folder) and the working tree lint the demo in turn, each in a fresh
process, and the medians and their ratio are printed: a side-by-side
before/after for docs/performance.md.
"""

import argparse
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


def side_by_side(rev, runs):
    """Median wall time of an in-process lint of the demo: the package at ``rev``
    against the working tree, alternating fresh processes."""
    with tempfile.TemporaryDirectory() as tmp:
        archive = subprocess.run(["git", "-C", str(ROOT), "archive", rev, "portfolio"],
                                 check=True, capture_output=True).stdout
        subprocess.run(["tar", "-x", "-C", tmp], input=archive, check=True)
        before, after = [], []
        for _ in range(runs):
            for root, times in ((tmp, before), (str(ROOT), after)):
                t0 = time.perf_counter()
                subprocess.run([sys.executable, "-c", LINT % (root, str(DEMO))], check=True,
                               stdout=subprocess.DEVNULL)
                times.append(time.perf_counter() - t0)
    b, a = statistics.median(before), statistics.median(after)
    print(f"lint_file(demo), fresh process: {rev} median {b:.3f} s, now median {a:.3f} s, "
          f"now / before {a / b:.2f}")


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
