"""Benchmark: start-up of the command (not collected by pytest).

    python tests/bench/bench_startup.py [--runs 7]

Median wall time of `portfolio --help` and of `portfolio lint` on the demo,
each a fresh process, and the slowest imports of the lint (from
`python -X importtime`).  Issue target: each ≤ 0.3 s on an idle machine.
"""

import argparse
import shutil
import statistics
import subprocess
import sys
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


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=7)
    args = ap.parse_args()
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
