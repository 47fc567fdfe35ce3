"""Benchmark: tight vs plain formulation of modes and minimum run (not collected by pytest).

20 storages x 96 quarter-hours, exclusive modes, 1 h minimum run, minimum
output when running.  Time to a 0.01 % gap (and to 1 % and 0.1 %, from the
progress callback) for variant "tight" and "plain", several seeds, the
median ratio, and a check that both reach the same optimum.  Part two ("one-binary measurement"): exclusive modes only, where
"tight" uses one binary per storage and step and "plain" two.

    /tmp/venv/bin/python tests/bench/bench_binaries.py [--seeds 3] [--time-limit 120] [--part rules]
"""

import argparse
import os
import statistics
import sys

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path[:0] = [os.path.dirname(os.path.dirname(HERE)), os.path.dirname(HERE)]

import factory as F  # noqa: E402
from portfolio.dispatch import dispatch  # noqa: E402
from portfolio.solve import SolveOptions  # noqa: E402


def portfolio(seed: int, n: int = 20, steps: int = 96, rules: bool = True):
    rng = np.random.default_rng(seed)
    # hourly products (four equal quarter-hours), a daily shape plus noise
    h = np.arange(steps // 4)
    hourly = (55 + 20 * np.sin(2 * np.pi * (h - 8) / 24) + 15 * np.cos(4 * np.pi * h / 24)
              + rng.normal(0, 6, len(h)))
    price = np.repeat(hourly, 4)
    stores = []
    for j in range(n):
        power = float(rng.uniform(1, 3))
        kw = dict(energy=float(rng.uniform(1, 4) * power), power=power, eta_charge=0.93,
                  eta_discharge=0.93, exclusive=True, soc_start=0.5 * power,
                  end_rule=F.END_AT_LEAST, end_value=0.5 * power, wear=1.0)
        if rules:
            kw.update(min_run_h=1.0, charge_min=0.4 * power, discharge_min=0.4 * power)
        stores.append(F.storage(f"s{j}", site=f"site{j % 4}", **kw))
    sites = [F.site(f"site{i}", import_max=8.0, export_max=8.0) for i in range(4)]
    conn = F.connection(sell=F.price("p"), buy=F.price("p", adder=2.0))
    return F.portfolio(steps, step_hours=0.25, storages=stores, sites=sites, connections=[conn],
                       series_list=[F.series("p", price, "price")])


THRESHOLDS = (1e-2, 1e-3, 1e-4)


def run(seeds, time_limit, rules, label, n=20):
    """Solve each seed with both variants; time to reach each gap threshold
    (from the progress callback), final status, gap and objective."""
    print(f"\n{label}")
    print(f"{'seed':>4} {'variant':<6} {'status':<9} {'build s':>7} {'to 1%':>7} {'to 0.1%':>7} "
          f"{'to 0.01%':>8} {'gap':>9} objective  bound")
    ratios, same = [], True
    for seed in seeds:
        p = portfolio(seed, n=n, rules=rules)
        res = {}
        for variant in ("tight", "plain"):
            reached = {}

            def progress(elapsed, best, bound, gap, reached=reached):
                for th in THRESHOLDS:
                    if gap is not None and gap <= th and th not in reached:
                        reached[th] = elapsed

            r = dispatch(p, SolveOptions(variant=variant, mip_gap=1e-4, time_limit=time_limit),
                         progress=progress)
            if r.status == "optimal":
                for th in THRESHOLDS:   # the final call carries the total time
                    reached.setdefault(th, r.solve_seconds)
            res[variant] = (r, reached)
            cells = [f"{reached[th]:7.1f}" if th in reached else "      -" for th in THRESHOLDS]
            print(f"{seed:>4} {variant:<6} {r.status:<9} {r.build_seconds:7.2f} {cells[0]} {cells[1]} "
                  f"{cells[2]:>8} {(r.mip_gap or 0):9.2e} {r.objective:.4f} {r.best_bound:.4f}",
                  flush=True)
        (a, ra), (b, rb) = res["tight"], res["plain"]
        ta = ra.get(1e-4, time_limit)
        tb = rb.get(1e-4, time_limit)
        ratios.append(tb / max(ta, 1e-9))
        # same optimum: each objective lies within the other's bound
        tol = 1e-6 * max(1.0, abs(a.objective))
        same &= a.objective <= b.best_bound + tol and b.objective <= a.best_bound + tol
    print(f"median ratio of time to 0.01 % (plain/tight; a limit hit counts as the limit, "
          f"{time_limit:g} s): {statistics.median(ratios):.2f} "
          f"(ratios {', '.join(f'{x:.2f}' for x in ratios)})")
    print("consistent optimum (each objective within the other's bound):", same, flush=True)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--seeds", type=int, default=3)
    ap.add_argument("--time-limit", type=float, default=120.0)
    ap.add_argument("--part", choices=("both", "rules", "exclusive"), default="both")
    ap.add_argument("--storages", type=int, default=20)
    args = ap.parse_args()
    seeds = list(range(args.seeds))
    if args.part in ("both", "rules"):
        run(seeds, args.time_limit, True,
            f"{args.storages} storages x 96 quarter-hours: exclusive, 1 h minimum run, minimum output",
            n=args.storages)
    if args.part in ("both", "exclusive"):
        run(seeds, args.time_limit, False,
            f"one-binary measurement, {args.storages} storages: exclusive only "
            f"(tight: 1 binary, plain: 2 binaries)", n=args.storages)


if __name__ == "__main__":
    main()
