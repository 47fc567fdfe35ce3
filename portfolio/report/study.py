"""The report of a study folder (what ``portfolio study --out DIR`` made; docs/studies.md).

:func:`read_study` reads the folder back: its marker, the cases table
(``cases.csv``: its varied columns are those between ``case`` and
``status``, a setting's named with its unit, a series' ending in
``scenario``), which plots it has, and, when the study kept each case's
schedule (``--schedules``), the currency and provenance one of them
recorded.  :func:`render_study` lays out the page: the study's plots drawn
again from the table (the objective against each varied value, one line per
combination of the other dimensions, as ``portfolio.study.results`` draws
them; never the PNGs), the cases table, the cases without a schedule with
their messages, provenance when recorded, and the cautions.  Every figure in
the cases table carries ``data-key`` (``cases/<case>/<column>``) and
``data-value``.  Nothing is written here.
"""

from __future__ import annotations

import io
import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import List, Optional, Tuple

import numpy as np

from ..contract import CAUTION, PROVENANCE_KEYS, SUMMARY_FILE
from ..files import read_bytes
from ..study.results import PLOTS, TABLE
from ..study.run import CASE_FILE, CASES_DIR, MARKER as STUDY_MARKER, SCHEDULE_DIR
from . import charts as C
from .folder import SCHEDULE_STATUSES, ReportError
from .page import Page, cell, document, e, kv, provenance_section

CASES_FILE = f"{TABLE}.csv"
REQUIRED = ("case", "status", "objective", "gap", "message")
NET_VALUE = "net value "            # the cases table's per-asset columns: "net value <asset>"
SCENARIO = " scenario"              # a varied series' column: "<series> scenario"

__all__ = ["StudyFolder", "is_study", "read_study", "render_study", "STUDY_MARKER"]


@dataclass
class StudyFolder:
    path: Path
    source: str                     # the marker's lines: the portfolio file and the study it ran
    cases: "object"                 # cases.csv as a DataFrame
    varied: List[str]               # the varied columns, in the table's order
    assets: List[str]               # assets with a net value column
    plots: List[str]                # the plots the study drew (plots/*.svg, their stems)
    currency: str = "money"
    provenance: Optional[dict] = None
    provenance_case: Optional[str] = None
    summary = None                  # no summary.json: a study's figures are its table's

    @property
    def money_unit(self) -> str:
        return self.currency

    @property
    def ok(self):
        return self.cases["status"].isin(SCHEDULE_STATUSES)

    def settings(self) -> List[str]:
        """The varied settings (numbers with a unit), not the scenario columns."""
        return [c for c in self.varied if not c.endswith(SCENARIO)]


def is_study(path: Path) -> bool:
    return (path / STUDY_MARKER).is_file() and not (path / STUDY_MARKER).is_symlink()


