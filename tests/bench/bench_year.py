"""Benchmark: a year by windows against the monolith (not collected by pytest).

    python tests/bench/bench_year.py [--storages 10] [--hours 8760] [--windows 1d/1d]
                                     [--end value] [--gap 1e-4] [--window-limit S]
                                     [--monolith-limit 0] [--workers 1] [--foresight 48h]
                                     [--step-minutes 60] [--bound auto|whole|split]
                                     [--no-sketch]

The fleet of tests/bench/bench_time_limit.py: batteries on three sites over
an hourly year, exclusive modes, minimum output when running and a 2 h
minimum run.  Dispatches it by windows (portfolio/windows/) and reports the
wall time, the process's peak memory up to then, the whole-horizon LP bound
and its time, the stitched objective as a share of the bound, and the
slowest windows (``--step-minutes 15`` makes the steps quarter-hours: the
same fleet and prices held over each hour, ``--hours`` steps of 15 min each
count as a quarter of an hour, so ``--hours 35040 --step-minutes 15`` is a
year); then, with ``--monolith-limit S``, the monolithic MILP under
that time limit in the same process (its memory adds to the peak, so it runs
second), for the side-by-side figures of docs/performance.md.
"""

import argparse
import os
from dataclasses import replace
import resource
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path[:0] = [os.path.dirname(os.path.dirname(HERE)), os.path.dirname(HERE), HERE]

from bench_time_limit import portfolio  # noqa: E402
from portfolio import sketch  # noqa: E402
from portfolio.dispatch import dispatch  # noqa: E402
from portfolio.solve import SolveOptions  # noqa: E402
from portfolio.windows import dispatch_windows, foresight, parse  # noqa: E402


def peak_gib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--storages", type=int, default=10)
    ap.add_argument("--hours", type=int, default=8760)
    ap.add_argument("--windows", default="1d/1d")
    ap.add_argument("--end", default="value", help="value, target, pin; hold, free or a price "
                                                   "with --foresight")
    ap.add_argument("--workers", type=int, default=1, help="windows at once (needs --end pin)")
    ap.add_argument("--foresight", default=None, help="limited foresight, e.g. 48h (commit: --windows)")
    ap.add_argument("--gap", type=float, default=1e-4, help="each window's MIP gap")
    ap.add_argument("--window-limit", type=float, default=None, help="seconds per window (and LP)")
    ap.add_argument("--monolith-limit", type=float, default=0.0, help="seconds; 0: no monolith")
    ap.add_argument("--step-minutes", type=int, default=60, help="60 (hours) or 15 (quarter-hours)")
    ap.add_argument("--bound", default="auto", help="auto, whole or split (docs/windows.md)")
    ap.add_argument("--no-sketch", action="store_true",
                    help="no hourly sketch as a first schedule (portfolio/sketch.py)")
    args = ap.parse_args()
    if args.no_sketch:
        sketch.needs_sketch = lambda p: False
    p = portfolio(args.storages, args.hours, step_minutes=args.step_minutes)
    if args.foresight:
        spec = foresight(args.foresight, args.windows.partition("/")[0], args.end)
    else:
        spec = parse(args.windows, args.end, args.workers)
    spec = replace(spec, bound=args.bound)

    def progress(done, total, seconds, objective):
        if done % 30 == 0 or done == total:
            print(f"  window {done}/{total} at {seconds:.0f} s", file=sys.stderr, flush=True)

    t0 = time.perf_counter()
    r = dispatch_windows(p, spec, SolveOptions(mip_gap=args.gap, time_limit=args.window_limit), progress=progress)
    wall = time.perf_counter() - t0
    w = r.summary["windows"]
    print(f"{args.storages} storages x {args.hours} steps of {args.step_minutes} min, windows "
          f"{args.windows} ({args.end}), foresight {args.foresight}, {args.workers} workers, "
          f"bound {w['bound_method']}")
    share = (r.objective / w["lp_bound"]) if r.objective is not None and w["lp_bound"] else None
    print(f"windows: wall {wall:.1f} s | LP {w['lp_seconds']:.1f} s | {w['count']} windows | "
          f"peak {peak_gib():.2f} GiB | status {r.status} | objective {r.objective} | "
          f"LP bound {w['lp_bound']} | share of bound {share} | gap {w['gap']} | "
          f"violation {w['max_violation']} | solved again {w['resolved']}")
    slow = sorted(w["windows"], key=lambda x: -x["seconds"])[:3]
    print("  slowest windows:", ", ".join(f"{x['window']}: {x['seconds']:.1f} s ({x['status']}, "
                                          f"gap {x['gap']})" for x in slow))
    if args.monolith_limit > 0:
        t0 = time.perf_counter()
        m = dispatch(p, SolveOptions(time_limit=args.monolith_limit))
        wall = time.perf_counter() - t0
        print(f"monolith: wall {wall:.1f} s | peak {peak_gib():.2f} GiB | status {m.status} | "
              f"objective {m.objective} | bound {m.best_bound} | gap {m.mip_gap}")


if __name__ == "__main__":      # the guard parallel windows need (spawned processes)
    main()
