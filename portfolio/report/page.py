"""The report page: one self-contained HTML file (inline SVG, inline CSS, no script).

:func:`render` turns a :class:`~.folder.Folder` into the page's text.  Every
figure shown in a table carries ``data-key`` (``group/asset/figure``) and
``data-value`` (the unrounded number), so a test can compare the page with
the CSVs it came from.  Energies are recomputed here from the tables (a
step's MW times the step's hours); money is summary.json's, in its currency.
A Content-Security-Policy forbids the page to load anything at all.
"""

from __future__ import annotations

import html
from typing import List, Tuple

import numpy as np

from ..contract import CAUTION
from . import charts as C
from .folder import Folder

CSS = """
:root { color: #1b1b1b; background: #ffffff; }
body { font-family: sans-serif; margin: 1.5rem auto; max-width: 72rem; padding: 0 1rem; line-height: 1.4; }
h1 { font-size: 1.5rem; margin-bottom: 0.2rem; }
h2 { font-size: 1.15rem; border-bottom: 2px solid #0a6fb5; padding-bottom: 0.15rem; margin-top: 2rem; }
h3 { font-size: 1rem; margin-bottom: 0.3rem; }
table { border-collapse: collapse; margin: 0.5rem 0 1rem; font-size: 0.9rem; }
th, td { border: 1px solid #c8c8c8; padding: 0.2rem 0.5rem; text-align: left; vertical-align: top; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
th { background: #eef3f8; }
.status { display: inline-block; padding: 0.1rem 0.5rem; border-radius: 0.3rem; font-weight: bold; border: 2px solid; }
.ok { border-color: #2aa37a; } .bad { border-color: #cf4f13; }
.caution { border-left: 6px solid #e08a00; background: #fff7e8; padding: 0.6rem 0.9rem; margin: 1rem 0; }
figure { margin: 0.5rem 0 1.25rem; break-inside: avoid; page-break-inside: avoid; }
figure svg { max-width: 100%; height: auto; }
figcaption { font-size: 0.85rem; color: #444; }
code { font-size: 0.85rem; word-break: break-all; }
@media print {
  body { margin: 0; max-width: none; }
  h2 { break-after: avoid; page-break-after: avoid; }
  section, table { break-inside: avoid; page-break-inside: avoid; }
}
"""

CSP = "default-src 'none'; style-src 'unsafe-inline'; img-src data:"

e = html.escape


def num(x, digits: int = 2) -> str:
    if x is None:
        return "–"
    if isinstance(x, float) and not np.isfinite(x):
        return "–"
    return f"{x:,.{digits}f}"


def cell(key: str, value, digits: int = 2, shown=None) -> str:
    """A number's cell: ``data-value`` unrounded (empty when missing), shown rounded (or as ``shown``)."""
    missing = value is None or (isinstance(value, float) and not np.isfinite(value))
    v = "" if missing else repr(float(value))
    text = e(shown) if shown is not None else num(value, digits)
    return f'<td class="num" data-key="{e(key)}" data-value="{e(v)}">{text}</td>'


def kv(rows: List[Tuple[str, str]]) -> str:
    body = "".join(f"<tr><th>{e(k)}</th>{v}</tr>" for k, v in rows)
    return f"<table>{body}</table>"


class Page:
    def __init__(self, folder):
        self.f = folder                                   # a Folder, or a study's (report/study.py)
        self.s = getattr(folder, "summary", None)
        self.parts: List[str] = []
        self.charts = 0

    def add(self, text: str) -> None:
        self.parts.append(text)

    def figure(self, svg: str, caption: str, chart: str) -> None:
        self.charts += 1
        self.add(f'<figure class="chart" data-chart="{e(chart)}">{svg}'
                 f"<figcaption>{e(caption)}</figcaption></figure>")

    def salt(self) -> str:
        return f"c{self.charts + 1}"


