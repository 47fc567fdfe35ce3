"""The report's charts: matplotlib (Agg) figures, returned as SVG text to inline.

Text stays text (``svg.fonttype: none``, a generic sans-serif family): the
browser draws it with a font it has, and nothing is fetched.  Every chart
has labelled axes with units (the units are the contract's), and the
colours are a colour-blind-safe set of our own choosing (:data:`PALETTE`),
told apart by line style and hatching too where series overlap.

A study's plots (:func:`study_lines`, :func:`bars`) are drawn again from its
cases table in the same style, and money by day or month (:func:`money_by_period`)
as stacked bars with the period's total.

Long horizons are drawn averaged over blocks of steps, so a chart stays at
most :data:`MAX_POINTS` points wide (a year of hours: daily means); the
figures in the report's tables are never averaged.
"""

from __future__ import annotations

import io
import itertools
import math
import re
from typing import Optional, Sequence, Tuple

import numpy as np

from ..contract import TABLES

MAX_POINTS = 720
HEATMAP_AFTER_H = 72.0           # connection use as a day x hour map beyond three days
PERIOD_CHARTS_AFTER_H = 72.0     # money by day (and by month) as charts beyond three days

# colour-blind-safe: distinct in hue and in lightness (after Okabe and Ito's advice on
# such sets; the values are ours)
PALETTE = ("#0a6fb5", "#e08a00", "#2aa37a", "#c4527f", "#5fb6e6", "#cf4f13", "#f0d43a", "#333333")
GRID = "#d9d9d9"
PRICE = "#222222"


def unit(kind: str, column: str) -> str:
    """A column's unit, as the contract states it."""
    return next(c.unit for c in TABLES[kind] if c.name == column)


def _plt():
    import matplotlib
    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt
    return plt


_STYLE = {
    "svg.fonttype": "none", "font.family": "sans-serif", "font.size": 9,
    "axes.grid": True, "grid.color": GRID, "grid.linewidth": 0.6, "axes.axisbelow": True,
    "axes.spines.top": False, "axes.spines.right": False, "axes.titlesize": 10,
    "axes.titleweight": "bold", "legend.fontsize": 8, "legend.frameon": False,
}


def to_svg(fig, salt: str) -> str:
    """The figure as an <svg> element (no XML prologue); ids made unique by ``salt``."""
    import matplotlib
    plt = _plt()
    buf = io.StringIO()
    import warnings
    with matplotlib.rc_context({"svg.hashsalt": salt, "svg.fonttype": "none"}), warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)     # a layout that cannot fit: drawn all the same
        fig.savefig(buf, format="svg", bbox_inches="tight", metadata={"Date": None})
    plt.close(fig)
    text = buf.getvalue()
    start = text.find("<svg")
    svg = text[start:]
    # ids unique across the page: several charts in one document share its id space
    return re.sub(r'(id="|url\(#|href="#)([A-Za-z_][\w.-]*)', lambda m: f"{m.group(1)}{salt}-{m.group(2)}", svg)


def blocks(n: int) -> int:
    """Steps per drawn point: 1, or enough to keep a chart at most :data:`MAX_POINTS` wide."""
    return max(1, math.ceil(n / MAX_POINTS))


def _reduce(index, values: np.ndarray, k: int):
    if k == 1:
        return index, values
    n = len(values) // k * k
    rest = len(values) - n
    parts = [values[:n].reshape(-1, k).mean(axis=1)]
    idx = list(index[:n:k])
    if rest:
        parts.append(np.array([values[n:].mean()]))
        idx.append(index[n])
    return idx, np.concatenate(parts)


def _step_x(index, step_hours: float, k: int):
    """Edges for a step plot: each point's start, and the end of the last."""
    import pandas as pd
    xs = list(index)
    end = xs[-1] + pd.Timedelta(hours=step_hours * k) if xs else None
    return xs + ([end] if end is not None else [])


def _stairs(values: np.ndarray) -> np.ndarray:
    return np.append(values, values[-1]) if len(values) else values


def _time_axis(ax, zone: str) -> None:
    import matplotlib.dates as mdates
    loc = mdates.AutoDateLocator(tz=zone, maxticks=8)
    ax.xaxis.set_major_locator(loc)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(loc, tz=zone))
    ax.set_xlabel(f"time ({zone})")


def _figure(height: float = 3.2, width: float = 9.0):
    import matplotlib
    plt = _plt()
    with matplotlib.rc_context(_STYLE):
        fig, ax = plt.subplots(figsize=(width, height), layout="constrained")
    return fig, ax