def read_study(path) -> StudyFolder:
    """Read the study folder at ``path`` (see the module docstring)."""
    import pandas as pd

    path = Path(path)
    if not is_study(path):
        raise ReportError(f"{path} is not a study folder (it has no {STUDY_MARKER} file)")
    try:
        source = "; ".join(line.strip() for line in read_bytes(path / STUDY_MARKER).decode("utf-8").splitlines()
                           if line.strip())
    except (OSError, UnicodeDecodeError) as exc:
        raise ReportError(f"cannot read {path / STUDY_MARKER}: {getattr(exc, 'strerror', None) or exc}") from None
    f = path / CASES_FILE
    try:
        df = pd.read_csv(io.BytesIO(read_bytes(f)), keep_default_na=True)
    except FileNotFoundError:
        raise ReportError(f"{path} has no {CASES_FILE}: the study has not finished (run 'portfolio study' "
                          f"again into this folder: it resumes and writes the table)") from None
    except (OSError, ValueError) as exc:
        raise ReportError(f"cannot read {f}: {getattr(exc, 'strerror', None) or exc}") from None
    cols = list(df.columns)
    missing = [c for c in REQUIRED if c not in cols]
    if missing or cols.index("case") > cols.index("status"):
        raise ReportError(f"{f} is not a study's cases table of this version (it lacks "
                          f"{', '.join(missing) or 'its varied columns before status'}); run the study again")
    varied = cols[cols.index("case") + 1:cols.index("status")]
    bad = [c for c in varied if c.endswith(SCENARIO) is False and not (c.endswith("]") and " [" in c)]
    if bad:
        raise ReportError(f"{f}: column {bad[0]!r} is neither a varied setting with its unit nor a scenario")
    for c in [c for c in varied if not c.endswith(SCENARIO)] + ["objective", "gap"]:
        if not pd.api.types.is_numeric_dtype(df[c]):
            raise ReportError(f"{f}: column {c!r} holds values that are not numbers")
    df["case"] = df["case"].astype(str)
    df["status"] = df["status"].astype(str)
    df["message"] = df["message"].fillna("").astype(str)
    for c in [c for c in varied if c.endswith(SCENARIO)]:
        df[c] = df[c].astype(str)
    assets = [c[len(NET_VALUE):] for c in cols if c.startswith(NET_VALUE)]
    plots = sorted(p.stem for p in (path / PLOTS).glob("*.svg")) if (path / PLOTS).is_dir() else []
    sf = StudyFolder(path=path, source=source, cases=df, varied=varied, assets=assets, plots=plots)
    _kept_summary(sf)
    return sf


def _kept_summary(sf: StudyFolder) -> None:
    """Currency and provenance from the first case whose schedule the study kept (--schedules)."""
    for case in sf.cases.loc[sf.ok, "case"]:
        f = sf.path / CASES_DIR / case / SCHEDULE_DIR / SUMMARY_FILE
        if not f.is_file():
            continue
        try:
            summary = json.loads(read_bytes(f).decode("utf-8"))
        except (OSError, UnicodeDecodeError, ValueError):
            continue
        prov = summary.get("provenance") if isinstance(summary, dict) else None
        if isinstance(prov, dict) and set(prov) == set(PROVENANCE_KEYS):
            sf.provenance, sf.provenance_case = prov, case
            sf.currency = summary.get("currency") or "money"
            return


# -- the page ---------------------------------------------------------------------------

def _value_text(v) -> str:
    if isinstance(v, str):
        return v
    return "–" if v is None or (isinstance(v, float) and math.isnan(v)) else f"{v:g}"


def _headline(pg: Page, sf: StudyFolder) -> None:
    df = sf.cases
    ok = df[sf.ok]
    pg.add(f"<h1>Study report: {e(sf.path.name)}</h1>")
    rows = [("study", f"<td>{e(sf.source)}</td>"),
            ("cases", f'<td class="num" data-key="cases" data-value="{len(df)}">{len(df)}</td>'),
            ("with a schedule", f'<td class="num" data-key="with_schedule" data-value="{len(ok)}">{len(ok)}</td>'),
            ("without one", f'<td class="num" data-key="without_schedule" data-value="{len(df) - len(ok)}">'
                            f"{len(df) - len(ok)}</td>"),
            ("varied", f"<td>{e(', '.join(sf.varied) or 'nothing')}</td>"),
            ("currency", f'<td data-key="currency">{e(sf.currency if sf.provenance else "not recorded: money")}</td>')]
    if len(ok) and ok["objective"].notna().any():
        best = ok.loc[ok["objective"].idxmax()]
        what = ", ".join(f"{c} = {_value_text(best[c])}" for c in sf.varied)
        rows.append((f"best objective ({sf.currency})", cell("best/objective", float(best["objective"]))))
        rows.append(("best case", f'<td data-key="best/case">{e(best["case"])}'
                                  f"{e(' (' + what + ')') if what else ''}</td>"))
    pg.add("<section><h2>Headline</h2>" + kv(rows) + "</section>")