def _headline(pg: Page) -> None:
    s = pg.s
    ok = s["status"] in ("optimal", "feasible")
    prov = s["provenance"]
    pg.add(f"<h1>Dispatch report: {e(str(s.get('portfolio', '')))}</h1>")
    pg.add(f'<p><span class="status {"ok" if ok else "bad"}" data-key="status">{e(s["status"])}</span> '
           f"&nbsp; {e(str(s.get('steps')))} steps of {e(num(s.get('step_hours'), 3))} h from "
           f"{e(str(s.get('start')))} ({e(str(s.get('zone')))})</p>")
    cert = s.get("certificate") or {}
    gap = s.get("mip_gap")
    gap_text = "–" if gap is None else f"{100 * gap:.4g} %"
    cur = pg.f.money_unit
    rows = [(f"objective ({cur})", cell("objective", s.get("objective"))),
            (f"best bound ({cur})", cell("best_bound", s.get("best_bound"))),
            ("relative gap", f'<td class="num" data-key="mip_gap" data-value="{e(repr(gap))}">{gap_text}</td>'),
            ("certificate", f"<td>{e('schedule checked against the model: feasible' if cert.get('feasible') else 'no checked schedule')}"
                            f"{e('; bound from ' + cert['bound_source']) if cert.get('bound_source') else ''}</td>"),
            ("solver's own word", f"<td>{e(str(s.get('solver_status') or '–'))}</td>"),
            ("currency", f'<td data-key="currency">{e(s.get("currency") or "none declared: money")}</td>')]
    w = s.get("windows")
    if isinstance(w, dict):
        word = "window" if w.get("count") == 1 else "windows"
        rows.append(("windows", f"<td>{e(str(w.get('count')))} {word} of {e(num(w.get('commit_h'), 1))} h "
                                f"(+{e(num(w.get('overlap_h'), 1))} h seen); gap against the whole "
                                f"horizon's LP bound</td>"))
    pg.add("<section><h2>Headline</h2>" + kv(rows) + "</section>")
    for note in s.get("notes") or ():
        pg.add(f"<p>note: {e(str(note))}</p>")
    if s.get("message"):
        pg.add(f"<p>the solver said: {e(str(s['message']))}</p>")


def _cautions(pg: Page) -> None:
    caution = pg.s.get("caution") or CAUTION
    pg.add(f'<section class="caution"><h2>Cautions</h2><p>{e(caution)}</p></section>')


def _relaxed(pg: Page) -> None:
    rel = pg.s.get("relaxed") or []
    if pg.f.has_schedule:
        return
    pg.add("<section><h2>No schedule</h2>")
    if pg.s["status"] == "infeasible":
        pg.add("<p>The portfolio's limits cannot all hold at once.</p>")
    if rel:
        head = ("<tr><th>where</th><th>limit</th><th>gives by</th><th>steps</th>"
                "<th>first at</th></tr>")
        body = "".join(
            f'<tr class="relaxed"><td><code>{e(str(r.get("path")))}:{e(str(r.get("line")))}:{e(str(r.get("column")))}</code></td>'
            f"<td>{e(str(r.get('description')))}</td>{cell(f'relaxed/{i}/amount', r.get('amount'), 4)}"
            f"<td class=\"num\">{e(str(r.get('steps')))}</td><td>{e(str(r.get('first') or '–'))}</td></tr>"
            for i, r in enumerate(rel))
        pg.add("<h3>The limits that had to give for a schedule to exist (largest first)</h3>"
               f"<table>{head}{body}</table>")
    pg.add("</section>")


def _arr(df, col) -> np.ndarray:
    return df[col].to_numpy(dtype=float)


def _sites(pg: Page) -> None:
    f, s = pg.f, pg.s
    net = s["network"]
    zone, dt = s.get("zone") or "UTC", float(s["step_hours"])
    pw = C.unit("storage", "charge_mw")
    pg.add("<section><h2>Power at each site</h2>")
    for site, info in net["sites"].items():
        if site not in f.tables:
            continue
        idx = f.tables[site].index
        sources, uses = [], []
        for k in info["storages"]:
            sources.append((f"{k} discharge", _arr(f.tables[k], "discharge_mw")))
        for name in info["supplies"]:
            sources.append((f"{name} used", _arr(f.tables[name], "used_mw")))
        sources.append(("import", _arr(f.tables[site], "import_mw")))
        for k in info["storages"]:
            uses.append((f"{k} charge", _arr(f.tables[k], "charge_mw")))
        for name in info["demands"]:
            uses.append((f"{name} demand", _arr(f.tables[name], "demand_mw")))
        uses.append(("export", _arr(f.tables[site], "export_mw")))
        prices = []
        conn = info.get("connection")
        if conn in f.tables:
            prices = [("sell price", _arr(f.tables[conn], "sell_price")),
                      ("buy price", _arr(f.tables[conn], "buy_price"))]
        svg = C.site_power(f"site {site}", idx, zone, dt, sources, uses, prices, pw,
                           C.unit("connection", "sell_price").replace("money", f.money_unit), pg.salt())
        pg.figure(svg, f"Site {site}: power into the site (discharge, supply used, import) above zero, "
                       f"out of it (charge, demand, export) below; prices of connection {conn} on the "
                       f"right axis." + _averaged(len(idx)), f"site/{site}")
    pg.add("</section>")


