"""A study's results: the cases table (``cases.csv``, ``cases.parquet``) and a plot per
varied setting (objective against its value, one line per scenario; PNG and SVG).

One row per case, in case order: the case id, the varied values (units in the
column names; a percentage in %), the scenario of each varied series, the
status, objective, MIP gap and best bound (a case dispatched by windows: the
stitched schedule's gap to the whole horizon's LP bound), the number of windows
(0: one MILP), net value of every storage and supply, equivalent
full cycles of every storage, curtailed energy, the times and the worker
that ran it, and the message of a case that failed.  Files are written
atomically (:func:`portfolio.files.replace_atomically`).
"""

from __future__ import annotations

from pathlib import Path
from typing import List

import pandas as pd

from .. import model as M
from ..files import replace_atomically

TABLE = "cases"
PLOTS = "plots"


def value_column(d: M.Varied) -> str:
    return f"{d.target} {d.setting} [{d.unit}]"


def scenario_column(d: M.ScenarioSet) -> str:
    return f"{d.series} scenario"


def table(study: M.Study, cases, rows: List[dict]) -> pd.DataFrame:
    """The cases table of ``rows`` (as :func:`portfolio.study.run.solve_case` makes them)."""
    storages = sorted({n for r in rows for n in (r.get("assets") or {}).get("storages", {})})
    supplies = sorted({n for r in rows for n in (r.get("assets") or {}).get("supplies", {})})
    records = []
    for case, r in zip(cases, rows):
        rec = {"case": r.get("case")}
        settings = iter(case.settings)
        scenarios = iter(case.scenarios)
        for d in study.dimensions:
            if isinstance(d, M.Varied):
                v = next(settings)[2]
                rec[value_column(d)] = v * 100 if d.unit == "%" else v
            else:
                rec[scenario_column(d)] = next(scenarios)[1]
        rec.update(status=r.get("status"), objective=r.get("objective"), gap=r.get("gap"), bound=r.get("bound"),
                   windows=r.get("windows") or 0)
        assets = r.get("assets") or {}
        for group, names in (("storages", storages), ("supplies", supplies)):
            for n in names:
                rec[f"net value {n}"] = assets.get(group, {}).get(n, {}).get("net_value")
        for n in storages:
            rec[f"cycles {n}"] = assets.get("storages", {}).get(n, {}).get("equivalent_full_cycles")
        curtailed = [f.get("curtailed_mwh") for f in assets.get("supplies", {}).values()]
        rec["curtailed [MWh]"] = sum(c for c in curtailed if c is not None) if assets else None
        rec.update({"build [s]": r.get("build_s"), "solve [s]": r.get("solve_s"), "wall [s]": r.get("wall_s"),
                    "worker": r.get("worker"), "message": r.get("message") or ""})
        records.append(rec)
    return pd.DataFrame.from_records(records)


def write_table(df: pd.DataFrame, out_dir: Path) -> List[Path]:
    """``cases.csv`` and, when pyarrow is installed, ``cases.parquet``; the paths written."""
    out_dir = Path(out_dir)
    written = [out_dir / f"{TABLE}.csv"]
    replace_atomically(written[0], lambda tmp: df.to_csv(tmp, index=False))
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        return written
    written.append(out_dir / f"{TABLE}.parquet")
    replace_atomically(written[1], lambda tmp: df.to_parquet(tmp, index=False))
    return written


def write_plots(study: M.Study, df: pd.DataFrame, out_dir: Path) -> List[Path]:
    """For each varied setting: the objective against its value, one line per scenario
    (a combination of the varied series' scenarios; the other settings' values beside
    it in the legend when they vary too).  PNG and SVG; the paths written."""
    import matplotlib
    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    folder = Path(out_dir) / PLOTS
    folder.mkdir(parents=True, exist_ok=True)
    varied = [d for d in study.dimensions if isinstance(d, M.Varied)]
    groups = [scenario_column(d) for d in study.dimensions if isinstance(d, M.ScenarioSet)]
    written = []
    ok = df[df["status"].isin(("optimal", "feasible"))]
    for d in varied:
        x = value_column(d)
        others = [value_column(o) for o in varied if o is not d] + groups
        fig = Figure(figsize=(7, 4.2))
        ax = fig.add_subplot()
        lines = ok.groupby(others, sort=True) if others else [((), ok)]
        for label, part in lines:
            label = label if isinstance(label, tuple) else (label,)
            part = part.sort_values(x)
            name = ", ".join(f"{c.removesuffix(' scenario')}: {v}" if c in groups else f"{c} = {v:g}"
                             for c, v in zip(others, label)) or "objective"
            ax.plot(part[x], part["objective"], marker="o", label=name)
        ax.set_xlabel(x)
        ax.set_ylabel("objective (money)")
        ax.set_title(f"study {study.name}: objective against {d.target} {d.setting}")
        ax.grid(True, alpha=0.3)
        if len(ax.get_lines()) > 1:
            ax.legend(fontsize="small")
        stem = f"objective_vs_{d.target}_{d.setting.replace(' ', '_')}"
        for ext in ("png", "svg"):
            path = folder / f"{stem}.{ext}"
            replace_atomically(path, lambda tmp, ext=ext: fig.savefig(tmp, format=ext, dpi=110,
                                                                     bbox_inches="tight"))
            written.append(path)
    return written
