"""Benchmark: lint time for large generated portfolios (run by hand).

    python tests/bench/bench_lint.py [--storages 1000] [--sites 20]

Generates portfolios of N storages over 20 sites (each storage with its own
block of settings overriding a preset, each site with a solar supply and a
demand read from one shared CSV), and times `portfolio.lint_file` in-process,
after one warm-up run, for N = 250, 500, 1000, 2000 to show how time grows with
file size.  Target (issue 2): 1,000 storages under 1 s; roughly linear.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def make(n_storages: int, n_sites: int, folder: Path) -> Path:
    steps = 96
    rng = np.random.default_rng(1)
    times = [f"2027-05-01T{h:02d}:{m:02d}+00:00" for h in range(24) for m in (0, 15, 30, 45)]
    rows = ["time,price,pv,load"] + [f"{t},{40 + 30 * rng.random():.2f},{5 * rng.random():.3f},{rng.random():.3f}"
                                     for t in times]
    (folder / "series.csv").write_text("\n".join(rows) + "\n")
    out = ["portfolio bench", 'horizon start 2027-05-01T00:00 length 24 h step 15 min zone "UTC"',
           'price spot from "series.csv" column "price"',
           "connection main { export max 500 MW import max 400 MW sell at spot buy at spot plus 5 per MWh }",
           "preset cell { kind battery energy 4 MWh charge max 2 MW discharge max 2 MW",
           "  efficiency round trip 90% soc min 5% max 95% start 50% modes exclusive wear 3 per MWh }"]
    per_site = n_storages // n_sites
    k = 0
    for s in range(n_sites):
        out.append(f"site yard_{s:02d} at main {{")
        out.append("  export max 60 MW import max 50 MW")
        out.append(f'  demand load_{s:02d} from "series.csv" column "load"')
        out.append(f'  supply pv_{s:02d} from "series.csv" column "pv" {{ into site curtail allowed }}')
        for _ in range(per_site):
            out.append(f"  storage b{k:05d} like cell {{ energy {3 + k % 5} MWh  soc start {20 + k % 50}%"
                       f"  discharge max {1 + k % 3} MW min 0.2 MW when running }}")
            k += 1
        out.append("}")
    path = folder / f"bench_{n_storages}.folio"
    path.write_text("\n".join(out) + "\n")
    return path


def time_lint(path: Path, repeats: int = 5) -> float:
    import portfolio

    r = portfolio.lint_file(path)  # warm-up (grammar, pint registry, imports)
    assert r.ok, [f"{d.span}: {d.message}" for d in r.diagnostics[:5]]
    samples = []
    for _ in range(repeats):
        t = time.perf_counter()
        portfolio.lint_file(path)
        samples.append(time.perf_counter() - t)
    return statistics.median(samples)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--sizes", default="250,500,1000,2000")
    ap.add_argument("--sites", type=int, default=20)
    args = ap.parse_args(argv)
    sizes = [int(x) for x in args.sizes.split(",")]
    results = []
    with tempfile.TemporaryDirectory() as tmp:
        for n in sizes:
            p = make(n, args.sites, Path(tmp))
            secs = time_lint(p)
            results.append((n, p.stat().st_size, secs))
    base_n, base_bytes, base_s = results[0]
    print("| storages | file KiB | lint s (median of 5) | time ratio vs smallest | size ratio |")
    print("|---:|---:|---:|---:|---:|")
    for n, b, s in results:
        print(f"| {n} | {b / 1024:.0f} | {s:.3f} | {s / base_s:.2f} | {b / base_bytes:.2f} |")
    xs, ys = np.log([r[1] for r in results]), np.log([r[2] for r in results])
    slope = np.polyfit(xs, ys, 1)[0]
    print(f"\ngrowth exponent of lint time in file size: {slope:.2f} (1.0 = linear)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
