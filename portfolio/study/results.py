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

import warnings
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


LEGEND_MAX = 12    # colours named in a plot's legend at most (more: a sequential map, some named)


def write_plots(study: M.Study, df: pd.DataFrame, out_dir: Path) -> List[Path]:
    """For each varied setting: the objective against its value, one line per combination
    of the other dimensions.  A colour per scenario (a combination of the varied series'
    scenarios; without scenarios, per value of the other settings); where other settings
    vary too, one line per their values in the scenario's colour, fainter for smaller
    values, as the legend's title says.  The legend stands beside the axes, never over the
    lines, and names at most :data:`LEGEND_MAX` colours.  PNG and SVG; the paths written."""
    import matplotlib
    matplotlib.use("Agg")
    from matplotlib import colormaps
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

    folder = Path(out_dir) / PLOTS
    folder.mkdir(parents=True, exist_ok=True)
    varied = [d for d in study.dimensions if isinstance(d, M.Varied)]
    groups = [scenario_column(d) for d in study.dimensions if isinstance(d, M.ScenarioSet)]
    written = []
    ok = df[df["status"].isin(("optimal", "feasible")) & df["objective"].notna()]
    for d in varied:
        x = value_column(d)
        others = [value_column(o) for o in varied if o is not d]
        colour_by, shade_by = (groups, others) if groups else (others, [])
        keys = _combinations(ok, colour_by)
        shades = _combinations(ok, shade_by)
        cmap = colormaps["tab10" if len(keys) <= 10 else "viridis"]
        colour = {k: cmap(i if len(keys) <= 10 else i / max(1, len(keys) - 1)) for i, k in enumerate(keys)}
        fig = Figure(figsize=(9, 4.6), layout="constrained")
        ax = fig.add_subplot()
        for key, part in (ok.groupby(colour_by + shade_by, sort=True) if colour_by + shade_by else [((), ok)]):
            key = key if isinstance(key, tuple) else (key,)
            c, sh = key[:len(colour_by)], key[len(colour_by):]
            alpha = 1.0 if len(shades) < 2 else 0.3 + 0.7 * shades.index(sh) / (len(shades) - 1)
            part = part.sort_values(x)
            ax.plot(part[x], part["objective"], color=colour[c], alpha=alpha, marker="o", markersize=3,
                    linewidth=1.2)
        ax.set_xlabel(x)
        ax.set_ylabel("objective (money)")
        ax.set_title(f"study {study.name}: objective against {d.target} {d.setting}")
        ax.grid(True, alpha=0.3)
        named = keys if len(keys) <= LEGEND_MAX else [keys[round(i * (len(keys) - 1) / (LEGEND_MAX - 1))]
                                                     for i in range(LEGEND_MAX)]
        if colour_by and len(keys) > 1:
            handles = [Line2D([], [], color=colour[k], marker="o", markersize=3, label=_label(colour_by, k))
                       for k in named]
            title = [] if len(keys) <= LEGEND_MAX else [f"{len(keys)} colours, {len(named)} named"]
            if len(shades) > 1:
                title.append(f"one line per {', '.join(shade_by)}; fainter: smaller")
            fig.legend(handles=handles, loc="outside right upper", fontsize="small",
                       title="\n".join(title) or None, title_fontsize="small")
        stem = f"objective_vs_{d.target}_{d.setting.replace(' ', '_')}"
        for ext in ("png", "svg"):
            path = folder / f"{stem}.{ext}"
            with warnings.catch_warnings():   # a layout that cannot fit long names: drawn all the same
                warnings.simplefilter("ignore", UserWarning)
                replace_atomically(path, lambda tmp, ext=ext: fig.savefig(tmp, format=ext, dpi=110))
            written.append(path)
    return written


def _combinations(df: pd.DataFrame, columns: List[str]) -> List[tuple]:
    """The distinct value tuples of ``columns`` in ``df``, sorted ([()] for no columns)."""
    if not columns:
        return [()]
    return sorted(set(map(tuple, df[columns].itertuples(index=False, name=None))))


def _label(columns: List[str], key: tuple) -> str:
    return ", ".join(f"{c.removesuffix(' scenario')}: {v}" if c.endswith(" scenario") else f"{c} = {v:g}"
                     for c, v in zip(columns, key))
