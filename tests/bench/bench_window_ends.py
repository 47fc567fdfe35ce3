"""Benchmark: how each end-of-window rule stitches, against the monolith (not collected by pytest).

    python tests/bench/bench_window_ends.py

The generated portfolios of tests/random_portfolios.py (``modes`` 0-19,
``cascade`` 0-19, ``linked`` 0-9, ``limits`` 0-9) whose monolith solves to
optimality; windows of a quarter of the horizon (perfect foresight: seeing an
eighth more, none when pinned; limited foresight: seeing two quarters).
Prints, per rule, failures and the loss against the monolith's optimum
(optimum - stitched) / max(|optimum|, 1): the table of docs/model.md.
"""

import os
import sys

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path[:0] = [os.path.dirname(os.path.dirname(HERE)), os.path.dirname(HERE)]

import random_portfolios as RP  # noqa: E402
from portfolio.solve import SolveOptions  # noqa: E402
from portfolio.windows import Foresight, Windows, dispatch_windows  # noqa: E402

FAMILIES = [("modes", 20), ("cascade", 20), ("linked", 10), ("limits", 10)]


def main():
    rules = {"value": lambda c: Windows(c, c / 2, "value"),
             "target": lambda c: Windows(c, c / 2, "target"),
             "pin": lambda c: Windows(c, None, "pin"),
             "foresight hold": lambda c: Foresight(2 * c, c, "hold"),
             "foresight free": lambda c: Foresight(2 * c, c, "free")}
    losses = {k: [] for k in rules}
    failed = {k: 0 for k in rules}
    cases = 0
    for family, n in FAMILIES:
        for seed in range(n):
            mono = RP.dispatched(family, seed)
            if mono.status != "optimal":
                continue
            cases += 1
            p = RP.make(family, seed)
            dt = p.horizon.step_hours
            c = max(1, p.horizon.steps // 4) * dt
            c = max(dt, round(c / dt) * dt)
            half = round(c / 2 / dt) * dt
            for name, make in rules.items():
                spec = make(c)
                if isinstance(spec, Windows) and spec.end != "pin":
                    spec = Windows(c, half, spec.end)
                r = dispatch_windows(p, spec, SolveOptions(mip_gap=0.0))
                if r.status not in ("optimal", "feasible"):
                    failed[name] += 1
                    continue
                losses[name].append((mono.objective - r.objective) / max(abs(mono.objective), 1.0))
    print(f"{cases} cases whose monolith is optimal")
    print("| end | failed | mean loss | median loss | worst loss | exact |")
    print("| --- | ---: | ---: | ---: | ---: | ---: |")
    for name in rules:
        x = np.array(losses[name])
        print(f"| {name} | {failed[name]} | {100 * x.mean():.2f} % | {100 * np.median(x):.2f} % | "
              f"{100 * x.max():.1f} % | {int((np.abs(x) < 1e-9).sum())} |")


if __name__ == "__main__":
    main()
