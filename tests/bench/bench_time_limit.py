"""Benchmark: is a time limit honoured on a year-long MILP? (not collected by pytest)

    python tests/bench/bench_time_limit.py [--limit 120] [--storages 10] [--hours 8760]

Ten batteries on three sites over an hourly year, exclusive modes, minimum
output when running and a 2 h minimum run: one monolithic MILP (the case the
year-long dispatch will decompose).  Dispatches it with a time limit and
reports the wall time from the call to the result (build, warm start, search,
polish all included) against the limit, the phases, the status and gap, and
the process's peak memory.
"""

import argparse
import os
import resource
import sys
import time

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path[:0] = [os.path.dirname(os.path.dirname(HERE)), os.path.dirname(HERE)]

import factory as F  # noqa: E402
from portfolio.dispatch import dispatch  # noqa: E402
from portfolio.solve import SolveOptions  # noqa: E402


def portfolio(n: int, hours: int, seed: int = 3, step_minutes: int = 60):
    """The fleet over ``hours`` steps of ``step_minutes`` (60: hours; 15: quarter-hours, the
    price a function of the hour of day as before plus noise per step)."""
    rng = np.random.default_rng(seed)
    dt = step_minutes / 60.0
    t = np.arange(hours) * dt
    price = (50 + 18 * np.sin(2 * np.pi * (t - 7) / 24) + 8 * np.sin(2 * np.pi * t / (24 * 7))
             + 10 * np.sin(2 * np.pi * t / (24 * 365)) + rng.normal(0, 7, hours))
    stores = [F.storage(f"b{j}", site=f"site{j % 3}", energy=8.0 + j % 3, power=4.0,
                        eta_charge=0.93, eta_discharge=0.93, exclusive=True, soc_start=4.0,
                        end_rule=F.END_AT_LEAST, end_value=4.0, wear=2.0, min_run_h=2.0,
                        charge_min=1.0, discharge_min=1.0) for j in range(n)]
    sites = [F.site(f"site{i}", import_max=10.0, export_max=10.0) for i in range(3)]
    conn = F.connection(sell=F.price("p"), buy=F.price("p", adder=3.0), export_max=25.0,
                        import_max=25.0)
    return F.portfolio(hours, step_hours=dt, storages=stores, sites=sites, connections=[conn],
                       series_list=[F.series("p", np.round(price, 2), "price")])


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--limit", type=float, default=120.0)
    ap.add_argument("--storages", type=int, default=10)
    ap.add_argument("--hours", type=int, default=8760)
    args = ap.parse_args()
    p = portfolio(args.storages, args.hours)
    t0 = time.perf_counter()
    r = dispatch(p, SolveOptions(time_limit=args.limit))
    wall = time.perf_counter() - t0
    s = r.summary
    peak_gib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20
    print(f"{args.storages} storages x {args.hours} h, limit {args.limit:g} s")
    print(f"wall {wall:.1f} s (overrun {wall - args.limit:+.1f} s) | build {s['build_seconds']:.1f} | "
          f"start {s['start_seconds']:.1f} | solve {s['solve_seconds']:.1f} | "
          f"polish {s['polish_seconds']:.1f} | peak {peak_gib:.2f} GiB")
    print(f"status {r.status} | objective {r.objective} | bound {r.best_bound} | gap {r.mip_gap} | "
          f"solver {s.get('solver_status')}")
    for note in s.get("notes", []):
        print("note:", note)


if __name__ == "__main__":
    main()