def _averaged(n: int) -> str:
    k = C.blocks(n)
    return f" Drawn as means over {k} steps." if k > 1 else ""


def _storages(pg: Page) -> None:
    f, s = pg.f, pg.s
    if not f.names("storage"):
        return
    zone, dt = s.get("zone") or "UTC", float(s["step_hours"])
    pg.add("<section><h2>State of charge</h2>")
    for k in f.names("storage"):
        b = s["network"]["storages"].get(k, {})
        df = f.tables[k]
        svg = C.state_of_charge(f"storage {k}", df.index, zone, dt, _arr(df, "soc_mwh"),
                                float(b.get("soc_min_mwh") or 0.0), float(b.get("soc_max_mwh") or 0.0),
                                C.unit("storage", "soc_mwh"), pg.salt())
        pg.figure(svg, f"Storage {k}: content at the end of each step, with its bounds."
                  + _averaged(len(df)), f"soc/{k}")
    pg.add("</section>")


def _lost(pg: Page) -> None:
    f, s = pg.f, pg.s
    series = [(f"{n} curtailed", _arr(f.tables[n], "curtailed_mw")) for n in f.names("supply")]
    series += [(f"{k} spilled", _arr(f.tables[k], "spill_mw")) for k in f.names("storage")]
    if not series:
        return
    idx = next(iter(f.tables.values())).index
    pg.add("<section><h2>Curtailment and spill</h2>")
    svg = C.lost("curtailed and spilled", idx, s.get("zone") or "UTC", float(s["step_hours"]), series,
                 C.unit("supply", "curtailed_mw"), pg.salt())
    pg.figure(svg, "Supply not taken and stored energy or water spilled, per step." + _averaged(len(idx)),
              "lost")
    pg.add("</section>")


def _connections(pg: Page) -> None:
    f, s = pg.f, pg.s
    names = f.names("connection")
    if not names:
        return
    zone, dt = s.get("zone") or "UTC", float(s["step_hours"])
    long = len(f.tables[names[0]]) * dt > C.HEATMAP_AFTER_H
    pg.add("<section><h2>Connection use</h2>")
    for c in names:
        df = f.tables[c]
        lim = s["network"]["connections"].get(c, {})
        net = _arr(df, "export_mw") - _arr(df, "import_mw")
        pw = C.unit("connection", "export_mw")
        if long:
            svg = C.connection_heatmap(f"connection {c}", df.index, zone, net, lim.get("export_max_mw"),
                                       lim.get("import_max_mw"), pw, pg.salt())
            cap = (f"Connection {c}: each hour's mean net flow by day, as a share of its limit "
                   f"(export positive).")
        else:
            svg = C.connection_use(f"connection {c}", df.index, zone, dt, net, lim.get("export_max_mw"),
                                   lim.get("import_max_mw"), pw, pg.salt())
            cap = f"Connection {c}: net export (import below zero) against its limits." + _averaged(len(df))
        pg.figure(svg, cap, f"connection/{c}")
    pg.add("</section>")


# figures per table kind: (label, column, summary key) -- energy = sum(MW) x step hours
_ENERGY = {
    "storage": (("charged (MWh)", "charge_mw", "energy_in_mwh"), ("discharged (MWh)", "discharge_mw", "energy_out_mwh"),
                ("spilled (MWh)", "spill_mw", "spilled_mwh")),
    "supply": (("available (MWh)", "available_mw", "energy_in_mwh"), ("used (MWh)", "used_mw", "energy_out_mwh"),
               ("curtailed (MWh)", "curtailed_mw", "curtailed_mwh")),
    "demand": (("demand (MWh)", "demand_mw", "energy_in_mwh"),),
    "site": (("imported (MWh)", "import_mw", "energy_in_mwh"), ("exported (MWh)", "export_mw", "energy_out_mwh")),
    "connection": (("imported (MWh)", "import_mw", "energy_in_mwh"), ("exported (MWh)", "export_mw", "energy_out_mwh")),
    "route": (("flowed (MWh)", "flow_mw", "flow_mwh"),),
}


