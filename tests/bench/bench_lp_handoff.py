"""Benchmark: Pyomo -> HiGHS hand-off for a large LP (not collected by pytest).

10 storages x 8760 hourly steps, no binaries, one connection.  Compares the
matrix path (the compiler's arrays -> passModel) with Pyomo's ``highs``
interface on the same model (its hand-off includes making the Pyomo model);
each runs in its own process so that neither inherits the other's memory.
Then end-to-end ``dispatch()`` against HiGHS alone on the same LP, written
to MPS and re-solved in a fresh process.

    /tmp/venv/bin/python tests/bench/bench_lp_handoff.py [--storages 10] [--hours 8760]
"""

import argparse
import json
import os
import subprocess
import sys
import time

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(os.path.dirname(HERE))
sys.path[:0] = [ROOT, os.path.dirname(HERE)]


def portfolio(n_storages: int, hours: int, seed: int = 1):
    import factory as F

    rng = np.random.default_rng(seed)
    t = np.arange(hours)
    price = 60 + 25 * np.sin(2 * np.pi * t / 24) + rng.normal(0, 8, hours)
    n_sites = max(1, n_storages // 2)
    stores = [F.storage(f"bat{j}", site=f"site{j % n_sites}", energy=float(rng.uniform(2, 8)),
                        power=float(rng.uniform(1, 2)), eta_charge=0.95, eta_discharge=0.95,
                        loss_per_h=0.0005, wear=2.0, soc_start=1.0,
                        end_rule=F.END_AT_LEAST, end_value=1.0) for j in range(n_storages)]
    sites = [F.site(f"site{i}", import_max=5.0, export_max=5.0) for i in range(n_sites)]
    conn = F.connection(sell=F.price("p"), buy=F.price("p", adder=1.0), export_max=15.0,
                        import_max=15.0)
    return F.portfolio(hours, storages=stores, sites=sites, connections=[conn],
                       series_list=[F.series("p", price, "price")])


def one(interface: str, storages: int, hours: int) -> dict:
    from portfolio.compile import build
    from portfolio.solve import SolveOptions, solve

    p = portfolio(storages, hours)
    t0 = time.perf_counter()
    b = build(p)
    t_build = time.perf_counter() - t0
    t1 = time.perf_counter()
    s = solve(b, SolveOptions(interface=interface))
    total = time.perf_counter() - t1
    ncols = sum(len(v) for v in s.values.values())
    return dict(interface=interface, status=s.status, build=t_build, handoff=s.handoff_seconds,
                highs=s.solve_seconds, load=s.load_seconds, total=total, objective=s.objective,
                variables=ncols)


def end_to_end(storages: int, hours: int, mps_path: str) -> dict:
    """dispatch() wall time (build, hand-off, solve, tables), then export the same LP."""
    import highspy

    from portfolio.compile import build
    from portfolio.dispatch import dispatch
    from portfolio.solve import to_highs_lp

    p = portfolio(storages, hours)
    t0 = time.perf_counter()
    r = dispatch(p)
    wall = time.perf_counter() - t0
    lp, _ = to_highs_lp(build(p))      # the very LP that dispatch() passed to HiGHS
    h = highspy.Highs()
    h.setOptionValue("output_flag", False)
    h.passModel(lp)
    h.writeModel(mps_path)
    return dict(wall=wall, status=r.status, objective=r.objective)


def highs_alone(mps_path: str) -> dict:
    """Fresh process: read the exported model and time HiGHS's run() alone."""
    import highspy

    h = highspy.Highs()
    h.setOptionValue("output_flag", False)
    h.readModel(mps_path)
    t0 = time.perf_counter()
    h.run()
    return dict(run=time.perf_counter() - t0, objective=h.getInfo().objective_function_value)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--storages", type=int, default=10)
    ap.add_argument("--hours", type=int, default=8760)
    ap.add_argument("--one", choices=("matrix", "pyomo"), help=argparse.SUPPRESS)
    ap.add_argument("--e2e", metavar="MPS", help=argparse.SUPPRESS)
    ap.add_argument("--alone", metavar="MPS", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.one:
        print(json.dumps(one(args.one, args.storages, args.hours)))
        return
    if args.e2e:
        print(json.dumps(end_to_end(args.storages, args.hours, args.e2e)))
        return
    if args.alone:
        print(json.dumps(highs_alone(args.alone)))
        return
    rows = []
    for interface in ("matrix", "pyomo"):
        out = subprocess.run([sys.executable, __file__, "--one", interface, "--storages",
                              str(args.storages), "--hours", str(args.hours)],
                             capture_output=True, text=True, check=True)
        rows.append(json.loads(out.stdout.strip().splitlines()[-1]))
    print(f"{args.storages} storages x {args.hours} steps (LP, no binaries), "
          f"{rows[0]['variables']} variables")
    print(f"{'interface':<9} {'build s':>8} {'hand-off s':>10} {'HiGHS s':>8} {'load s':>7} "
          f"{'solve() s':>9}  objective")
    for r in rows:
        print(f"{r['interface']:<9} {r['build']:8.2f} {r['handoff']:10.2f} {r['highs']:8.2f} "
              f"{r['load']:7.2f} {r['total']:9.2f}  {r['objective']:.6f}")
    a, b = rows[0]["objective"], rows[1]["objective"]
    print("same optimum:", abs(a - b) <= 1e-6 * max(1.0, abs(a)))

    import tempfile
    with tempfile.TemporaryDirectory() as tmp:
        mps = os.path.join(tmp, "model.mps")
        run = lambda *extra: json.loads(subprocess.run(
            [sys.executable, __file__, "--storages", str(args.storages), "--hours", str(args.hours), *extra],
            capture_output=True, text=True, check=True).stdout.strip().splitlines()[-1])
        e2e = run("--e2e", mps)
        alone = run("--alone", mps)
    print(f"\nend-to-end dispatch() {e2e['wall']:.2f} s; HiGHS alone on the exported model "
          f"{alone['run']:.2f} s; ratio {e2e['wall'] / alone['run']:.2f} (target <= 1.5); "
          f"same optimum: {abs(e2e['objective'] - alone['objective']) <= 1e-6 * max(1.0, abs(alone['objective']))}")


if __name__ == "__main__":
    main()
