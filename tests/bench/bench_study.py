"""Benchmark: a study on the local Dask cluster against a serial loop of dispatch (not collected by pytest).

    python tests/bench/bench_study.py [--cases 200] [--workers 2] [--rounds 2] [--method forkserver] [--commands N] [--hours 24]

A study of small cases (an hourly day, five storages on two sites behind one
connection, exclusive modes on two of them so each case is a small MILP):
``--cases`` cases from one storage's energy, the connection's export limit and
four price scenarios.  Side by side in one process, in this order:

* **serial**: a loop of :func:`portfolio.dispatch.dispatch` over the case
  models (:func:`portfolio.study.apply`), in this process, no Dask, no files;
* **study**: :func:`portfolio.study.run` into a fresh folder, which starts a
  ``LocalCluster`` of ``--workers`` processes, runs every case, writes every
  case's row, the tables and no plots, and stops the cluster: the wall time a
  user waits for;
* **study, cluster up**: the same on a cluster started beforehand (the
  cluster's start and stop timed apart, the fork server's start included, and
  left out of the study's time): Dask's per-task cost alone;
* **plain processes**: the cases split evenly over ``--workers`` processes of a
  ``ProcessPoolExecutor`` (no Dask; started and warmed before the clock), each a
  serial loop: the floor any engine meets on this machine;
* **study, cluster up, one case a task** (``chunk=1``): what the chunks save.

``--method`` picks how the local cluster's workers start (forkserver or spawn;
default the runner's ``START_METHOD``).

With ``--commands N``, also N rounds of two commands side by side, each a new
process timed from its start to its exit (interpreter, imports, reading the
file, the cases, the table and the plots, as a user waits for them):

* ``portfolio study FILE --out DIR --quiet`` (its own local cluster; the fork
  server starts before the file is read);
* the same cases as a serial loop in one plain Python process: the file
  loaded, every case dispatched (:func:`portfolio.study.run_serial`), the same
  table and plots written (:func:`portfolio.study.results.write_table`,
  ``write_plots``), no Dask.

Then the traffic: the bytes scattered once (the model and the study, to each
worker), the bytes of one task as submitted (its function, its case, the
options and two references to the scattered data, pickled as Dask pickles
them), what a task would weigh if it carried the model itself, and the
scheduler's count of bytes moved between workers and of the scattered keys'
copies (one per worker).  The figures go to docs/performance.md ("Studies").
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path[:0] = [os.path.dirname(os.path.dirname(HERE))]

import portfolio  # noqa: E402
from portfolio.dispatch import dispatch  # noqa: E402
from portfolio.solve import SolveOptions  # noqa: E402
from portfolio.study import apply, cases, run  # noqa: E402
from portfolio.study.run import local_cluster, solve_case  # noqa: E402


def text(n_cases: int, hours: int = 24, seed: int = 5) -> str:
    """The study's file: 5 storages, ``hours`` hourly steps (a day), cases = energies x export
    limits x 4 scenarios."""
    rng = np.random.default_rng(seed)
    t = np.arange(hours)
    base = 50 + 20 * np.sin(2 * np.pi * (t - 7) / 24)

    def prices(k):
        v = base * (0.8 + 0.15 * k) + rng.normal(0, 6, hours)
        return "[" + ", ".join(f"{x:.2f}" for x in v) + "]"

    scenarios = 4
    limits = 5
    energies = max(1, n_cases // (scenarios * limits))
    lines = ["portfolio bench_study",
             f'horizon start 2027-06-01T00:00 length {hours} h step 1 h zone "UTC"',
             f"price spot values {prices(0)} per MWh",
             "connection grid { export max 12 MW import max 12 MW sell at spot buy at spot plus 2 per MWh }"]
    for s in range(2):
        lines.append(f"site s{s} at grid {{ export max 8 MW import max 8 MW")
        for k in range(3 if s == 0 else 2):
            j = 3 * s + k
            modes = " modes exclusive" if j in (0, 3) else ""
            lines.append(f"  storage b{j} {{ kind battery energy {6 + j} MWh charge max 3 MW discharge max 3 MW "
                         f"efficiency round trip 88% soc start 50% end at least start{modes} }}")
        lines.append("}")
    energy = ", ".join(str(4 + k) for k in range(energies))
    export = ", ".join(str(6 + 2 * k) for k in range(limits))
    lines.append("study sweep {")
    lines.append(f"  vary b0 energy values [{energy}] MWh")
    lines.append(f"  vary grid export max values [{export}] MW")
    for k in range(scenarios):
        lines.append(f"  scenario p{k} for spot values {prices(k)} per MWh")
    lines.append("}")
    return "\n".join(lines) + "\n"


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--cases", type=int, default=200)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--hours", type=int, default=24, help="each case's horizon (hourly steps; the target: 24)")
    ap.add_argument("--rounds", type=int, default=2, help="serial and study runs, alternating")
    ap.add_argument("--method", choices=("forkserver", "spawn"), default=None,
                    help="how the local cluster's workers start (default: the runner's, START_METHOD)")
    ap.add_argument("--commands", type=int, default=0,
                    help="also N rounds of the two commands (study vs a serial loop), each a new process")
    args = ap.parse_args()
    if args.method:
        sys.modules["portfolio.study.run"].START_METHOD = args.method   # the module (portfolio.study.run is a function)
    tmp = Path(tempfile.mkdtemp(prefix="bench-study-"))
    try:
        src = tmp / "bench_study.folio"
        src.write_text(text(args.cases, hours=args.hours))
        p = portfolio.load(src).model
        study = p.studies["sweep"]
        every = cases(study)
        options = SolveOptions(threads=1)
        print(f"{len(every)} cases: 5 storages (2 with exclusive modes) x {args.hours} h; {args.workers} workers; "
              f"{os.cpu_count()} cores; load average {os.getloadavg()[0]:.2f} at the start")
        dispatch(apply(p, study, every[0]), options)             # warm-up (imports, first solve)
        rounds = []
        workers = args.workers
        for r in range(args.rounds):
            rounds.append(_round(p, study, every, options, tmp / f"round{r}", args.workers))
            f = rounds[-1]
            print(f"round {r + 1}: serial {f['serial']:.2f} s ({f['serial'] / len(every) * 1e3:.0f} ms a case, "
                  f"CPU {f['serial_cpu']:.2f} s) | study {f['study']:.2f} s (ratio {f['study'] / f['serial']:.2f}) | "
                  f"CPU {f['study_cpu']:.2f} s, {f['in_process']} cases in-process | "
                  f"cluster up: start {f['up']:.2f} s, stop {f['down']:.2f} s, study {f['warm']:.2f} s (ratio {f['warm'] / f['serial']:.2f}), "
                  f"CPU: tool+scheduler {f['client_cpu']:.2f} s, workers {f['worker_cpu']:.2f} s | "
                  f"cluster up, one case a task {f['single']:.2f} s (ratio {f['single'] / f['serial']:.2f}) | "
                  f"{workers} plain processes, no Dask {f['plain']:.2f} s (ratio {f['plain'] / f['serial']:.2f}, "
                  f"CPU {f['plain_cpu']:.2f} s) | "
                  f"tasks' own wall {f['task_wall']:.2f} s summed | same objectives {f['same']} | "
                  f"load {os.getloadavg()[0]:.2f}")
        if not rounds:                      # --rounds 0: the commands alone
            if args.commands:
                _commands(src, tmp, args.commands)
            return
        med = {k: float(np.median([f[k] for f in rounds])) for k in rounds[0] if k not in ("same", "seen", "transfers")}
        cpu = med["client_cpu"] + med["worker_cpu"]
        print(f"median of {len(rounds)}: CPU of the study with its own cluster (tool, fork server, workers) / serial "
              f"CPU {med['study_cpu'] / med['serial_cpu']:.2f} (on {args.workers} idle cores its ratio could reach "
              f"about {med['study_cpu'] / args.workers / med['serial_cpu']:.2f}, its start and stop waits aside)")
        print(f"median of {len(rounds)}: ratio with the cluster's start and stop {med['study'] / med['serial']:.2f}, "
              f"cluster up {med['warm'] / med['serial']:.2f}; CPU of the study's processes / serial CPU "
              f"{cpu / med['serial_cpu']:.2f} (on {args.workers} idle cores the cluster-up ratio could reach about "
              f"{cpu / args.workers / med['serial_cpu']:.2f})")

        if args.commands:
            _commands(src, tmp, args.commands)

        from distributed.protocol.pickle import dumps
        got = rounds[-1]
        per_task = len(dumps((solve_case, "portfolio-key", "study-key", every[-1], options, None)))
        carrying = len(dumps((solve_case, apply(p, study, every[-1]), every[-1], options, None)))
        print(f"scattered once: {got['sent']} B (model + study) to each of {args.workers} workers; "
              f"one task as submitted: {per_task} B; a task carrying its model: {carrying} B")
        print(f"scheduler, mid-run: workers holding each scattered key {got['seen'].get('copies')} "
              f"(of {got['seen'].get('workers')} workers); keys fetched from another worker: {got['transfers']}")
        print(f"load average {os.getloadavg()[0]:.2f} at the end")
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def _round(p, study, every, options, folder: Path, workers: int) -> dict:
    """Serial loop, study with its own cluster, study on a cluster already up: times and checks."""
    from distributed import Client
    out = {}
    c0, t0 = time.process_time(), time.perf_counter()
    serial = [dispatch(apply(p, study, c), options).objective for c in every]
    out["serial"], out["serial_cpu"] = time.perf_counter() - t0, time.process_time() - c0

    _stop_forkserver()             # each study with its own cluster pays the fork server's start
    tree = {}

    def last(done, failed, skipped, total):    # the workers' CPU while they are still up
        if done == total:
            tree["cpu"] = _descendants_cpu()

    c0, t0 = time.process_time(), time.perf_counter()
    got = run(p, "sweep", folder / "study", options, workers=workers, plots=False, progress=last)
    out["study"] = time.perf_counter() - t0
    out["study_cpu"] = time.process_time() - c0 + tree.get("cpu", float("nan"))
    out["in_process"] = int((got.frame["worker"] == "in-process").sum())
    out["same"] = bool(np.allclose(got.frame["objective"].to_numpy(float), np.array(serial, float),
                                   rtol=0, atol=1e-6))
    out["sent"] = got.sent_bytes
    out["task_wall"] = float(got.frame["wall [s]"].sum())

    _stop_forkserver()             # the cluster's start timed as a command's: the fork server's too
    t0 = time.perf_counter()
    cluster = local_cluster(workers)
    client = Client(cluster)
    out["up"] = time.perf_counter() - t0
    seen = {}

    def look(done, failed, skipped, total):
        if done == 1:      # the scattered data is held while the cases run
            seen.update(client.run_on_scheduler(_copies))

    before = client.run(time.process_time)
    c0, t0 = time.process_time(), time.perf_counter()
    warm = run(p, "sweep", folder / "warm", options, client=client, plots=False, progress=look)
    out["warm"], out["client_cpu"] = time.perf_counter() - t0, time.process_time() - c0
    after = client.run(time.process_time)
    out["worker_cpu"] = sum(after[w] - before[w] for w in after)
    out["same"] = out["same"] and warm.frame["objective"].equals(got.frame["objective"])
    out["plain"], out["plain_cpu"] = _plain_processes(p, study, every, options, workers)
    t0 = time.perf_counter()
    single = run(p, "sweep", folder / "single", options, client=client, plots=False, chunk=1)
    out["single"] = time.perf_counter() - t0
    out["same"] = out["same"] and single.frame["objective"].equals(got.frame["objective"])
    out["transfers"] = sum(client.run(_transfers).values())
    out["seen"] = seen
    t0 = time.perf_counter()
    client.close()
    cluster.close()
    out["down"] = time.perf_counter() - t0
    return out


SERIAL_COMMAND = """
import sys
from pathlib import Path
import portfolio
from portfolio.solve import SolveOptions
from portfolio.study import cases, pick, run_serial
from portfolio.study.results import table, write_plots, write_table
p = portfolio.load(sys.argv[1]).model
study = pick(p, None)
rows = run_serial(p, study, SolveOptions(threads=1))
df = table(study, cases(study), rows)
out = Path(sys.argv[2])
out.mkdir()
write_table(df, out)
write_plots(study, df, out)
"""


def _commands(src: Path, tmp: Path, rounds: int) -> None:
    """The study command against a serial loop in a plain process, alternating; wall times
    from each process's start to its exit."""
    import subprocess
    tool = str(Path(sys.executable).with_name("portfolio"))
    times = {"study": [], "serial": []}
    for r in range(rounds):
        for what in ("serial", "study") if r % 2 == 0 else ("study", "serial"):
            out = tmp / f"cmd-{what}-{r}"
            cmd = ([tool, "study", str(src), "--out", str(out), "--quiet"] if what == "study" else
                   [sys.executable, "-c", SERIAL_COMMAND, str(src), str(out)])
            t0 = time.perf_counter()
            done = subprocess.run(cmd, capture_output=True, text=True)
            times[what].append(time.perf_counter() - t0)
            if done.returncode != 0:
                raise SystemExit(f"{what} command failed ({done.returncode}): {done.stderr[-2000:]}")
        a, b = pd_read(tmp / f"cmd-study-{r}"), pd_read(tmp / f"cmd-serial-{r}")
        same = bool(np.allclose(a, b, rtol=0, atol=1e-6))
        print(f"commands, round {r + 1}: serial loop {times['serial'][-1]:.2f} s | study "
              f"{times['study'][-1]:.2f} s (ratio {times['study'][-1] / times['serial'][-1]:.2f}) | "
              f"same objectives {same} | load {os.getloadavg()[0]:.2f}", flush=True)
    ratios = [x / y for x, y in zip(times["study"], times["serial"])]
    print(f"commands, median of {rounds}: serial {np.median(times['serial']):.2f} s, study "
          f"{np.median(times['study']):.2f} s, ratio (median of the rounds') {np.median(ratios):.2f}")