def _money(pg: Page) -> None:
    f, s = pg.f, pg.s
    dt = float(s["step_hours"])
    cur = f.money_unit
    rows = []
    for group, kind in (("storages", "storage"), ("supplies", "supply"), ("demands", "demand")):
        for name, fig in (s.get(group) or {}).items():
            if fig.get("net_value") is not None:
                rows.append((f"{kind} {name}", float(fig["net_value"])))
    pg.add("<section><h2>Money and energy by asset</h2>")
    if rows:
        pg.figure(C.money("net value by asset", rows, cur, pg.salt()),
                  "Each storage's, supply's and demand's net value at its connection's price (a "
                  "storage's wear subtracted; a negative value is a cost, as a demand's); they add "
                  "up to the objective.", "money")
    for group, kind in (("storages", "storage"), ("supplies", "supply"), ("demands", "demand"),
                        ("sites", "site"), ("connections", "connection"), ("routes", "route")):
        names = f.names(kind)
        if not names:
            continue
        cols = _ENERGY[kind]
        has_money = kind != "route"
        head = "<tr><th>" + e(kind) + "</th>" + (f"<th>net value ({e(cur)})</th>" if has_money else "")
        head += "".join(f"<th>{e(label)}</th>" for label, _c, _k in cols)
        if kind == "storage":
            head += "<th>equivalent full cycles</th><th>content at end (MWh)</th>"
            head += "".join(f"<th>{e(label)} ({e(cur)}/MWh)</th>" for label, _k in _PRICES)
        head += "</tr>"
        body = []
        for n in names:
            df, fig = f.tables[n], (s.get(group) or {}).get(n, {})
            cells = [f"<td>{e(n)}</td>"]
            if has_money:
                cells.append(cell(f"{group}/{n}/net_value", fig.get("net_value")))
            for _label, col, key in cols:
                cells.append(cell(f"{group}/{n}/{key}", float(df[col].sum()) * dt, 3))
            if kind == "storage":
                cells.append(cell(f"{group}/{n}/equivalent_full_cycles", fig.get("equivalent_full_cycles"), 3))
                cells.append(cell(f"{group}/{n}/soc_end_mwh", float(df["soc_mwh"].iloc[-1]) if len(df) else None, 3))
                cells += [cell(f"{group}/{n}/{key}", fig.get(key)) for _label, key in _PRICES]
            body.append("<tr>" + "".join(cells) + "</tr>")
        pg.add(f"<table>{head}{''.join(body)}</table>")
    if any(k in (s.get("storages") or {}).get(n, {}) for n in f.names("storage") for _l, k in _PRICES):
        pg.add("<p>A storage's average charge price is weighted by the energy it drew from its site, "
               "its average discharge price by its discharge, each at the price its connection's flow "
               "met that step (as its net value); the spread captured is their difference.</p>")
    pg.add("</section>")


_PRICES = (("average charge price", "average_charge_price"),
           ("average discharge price", "average_discharge_price"),
           ("spread captured", "spread_captured"))
DAYS_SHOWN = 62          # a longer horizon's days are in periods.csv, its months on the page