def _cautions(pg: Page, sf: StudyFolder) -> None:
    failed = int((~sf.ok).sum())
    more = (f"<p>{failed} of the {len(sf.cases)} cases have no schedule: they have no objective, and "
            f"the plots leave them out (their messages are below).</p>" if failed else "")
    pg.add(f'<section class="caution"><h2>Cautions</h2><p>{e(CAUTION)}</p>'
           "<p>Each case is one dispatch against its own prices, known in advance; comparing cases "
           f"compares those optima, not what operating under uncertainty would earn.</p>{more}</section>")


def _lines(sf: StudyFolder, x: str) -> Tuple[List[Tuple[str, float, np.ndarray, np.ndarray]], str]:
    """One line per combination of the other varied columns, as ``portfolio.study.results``
    draws them: ``([(colour label, shade from 0 to 1, x values, objectives), ...], what the
    shades mean)``.  A colour per scenario (the scenario columns' values; without scenarios,
    the other settings'); the other settings' values, when scenarios colour the lines, as
    shades (1: the largest)."""
    ok = sf.cases[sf.ok & sf.cases["objective"].notna()]
    others = [c for c in sf.varied if c != x]
    scenarios = [c for c in others if c.endswith(SCENARIO)]
    colour_by = scenarios or others
    shade_by = [c for c in others if c not in colour_by]
    shades = sorted(set(map(tuple, ok[shade_by].itertuples(index=False, name=None)))) if shade_by else [()]
    groups = ok.groupby(colour_by + shade_by, sort=True) if others else [((), ok)]
    out = []
    for key, part in groups:
        key = key if isinstance(key, tuple) else (key,)
        colour, shade = key[:len(colour_by)], key[len(colour_by):]
        part = part.sort_values(x)
        label = ", ".join(f"{c[:-len(SCENARIO)]}: {v}" if c.endswith(SCENARIO) else f"{c} = {_value_text(v)}"
                          for c, v in zip(colour_by, colour)) or "objective"
        rank = shades.index(shade) / (len(shades) - 1) if len(shades) > 1 else 1.0
        out.append((label, rank, part[x].to_numpy(float), part["objective"].to_numpy(float)))
    note = f"one line per {', '.join(shade_by)}; fainter: smaller" if len(shades) > 1 else ""
    return out, note


def _plots(pg: Page, sf: StudyFolder) -> None:
    pg.add("<section><h2>Plots</h2>")
    y = f"objective ({sf.currency})"
    settings = sf.settings()
    for x in settings:
        lines, note = _lines(sf, x)
        svg = C.study_lines(f"objective against {x}", x, lines, y, pg.salt(), note)
        shades = f" ({note})" if note else ""
        pg.figure(svg, f"The objective of each case with a schedule against {x}; one line per "
                       f"combination of the other varied values ({len(lines)} here), a colour and "
                       f"marker per {'scenario' if any(c.endswith(SCENARIO) for c in sf.varied if c != x) else 'line'}"
                       f"{shades}.", f"study/{x}")
    if not settings:
        ok = sf.cases[sf.ok]
        labels = [", ".join(_value_text(r[c]) for c in sf.varied) or r["case"] for _i, r in ok.iterrows()]
        svg = C.bars("objective by case", labels, ok["objective"].to_numpy(float), y, pg.salt())
        pg.figure(svg, "The objective of each case with a schedule.", "study/objective")
    pg.add(f"<p>Drawn from <code>{e(CASES_FILE)}</code>; the study's own pictures are in "
           f"<code>{e(PLOTS)}/</code> ({e(', '.join(sf.plots) or 'none')}).</p></section>")


