"""Benchmark: the series reader on a year of quarter-hours and on a ~75 MB file.

Generates, in a temporary folder, CSV files with a time column (UTC offsets)
and value columns, and loads them with ``portfolio.series.load_series`` onto
a year-long 15-minute horizon: the reader as it is now and, side by side in
the same run, the reader of a baseline commit (its ``portfolio/series.py``,
or ``portfolio/series/`` after the split, taken from git and loaded beside
the package).  Prints time (median of ``--repeats`` runs; one run for the
large file) and tracemalloc's peak, and
the ratio of each to the file's size.  Not collected by pytest; no targets
asserted (docs/performance.md, "Series reader").

    python tests/bench/bench_series.py [--baseline 5f1af1a] [--repeats 5] [--no-large]
"""

from __future__ import annotations

import argparse
import importlib.util
import statistics
import subprocess
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from portfolio import series as current  # noqa: E402
from portfolio.diagnostics import Sink  # noqa: E402
from portfolio.model import Horizon  # noqa: E402
from portfolio.spans import Span  # noqa: E402

YEAR = 35_040                           # quarter-hours in 2027
DECL = Span("bench.folio", 1, 1, 1, 2)


def baseline_module(rev: str):
    """The series reader at ``rev`` (``portfolio/series.py``, or the package
    ``portfolio/series/`` from its split on), loaded beside the package."""
    name = "portfolio._series_baseline"
    single = subprocess.run(["git", "-C", str(ROOT), "show", f"{rev}:portfolio/series.py"],
                            capture_output=True, text=True)
    if single.returncode == 0:
        spec = importlib.util.spec_from_loader(name, loader=None)
        module = importlib.util.module_from_spec(spec)
        module.__package__ = "portfolio"
        sys.modules[spec.name] = module
        exec(compile(single.stdout, f"{rev}:portfolio/series.py", "exec"), module.__dict__)
        return module
    folder = Path(tempfile.mkdtemp(prefix="series_baseline_"))
    archive = subprocess.run(["git", "-C", str(ROOT), "archive", rev, "portfolio/series"],
                             check=True, capture_output=True).stdout
    subprocess.run(["tar", "-x", "-C", str(folder)], input=archive, check=True)
    package = folder / "portfolio" / "series"
    spec = importlib.util.spec_from_file_location(name, package / "__init__.py",
                                                  submodule_search_locations=[str(package)])
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    spec.loader.exec_module(module)
    return module


def write_csv(path: Path, rows: int, columns: int) -> None:
    rng = np.random.default_rng(7)
    stamps = pd.date_range("2027-01-01", periods=rows, freq="15min", tz="UTC")
    frame = pd.DataFrame({f"v{j}": np.round(rng.uniform(0, 120, rows), 3) for j in range(columns)})
    frame.insert(0, "time", stamps.strftime("%Y-%m-%dT%H:%M+00:00"))
    frame.to_csv(path, index=False)


def run(module, path: Path, named: int) -> None:
    hz = Horizon(start=pd.Timestamp("2027-01-01", tz="UTC"), steps=YEAR, step_hours=0.25,
                 zone="UTC")
    specs = [module.SeriesSpec(name=f"s{j}", quantity="price", span=DECL, path=path.name,
                               column=f"v{j}") for j in range(named)]
    sink = Sink()
    out = module.load_series(specs, hz, path.parent, sink)
    if sink.items or len(out) != named:
        raise SystemExit(f"{module.__name__}: unexpected diagnostics {sink.items[:3]}")


def measure(module, path: Path, named: int, repeats: int):
    run(module, path, named)                         # warm-up (imports, zone data)
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        run(module, path, named)
        times.append(time.perf_counter() - t0)
    tracemalloc.start()
    run(module, path, named)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return statistics.median(times), peak


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--baseline", default="5f1af1a", help="commit of the reader to compare with")
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--no-large", action="store_true", help="leave out the ~75 MB file")
    args = ap.parse_args(argv)
    before = baseline_module(args.baseline)
    cases = [("year, 1 value column", YEAR, 1, 1, args.repeats),
             ("year, 12 value columns, 12 named", YEAR, 12, 12, args.repeats),
             ("year, 12 value columns, 1 named", YEAR, 12, 1, args.repeats)]
    if not args.no_large:
        cases.append(("~75 MB, 12 value columns, 1 named", 720_000, 12, 1, 1))
    print("| file | MB | before s | after s | speed-up | before peak MB (x file) "
          "| after peak MB (x file) |")
    print("|---|---:|---:|---:|---:|---:|---:|")
    with tempfile.TemporaryDirectory() as tmp:
        for label, rows, columns, named, repeats in cases:
            path = Path(tmp) / f"{rows}x{columns}.csv"
            write_csv(path, rows, columns)
            mb = path.stat().st_size / 1e6
            t0, p0 = measure(before, path, named, repeats)
            t1, p1 = measure(current, path, named, repeats)
            print(f"| {label} | {mb:.1f} | {t0:.3f} | {t1:.3f} | {t0 / t1:.1f} | "
                  f"{p0 / 1e6:.0f} ({p0 / 1e6 / mb:.1f}) | {p1 / 1e6:.0f} ({p1 / 1e6 / mb:.1f}) |",
                  flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