def _periods(pg: Page) -> None:
    """Net value and energy by month and by day (periods.csv), for horizons over a day."""
    per = pg.f.periods
    if per is None or not len(per):
        return
    cur = pg.f.money_unit
    s = pg.s
    long = float(s.get("steps") or 0) * float(s.get("step_hours") or 0) > C.PERIOD_CHARTS_AFTER_H
    pg.add("<section><h2>Money by day and by month</h2>")
    for length, title in (("month", "By month"), ("day", "By day")):
        rows = per[per["period"] == length]
        labels = list(dict.fromkeys(rows["label"]))
        if not labels:
            continue
        if long and (length == "day" or len(labels) > 1):
            _period_chart(pg, rows, [str(x) for x in labels], length, cur)
        if length == "day" and len(labels) > DAYS_SHOWN:
            pg.add(f"<p>{len(labels)} days: the daily totals are in <code>periods.csv</code>.</p>")
            continue
        money = rows[rows["kind"].isin(("storage", "supply", "demand"))]
        assets = list(dict.fromkeys(money["asset"]))
        head = (f"<tr><th>{e(length)}</th>" + "".join(f"<th>{e(a)} ({e(cur)})</th>" for a in assets)
                + f"<th>total ({e(cur)})</th></tr>")
        body = []
        for label in labels:
            at = money[money["label"] == label]
            vals = {a: float(v) for a, v in zip(at["asset"], at["net_value"])}
            cells = [cell(f"periods/{length}/{label}/{a}", vals.get(a)) for a in assets]
            cells.append(cell(f"periods/{length}/{label}/total", sum(vals.values())))
            body.append(f"<tr><td>{e(str(label))}</td>{''.join(cells)}</tr>")
        pg.add(f"<h3>{e(title)}</h3><table>{head}{''.join(body)}</table>")
    pg.add("<p>Net value of each storage, supply and demand per period in the horizon's zone; "
           "energies, curtailment and spill per period are in <code>periods.csv</code>.</p></section>")


def _period_chart(pg: Page, rows, labels: List[str], length: str, cur: str) -> None:
    """Each storage's, supply's and demand's net value per day (or month), stacked, with the total."""
    money = rows[rows["kind"].isin(("storage", "supply", "demand"))]
    series = []
    for (asset, kind), part in money.groupby(["asset", "kind"], sort=False):
        by = dict(zip(part["label"].astype(str), part["net_value"].astype(float)))
        series.append((f"{kind} {asset}", np.array([by.get(x, np.nan) for x in labels])))
    svg = C.money_by_period(f"net value by {length}", labels, series, cur, f"{length} (the horizon's zone)",
                            pg.salt())
    pg.figure(svg, f"Net value by {length}: each storage's, supply's and demand's part stacked (gains "
                   f"above zero, costs below), and the {length}'s total (dots), as in periods.csv.",
              f"periods/{length}")


def provenance_section(p: dict, first=(), command: bool = True) -> str:
    """The provenance section: versions, start, the command (``command``), the input files
    with their SHA-256; ``first``: rows before them."""
    cmd = p.get("command")
    rows = list(first) + [
        ("portfolio version", f'<td data-key="tool_version">{e(str(p.get("tool_version")))}</td>'),
        ("HiGHS version", f"<td>{e(str(p.get('highs_version') or 'unknown'))}</td>"),
        ("started (UTC)", f"<td>{e(str(p.get('started_utc')))}</td>")]
    if command:
        rows.append(("command", f"<td><code>{e(' '.join(cmd)) if cmd else 'called from Python'}</code></td>"))
    inputs = "".join(f"<tr><td><code>{e(str(i.get('path')))}</code></td>"
                     f"<td><code>{e(str(i.get('sha256') or 'unreadable'))}</code></td></tr>"
                     for i in p.get("inputs") or ())
    return ("<section><h2>Provenance</h2>" + kv(rows)
            + f"<table><tr><th>input file</th><th>SHA-256</th></tr>{inputs}</table></section>")


def _provenance(pg: Page) -> None:
    pg.add(provenance_section(pg.s["provenance"]))


def render(folder: Folder) -> Tuple[str, int]:
    """The page's HTML and the number of charts in it."""
    pg = Page(folder)
    _headline(pg)
    _cautions(pg)
    _relaxed(pg)
    if folder.has_schedule:
        _sites(pg)
        _storages(pg)
        _lost(pg)
        _connections(pg)
        _money(pg)
        _periods(pg)
    _provenance(pg)
    return document(f"{folder.summary.get('portfolio', '')}: dispatch report", pg), pg.charts


GENERATOR = "portfolio report"     # names a page this tool wrote (a study folder's report.html)


def document(title: str, pg: Page) -> str:
    """The whole page around ``pg``'s parts: inline CSS, the Content-Security-Policy, no script."""
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f'<meta http-equiv="Content-Security-Policy" content="{CSP}">'
            f'<meta name="generator" content="{GENERATOR}">'
            '<meta name="viewport" content="width=device-width, initial-scale=1">'
            f"<title>{e(title)}</title><style>{CSS}</style></head>\n"
            f'<body data-charts="{pg.charts}">\n' + "\n".join(pg.parts) + "\n</body></html>\n")