def site_power(title: str, index, zone: str, step_hours: float,
               sources: Sequence[Tuple[str, np.ndarray]], uses: Sequence[Tuple[str, np.ndarray]],
               prices: Sequence[Tuple[str, np.ndarray]], power_unit: str, price_unit: str, salt: str) -> str:
    """Stacked power at a site: sources of power above zero, its uses below, prices on a second axis."""
    import matplotlib
    k = blocks(len(index))
    with matplotlib.rc_context(_STYLE):
        fig, ax = _figure()
        colours = itertools.cycle(PALETTE)
        hatches = itertools.cycle(["", "", "", "", "///", "\\\\\\", "...", "xx"])
        xs = None
        for sign, group in ((1.0, sources), (-1.0, uses)):
            base = None
            for label, vals in group:
                idx, v = _reduce(index, np.asarray(vals, float), k)
                xs = _step_x(idx, step_hours, k)
                lo = np.zeros(len(v)) if base is None else base
                hi = lo + sign * v
                ax.fill_between(xs, _stairs(lo), _stairs(hi), step="post", color=next(colours),
                                hatch=next(hatches), edgecolor="white", linewidth=0.0,
                                label=label, alpha=0.9)
                base = hi
        ax.axhline(0.0, color="#000000", linewidth=0.8)
        ax.set_ylabel(f"power ({power_unit}); into the site above 0, out of it below")
        ax.set_title(title)
        if prices:
            ax2 = ax.twinx()
            styles = itertools.cycle(["-", "--", ":", "-."])
            for label, vals in prices:
                idx, v = _reduce(index, np.asarray(vals, float), k)
                ax2.step(_step_x(idx, step_hours, k), _stairs(v), where="post", color=PRICE,
                         linestyle=next(styles), linewidth=1.1, label=label)
            ax2.set_ylabel(f"price ({price_unit})")
            ax2.grid(False)
            ax2.spines["right"].set_visible(True)
            h2, l2 = ax2.get_legend_handles_labels()
        else:
            h2, l2 = [], []
        h1, l1 = ax.get_legend_handles_labels()
        ax.legend(h1 + h2, l1 + l2, loc="upper left", bbox_to_anchor=(1.08, 1.0))
        _time_axis(ax, zone)
        return to_svg(fig, salt)


def state_of_charge(title: str, index, zone: str, step_hours: float, soc: np.ndarray,
                    soc_min: float, soc_max: float, energy_unit: str, salt: str) -> str:
    """A storage's content at the end of each step, with its lower and upper bounds."""
    import matplotlib
    k = blocks(len(index))
    with matplotlib.rc_context(_STYLE):
        fig, ax = _figure(2.6)
        idx, v = _reduce(index, np.asarray(soc, float), k)
        xs = _step_x(idx, step_hours, k)
        ax.step(xs, _stairs(v), where="post", color=PALETTE[0], linewidth=1.4, label="content at step end")
        ax.axhline(soc_max, color=PALETTE[5], linestyle="--", linewidth=1.0, label=f"upper bound {soc_max:g}")
        ax.axhline(soc_min, color=PALETTE[1], linestyle=":", linewidth=1.2, label=f"lower bound {soc_min:g}")
        top = max(soc_max, float(np.max(v)) if len(v) else 0.0)
        ax.set_ylim(min(0.0, soc_min) - 0.02 * (top or 1.0), top * 1.05 + 1e-9)
        ax.set_ylabel(f"content ({energy_unit})")
        ax.set_title(title)
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0))
        _time_axis(ax, zone)
        return to_svg(fig, salt)


def lost(title: str, index, zone: str, step_hours: float, series: Sequence[Tuple[str, np.ndarray]],
         power_unit: str, salt: str) -> str:
    """Curtailment and spill over time, one line each."""
    import matplotlib
    k = blocks(len(index))
    with matplotlib.rc_context(_STYLE):
        fig, ax = _figure(2.6)
        styles = itertools.cycle(["-", "--", ":", "-."])
        colours = itertools.cycle(PALETTE)
        for label, vals in series:
            idx, v = _reduce(index, np.asarray(vals, float), k)
            ax.step(_step_x(idx, step_hours, k), _stairs(v), where="post", color=next(colours),
                    linestyle=next(styles), linewidth=1.3, label=label)
        if not series:
            ax.text(0.5, 0.5, "nothing here can be curtailed or spilled", transform=ax.transAxes,
                    ha="center")
        ax.set_ylabel(f"power ({power_unit})")
        ax.set_title(title)
        if series:
            ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0))
        _time_axis(ax, zone)
        return to_svg(fig, salt)