def pd_read(folder: Path):
    import pandas as pd
    return pd.read_csv(folder / "cases.csv")["objective"].to_numpy(float)


def _plain_processes(p, study, every, options, workers: int):
    """The floor any engine meets here: the cases split evenly over ``workers`` plain processes
    (no Dask; started, imported and warmed before the clock starts), each a serial loop of
    dispatch.  (wall s, CPU s summed over the processes)."""
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor
    parts = [every[k::workers] for k in range(workers)]
    with ProcessPoolExecutor(workers, mp_context=multiprocessing.get_context("spawn")) as pool:
        list(pool.map(_loop, [p] * workers, [study] * workers, [parts[k][:1] for k in range(workers)],
                      [options] * workers))                                   # imports and a first solve
        t0 = time.perf_counter()
        cpu = sum(pool.map(_loop, [p] * workers, [study] * workers, parts, [options] * workers))
        return time.perf_counter() - t0, cpu


def _loop(p, study, part, options) -> float:
    c0 = time.process_time()
    for c in part:
        dispatch(apply(p, study, c), options)
    return time.process_time() - c0


def _descendants_cpu() -> float:
    """CPU seconds of this process's descendants now (the fork server, its workers)."""
    import psutil
    total = 0.0
    for child in psutil.Process().children(recursive=True):
        try:
            t = child.cpu_times()
            total += t.user + t.system
        except psutil.Error:
            pass
    return total


def _stop_forkserver() -> None:
    """Stop multiprocessing's fork server if one runs (started by the last study), so that
    the next study starts its own, as a command run by a user does."""
    from multiprocessing import forkserver
    server = getattr(forkserver, "_forkserver", None)
    if server is not None and hasattr(server, "_stop"):
        server._stop()


def _copies(dask_scheduler=None):
    """On the scheduler: how many workers hold each scattered key (the keys not named cases-...)."""
    s = dask_scheduler
    held = [len(ts.who_has or ()) for key, ts in s.tasks.items() if not str(key).startswith("cases-")]
    return {"copies": sorted(held), "workers": len(s.workers)}


def _transfers(dask_worker=None):
    """On a worker: how many keys it fetched from another worker (0 when the data was broadcast)."""
    return dask_worker.state.transfer_incoming_count_total


if __name__ == "__main__":
    main()