def _cases(pg: Page, sf: StudyFolder) -> None:
    df = sf.cases
    money = [f"{NET_VALUE}{a}" for a in sf.assets]
    head = ("<tr><th>case</th>" + "".join(f"<th>{e(c)}</th>" for c in sf.varied)
            + f"<th>status</th><th>objective ({e(sf.currency)})</th><th>gap</th>"
            + "".join(f"<th>net value {e(a)} ({e(sf.currency)})</th>" for a in sf.assets) + "</tr>")
    body = []
    for _i, r in df.iterrows():
        k = r["case"]
        cells = [f'<td><code>{e(k)}</code></td>']
        for c in sf.varied:
            if c.endswith(SCENARIO):
                cells.append(f'<td data-key="cases/{e(k)}/{e(c)}">{e(r[c])}</td>')
            else:
                cells.append(cell(f"cases/{k}/{c}", _float(r[c]), shown=_value_text(r[c])))
        cells.append(f'<td data-key="cases/{e(k)}/status">{e(r["status"])}</td>')
        cells.append(cell(f"cases/{k}/objective", _float(r["objective"])))
        gap = _float(r["gap"])
        cells.append(f'<td class="num" data-key="cases/{e(k)}/gap" data-value="{"" if gap is None else repr(gap)}">'
                     f'{"–" if gap is None else f"{100 * gap:.4g} %"}</td>')
        cells += [cell(f"cases/{k}/{c}", _float(r[c])) for c in money]
        body.append("<tr>" + "".join(cells) + "</tr>")
    pg.add(f"<section><h2>Cases</h2><table>{head}{''.join(body)}</table>"
           "<p>In case order, as in <code>cases.csv</code> (which also holds cycles, curtailment, times "
           "and workers). A net value is the asset's over the horizon (docs/outputs.md); they add up to "
           "the objective with the demands'. The case id names the case's folder under "
           f"<code>{e(CASES_DIR)}/</code>.</p></section>")


def _float(v) -> Optional[float]:
    try:
        x = float(v)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def _failed(pg: Page, sf: StudyFolder) -> None:
    bad = sf.cases[~sf.ok]
    if not len(bad):
        return
    head = ("<tr><th>case</th>" + "".join(f"<th>{e(c)}</th>" for c in sf.varied)
            + "<th>status</th><th>message</th></tr>")
    body = "".join(
        f'<tr class="failed"><td><code>{e(r["case"])}</code></td>'
        + "".join(f"<td>{e(_value_text(r[c]))}</td>" for c in sf.varied)
        + f'<td data-key="failed/{e(r["case"])}/status">{e(r["status"])}</td>'
          f'<td data-key="failed/{e(r["case"])}/message">{e(r["message"] or "–")}</td></tr>'
        for _i, r in bad.iterrows())
    pg.add(f"<section><h2>Cases without a schedule</h2><table>{head}{body}</table>"
           f"<p>Dispatch one of them alone (<code>portfolio dispatch</code> with its values) to see the "
           f"limits that gave; <code>{e(CASES_DIR)}/&lt;case&gt;/{e(CASE_FILE)}</code> keeps its row.</p>"
           "</section>")


def _provenance(pg: Page, sf: StudyFolder) -> None:
    p = sf.provenance
    if p is None:
        pg.add("<section><h2>Provenance</h2><p>Not recorded: a study folder keeps no versions or input "
               "hashes of its own. Run the study with <code>--schedules</code> to keep each case's "
               "output folder, whose summary records them.</p></section>")
        return
    pg.add(provenance_section(p, [("recorded by case", f"<td><code>{e(str(sf.provenance_case))}</code></td>")],
                              command=False))


def render_study(sf: StudyFolder) -> Tuple[str, int]:
    """The study page's HTML and the number of charts in it."""
    pg = Page(sf)
    _headline(pg, sf)
    _cautions(pg, sf)
    _plots(pg, sf)
    _cases(pg, sf)
    _failed(pg, sf)
    _provenance(pg, sf)
    return document(f"{sf.path.name}: study report", pg), pg.charts