def connection_use(title: str, index, zone: str, step_hours: float, net_export: np.ndarray,
                   export_max: Optional[float], import_max: Optional[float], power_unit: str,
                   salt: str) -> str:
    """Net flow through a connection (export above 0) against its limits."""
    import matplotlib
    k = blocks(len(index))
    with matplotlib.rc_context(_STYLE):
        fig, ax = _figure(2.6)
        idx, v = _reduce(index, np.asarray(net_export, float), k)
        xs = _step_x(idx, step_hours, k)
        ax.fill_between(xs, 0, _stairs(v), step="post", color=PALETTE[4], alpha=0.8, label="net export")
        if export_max is not None:
            ax.axhline(export_max, color=PALETTE[5], linestyle="--", label=f"export limit {export_max:g}")
        if import_max is not None:
            ax.axhline(-import_max, color=PALETTE[1], linestyle=":", linewidth=1.3,
                       label=f"import limit {import_max:g}")
        ax.axhline(0.0, color="#000000", linewidth=0.8)
        ax.set_ylabel(f"net export ({power_unit}); import below 0")
        ax.set_title(title)
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0))
        _time_axis(ax, zone)
        return to_svg(fig, salt)


def connection_heatmap(title: str, index, zone: str, net_export: np.ndarray,
                       export_max: Optional[float], import_max: Optional[float], power_unit: str,
                       salt: str) -> str:
    """Connection use as a day x hour map: the hour's mean net export as a share of its limit
    (or in power units when the connection has no limit)."""
    import matplotlib
    import pandas as pd
    s = pd.Series(np.asarray(net_export, float), index=index)
    hourly = s.groupby([s.index.date, s.index.hour]).mean()
    days = sorted({d for d, _ in hourly.index})
    grid = np.full((24, len(days)), np.nan)
    col = {d: i for i, d in enumerate(days)}
    limited = export_max is not None and import_max is not None and export_max > 0 and import_max > 0
    for (d, h), val in hourly.items():
        if limited:
            val = val / export_max if val >= 0 else val / import_max
        grid[h, col[d]] = val
    with matplotlib.rc_context(_STYLE):
        fig, ax = _figure(3.2)
        span = 1.0 if limited else max(1e-9, float(np.nanmax(np.abs(grid))) if np.isfinite(grid).any() else 1.0)
        im = ax.imshow(grid, aspect="auto", origin="lower", cmap="PuOr_r", vmin=-span, vmax=span,
                       interpolation="nearest",
                       extent=(-0.5, len(days) - 0.5, -0.5, 23.5))
        ax.grid(False)
        ticks = list(range(0, len(days), max(1, len(days) // 8)))
        ax.set_xticks(ticks, [days[i].isoformat() for i in ticks])
        ax.set_yticks([0, 6, 12, 18, 23])
        ax.set_xlabel(f"day ({zone})")
        ax.set_ylabel("hour of day")
        bar = fig.colorbar(im, ax=ax)
        bar.set_label("share of the limit: export +1, import -1" if limited
                      else f"net export ({power_unit}); import below 0")
        ax.set_title(title)
        return to_svg(fig, salt)


def money(title: str, rows: Sequence[Tuple[str, float]], money_unit: str, salt: str) -> str:
    """Money by asset, one bar each (gains right of zero, costs left)."""
    return bars(title, [r[0] for r in rows], np.array([r[1] for r in rows], float),
                f"net value over the horizon ({money_unit})", salt, width=9.0)


def _signed_stack(ax, x, series: Sequence[Tuple[str, np.ndarray]], width) -> None:
    """Bars stacked from zero: positive parts upwards, negative parts downwards, one colour
    (and hatch) per series."""
    up = np.zeros(len(x))
    down = np.zeros(len(x))
    hatches = itertools.cycle(["", "", "", "", "///", "\\\\\\", "...", "xx"])
    for (label, vals), colour in zip(series, itertools.cycle(PALETTE)):
        v = np.nan_to_num(np.asarray(vals, float))
        pos, neg = np.where(v > 0, v, 0.0), np.where(v < 0, v, 0.0)
        hatch = next(hatches)
        ax.bar(x, pos, width, bottom=up, color=colour, hatch=hatch, edgecolor="white", linewidth=0.3,
               label=label)
        ax.bar(x, neg, width, bottom=down, color=colour, hatch=hatch, edgecolor="white", linewidth=0.3)
        up, down = up + pos, down + neg


def money_by_period(title: str, labels: Sequence[str], series: Sequence[Tuple[str, np.ndarray]],
                    money_unit: str, period: str, salt: str) -> str:
    """Net value per period (a day or a month): each asset's part stacked (gains above zero,
    costs below) and the period's total as a line of dots."""
    import matplotlib
    with matplotlib.rc_context(_STYLE):
        fig, ax = _figure(3.0)
        x = np.arange(len(labels))
        _signed_stack(ax, x, series, 0.8)
        total = np.nansum(np.vstack([np.asarray(v, float) for _l, v in series]), axis=0) if series else x * 0.0
        ax.plot(x, total, color=PRICE, marker="o", markersize=2.5 if len(x) > 60 else 4, linewidth=0.9,
                label="total")
        ax.axhline(0.0, color="#000000", linewidth=0.8)
        step = max(1, math.ceil(len(labels) / 12))
        ticks = list(range(0, len(labels), step))
        ax.set_xticks(ticks, [labels[i] for i in ticks], rotation=30 if len(ticks) > 6 else 0, ha="right"
                      if len(ticks) > 6 else "center")
        ax.set_xlim(-0.6, len(labels) - 0.4)
        ax.set_xlabel(period)
        ax.set_ylabel(f"net value ({money_unit}); costs below 0")
        ax.set_title(title)
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0))
        return to_svg(fig, salt)


LEGEND_MAX = 12    # colours a study plot's legend names at most (as portfolio.study.results)


def study_lines(title: str, x_label: str, lines: Sequence[Tuple[str, float, np.ndarray, np.ndarray]],
                y_label: str, salt: str, note: str = "") -> str:
    """A study's plot: the objective against one varied value, one line per combination of
    the other dimensions.  ``lines``: (colour label, shade from 0 to 1, x, y); each label
    gets a colour and a marker (a second cue besides the colour), its lines fainter for
    smaller shades (``note`` says what they stand for, the legend's title); the legend
    names at most :data:`LEGEND_MAX` labels (more: a sequential map, named evenly)."""
    import matplotlib
    from matplotlib import colormaps
    from matplotlib.lines import Line2D
    labels = list(dict.fromkeys(label for label, *_ in lines))
    many = len(labels) > len(PALETTE)
    cmap = colormaps["viridis"]
    colour = {k: cmap(i / max(1, len(labels) - 1)) if many else PALETTE[i] for i, k in enumerate(labels)}
    markers = ["o", "s", "^", "D", "v", "P", "X", "*"]
    marker = {k: markers[i % len(markers)] for i, k in enumerate(labels)}
    with matplotlib.rc_context(_STYLE):
        fig, ax = _figure(3.4, 8.0)
        for label, shade, xs, ys in lines:
            ax.plot(xs, ys, color=colour[label], alpha=0.3 + 0.7 * shade, marker=marker[label],
                    linewidth=1.4, markersize=4)
        if not lines:
            ax.text(0.5, 0.5, "no case with a schedule", transform=ax.transAxes, ha="center")
        ax.set_xlabel(x_label)
        ax.set_ylabel(y_label)
        ax.set_title(title)
        if len(labels) > 1 or note:
            named = labels if len(labels) <= LEGEND_MAX else [
                labels[round(i * (len(labels) - 1) / (LEGEND_MAX - 1))] for i in range(LEGEND_MAX)]
            heading = ([f"{len(labels)} colours, {len(named)} named"] if len(named) < len(labels) else []) + \
                ([note] if note else [])
            handles = [Line2D([], [], color=colour[k], marker=marker[k], markersize=4, label=k) for k in named]
            # beside the axes: the labels name other values, so they can be long
            ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0,
                      title="\n".join(heading) or None, title_fontsize=8)
        return to_svg(fig, salt)


def bars(title: str, labels: Sequence[str], values, x_label: str, salt: str, width: float = 8.0) -> str:
    """One horizontal bar per label (values right of zero, negatives left, hatched); a
    missing value (NaN) has no bar."""
    import matplotlib
    with matplotlib.rc_context(_STYLE):
        fig, ax = _figure(0.6 + 0.32 * max(1, len(labels)), width)
        vals = np.nan_to_num(np.asarray(values, float))
        drawn = ax.barh(range(len(labels)), vals, color=[PALETTE[0] if v >= 0 else PALETTE[5] for v in vals],
                        edgecolor="white")
        for b, v in zip(drawn, vals):
            b.set_hatch("" if v >= 0 else "///")
        ax.set_yticks(range(len(labels)), labels)
        ax.invert_yaxis()
        ax.axvline(0.0, color="#000000", linewidth=0.8)
        ax.set_xlabel(x_label)
        ax.set_title(title)
        return to_svg(fig, salt)
