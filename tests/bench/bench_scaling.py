"""Benchmark: how build and solve time grow with the number of linked storages.

    python tests/bench/bench_scaling.py [--sizes 5,10,20,50] [--time-limit 60] [--compare]

Portfolios of N storages over 96 quarter-hours, half batteries (exclusive
modes, minimum output when running, 30 min minimum run) and half reservoirs in
cascades of two (release and spill routes with a 30 min delay, minimum
output, 1 h minimum run), spread over sites on two connections with a
portfolio-wide export cap.  Reports build time (text to Pyomo model), solve
time and the gap after the time limit, and the growth exponent of build time
in N (target: 1, i.e. linear in storages x steps).
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def make_text(n: int, seed: int = 7) -> str:
    rng = np.random.default_rng(seed)
    steps = 96
    q = np.arange(steps)
    north = 55 + 30 * np.sin(q / 96 * 2 * np.pi - 1.2) + rng.normal(0, 8, steps)
    valley = 50 + 25 * np.sin(q / 96 * 2 * np.pi - 0.9) + rng.normal(0, 8, steps)
    fmt = lambda a: "[" + ", ".join(f"{x:.2f}" for x in a) + "]"
    lines = ["portfolio scaling", 'horizon start 2027-01-11T00:00 length 24 h step 15 min zone "UTC"',
             f"price north values {fmt(north)}", f"price valley values {fmt(valley)}",
             "connection north_grid { export max 400 MW import max 300 MW sell at north buy at north plus 6 per MWh }",
             "connection valley_grid { export max 400 MW import max 300 MW sell at valley buy at valley plus 9 per MWh }",
             f"total {{ export max {max(8, n * 3)} MW }}",
             "preset cell { kind battery energy 8 MWh charge max 4 MW min 0.5 MW when running",
             "  discharge max 4 MW min 0.5 MW when running efficiency round trip 89% soc min 5% start 50%",
             "  modes exclusive run at least 30 min wear 2 per MWh }"]
    n_bat = n // 2
    n_res = n - n_bat
    per_site = 5
    k = 0
    for s in range(0, n_bat, per_site):
        lines.append(f"site bat_site_{s} at north_grid {{ export max 20 MW import max 20 MW")
        for _ in range(min(per_site, n_bat - s)):
            lines.append(f"  storage cell_{k} like cell {{ energy {6 + k % 4} MWh }}")
            k += 1
        lines.append("}")
    pair = 0
    while n_res > 0:
        lines.append(f"site hydro_{pair} at valley_grid {{")
        lines.append(f"  storage up_{pair} {{ kind reservoir energy 60 MWh discharge max 8 MW min 2 MW when running"
                     f" efficiency charge 100% discharge 90% run at least 1 h soc min 10% start 50%"
                     f" supply river_{pair} {2 + pair % 3} MW spill allowed }}")
        n_res -= 1
        if n_res > 0:
            lines.append(f"  storage down_{pair} {{ kind reservoir energy 40 MWh discharge max 6 MW min 1 MW when running"
                         f" efficiency charge 100% discharge 90% soc start 40% spill allowed }}")
            lines.append(f"  route up_{pair} release -> down_{pair} delay 30 min factor 0.8")
            lines.append(f"  route up_{pair} spill -> down_{pair} delay 30 min factor 0.8")
            n_res -= 1
        lines.append("}")
        pair += 1
    return "\n".join(lines) + "\n"


def run(n: int, time_limit: float, folder: Path, warm_starts=(True,)) -> dict:
    import portfolio
    from portfolio.compile import build
    from portfolio.dispatch import dispatch
    from portfolio.solve import SolveOptions

    path = folder / f"scaling_{n}.folio"
    path.write_text(make_text(n))
    t0 = time.perf_counter()
    p = portfolio.load(path).model
    t_lint = time.perf_counter() - t0
    builds = []
    for _ in range(3):             # build alone, median of three, timed apart from the solve
        t1 = time.perf_counter()
        build(p)
        builds.append(time.perf_counter() - t1)
    row = {"n": n, "lint_s": t_lint, "build_s": sorted(builds)[1], "solves": []}
    for warm in warm_starts:       # side by side, same portfolio
        r = dispatch(p, SolveOptions(time_limit=time_limit, mip_gap=1e-4, warm_start=warm))
        row["solves"].append({"warm": warm, "solve_s": r.solve_seconds, "status": r.status,
                              "gap": r.mip_gap, "objective": r.objective,
                              "start_s": r.summary["start_seconds"],
                              "start_obj": r.summary["start_objective"]})
    return row


def main(argv=None) -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--sizes", default="5,10,20,50,100")
    ap.add_argument("--time-limit", type=float, default=60.0)
    ap.add_argument("--compare", action="store_true",
                    help="also solve without the warm start, side by side")
    args = ap.parse_args(argv)
    warm_starts = (True, False) if args.compare else (True,)
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for n in (int(x) for x in args.sizes.split(",")):
            rows.append(run(n, args.time_limit, Path(tmp), warm_starts))
    print("| storages | lint s | build s | warm start | start s | start objective | solve s | status | gap | objective |")
    print("|---:|---:|---:|---|---:|---:|---:|---|---:|---:|")
    for r in rows:
        for s in r["solves"]:
            gap = "—" if s["gap"] is None else f"{s['gap'] * 100:.3f} %"
            obj = "—" if s["objective"] is None else f"{s['objective']:.2f}"
            sobj = "—" if s["start_obj"] is None else f"{s['start_obj']:.2f}"
            print(f"| {r['n']} | {r['lint_s']:.3f} | {r['build_s']:.3f} | {'on' if s['warm'] else 'off'} "
                  f"| {s['start_s']:.2f} | {sobj} | {s['solve_s']:.2f} | {s['status']} | {gap} | {obj} |")
    ns = np.array([r["n"] for r in rows], float)
    bs = np.array([r["build_s"] for r in rows], float)
    slope = np.polyfit(np.log(ns), np.log(bs), 1)[0]
    print(f"\ngrowth exponent of build time in storages: {slope:.2f} (1.0 = linear in storages x steps)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
