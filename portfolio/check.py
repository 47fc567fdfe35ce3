"""Stage 2: syntax tree -> checked, typed model (:mod:`portfolio.model`).

Walks the Lark tree, resolves presets, converts every quantity to canonical
units, checks names, ranges and state-of-charge consistency, and loads the
time series (:mod:`portfolio.series`).  Every finding is a diagnostic with the
span of the text it is about.  Topology checks live in :mod:`portfolio.graph`.
"""

from __future__ import annotations

import difflib
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Dict, List, Optional, Tuple
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError, available_timezones

import pandas as pd
from lark import Token, Tree

from . import model as M
from . import units as U
from .diagnostics import (BadTimestamp, DelayNotWhole, DuplicateName, DuplicateSetting, ExportUnpriced,
                          Implausible, NameCaseClash, NameTooLong,
                          HorizonMisfit, ImportUnpriced, LimitInconsistent, MissingSetting, OutOfRange,
                          RouteDuplicate, RouteKindMismatch, RouteToSelf, ReservedName, RuleTooLong, Sink, SocInconsistent,
                          SpillNotAllowed, UnknownName, UnknownUnit, UnknownZone, UnusedPreset,
                          UnusedSetting, WrongDimension, WrongNameKind)
from .check_state import check_carried_state, steps_rounded_up
from .series import SeriesSpec, load_series
from .spans import Span

# a leap year of 5-minute steps; a longer horizon is a study for the windowed
# dispatch, not one model (1,000,000 steps of one store took 7.4 GB)
MAX_STEPS = 366 * 288
RESERVED_NAMES = {"schedule", "summary"}   # output files schedule.csv and summary.json
MIN_STEP_H = 1 / 3600  # one second


def _unit_hint(unit: str) -> str:
    """'mw' -> did you mean 'MW'? (units are case-sensitive: 'mW' is not 'MW')."""
    same = [u for u in U.known_units() if u.casefold() == unit.casefold()]
    return f"; did you mean '{same[0]}'?" if same else suggest(unit, U.known_units())


def suggest(name: str, candidates) -> str:
    close = difflib.get_close_matches(name, list(candidates), n=1, cutoff=0.6)
    return f"; did you mean '{close[0]}'?" if close else ""


# What a route kind may join: (source kind, target kind).  docs/language.md
ROUTE_RULES = {
    M.ROUTE_RELEASE: {(M.KIND_RESERVOIR, M.KIND_RESERVOIR), ("other", "other")},
    M.ROUTE_SPILL: {(M.KIND_RESERVOIR, M.KIND_RESERVOIR), ("other", "other")},
    M.ROUTE_TRANSFER: {(M.KIND_THERMAL, M.KIND_THERMAL), (M.KIND_RESERVOIR, M.KIND_RESERVOIR),
                       ("other", "other")},
}


@dataclass
class _Decl:
    """A name in the one shared namespace."""
    kind: str           # "price", "demand", "supply", "connection", "site", "storage", "preset"
    span: Span
    node: Tree = None
    extra: dict = field(default_factory=dict)


class Checker:
    def __init__(self, path: str, base_dir: Path, sink: Sink, confine: bool = False):
        self.path = path
        self.base_dir = base_dir
        self.sink = sink
        self.confine = confine      # read no series file outside base_dir
        self.names: Dict[str, _Decl] = {}
        self._folded: Dict[str, str] = {}     # casefolded name -> the name as declared
        self.presets: Dict[str, Tree] = {}
        self.used_presets: set = set()
        self.circles: set = set()   # preset circles already reported
        self.specs: List[SeriesSpec] = []
        self.horizon: Optional[M.Horizon] = None

    # -- helpers --------------------------------------------------------------
    def span(self, node, fallback: Optional[Span] = None) -> Span:
        if isinstance(node, Token):
            if node.line is None:
                return fallback or Span.whole_file(self.path)
            end_col = node.end_column if node.end_column is not None else node.column + len(node)
            return Span(self.path, node.line, node.column, node.end_line or node.line, end_col)
        meta = getattr(node, "meta", None)
        if meta is None or getattr(meta, "empty", True):
            return fallback or Span.whole_file(self.path)
        return Span(self.path, meta.line, meta.column, meta.end_line, meta.end_column)

    def declare(self, name: Token, kind: str, node=None) -> bool:
        sp = self.span(name)
        if str(name).lower() in RESERVED_NAMES:
            self.sink.add(ReservedName, sp, f"'{name}' is reserved: dispatch writes its own {str(name).lower()} file",
                          "note: choose another name")
            return False
        if str(name) in self.names:
            first = self.names[str(name)]
            self.sink.add(DuplicateName, sp, f"'{name}' is already declared (as {_a(first.kind)})",
                          f"note: first declared at {first.span}")
            return False
        if len(str(name).encode()) > MAX_NAME_BYTES:
            self.sink.add(NameTooLong, sp, f"the name '{str(name)[:40]}...' is {len(str(name))} characters "
                          f"long; an output file is named after it, so at most {MAX_NAME_BYTES}",
                          "note: choose a shorter name")
            return False
        other = self._folded.get(str(name).casefold())
        if other is not None:
            self.sink.add(NameCaseClash, sp, f"'{name}' differs from '{other}' only in letter case; their "
                          f"output files would overwrite each other where file names ignore case",
                          f"note: '{other}' is declared at {self.names[other].span}; rename one of them")
            return False
        self.names[str(name)] = _Decl(kind, sp, node)
        self._folded[str(name).casefold()] = str(name)
        return True

    def quantity(self, q: Tree, dims: Tuple[U.Dim, ...], what: str) -> Optional[Tuple[U.Dim, float]]:
        """Convert a ``quantity`` node; report unknown units and wrong dimensions."""
        number = q.children[0]
        unit, per = _unit_parts(q.children[1])
        value = float(number)
        sp = self.span(q)
        try:
            dim, f = U.factor(unit, per, dims)
        except U.UnitProblem as p:
            if p.kind == "unknown":
                bad = str(p)
                where = self.span(q.children[1])
                if _is_keyword(bad):
                    self.sink.add(UnknownUnit, self.span(number),
                                  f"the number {number} for {what} needs a unit, e.g. {dims[0].example}")
                else:
                    self.sink.add(UnknownUnit, where,
                                  f"unknown unit '{bad}'{_unit_hint(bad)}",
                                  "note: units are MW, kW, GW, MWh, kWh, GWh, %, h, min, s, d and 'per' between them")
            else:
                want = " or ".join(d.words for d in dims)
                self.sink.add(WrongDimension, sp,
                              f"{what} must be {want}, e.g. {dims[0].example}; "
                              f"'{number} {U.written(unit, per)}' is {p}")
            return None
        if not math.isfinite(value) or not math.isfinite(value * f):
            self.sink.add(OutOfRange, sp, f"{what} must be a finite number")
            return None
        limit, shown = U.PLAUSIBLE.get(dim, (None, ""))
        if limit is not None and abs(value * f) > limit:
            self.sink.add(Implausible, sp, f"{what} is {number} {U.written(unit, per)}, beyond any plausible "
                          f"plant or market (at most {limit:g} {shown}); check the number and its unit",
                          "note: values this large are typing errors, and they would wreck the solver's arithmetic")
            return None
        return dim, float(f"{value * f:.12g}")  # 95 % -> 0.95, not 0.9500000000000001

    def power(self, q, what, allow_zero=True) -> Optional[float]:
        got = self.quantity(q, (U.POWER,), what)
        if got is None:
            return None
        v = got[1]
        if v < 0 or (v == 0 and not allow_zero):
            self.sink.add(OutOfRange, self.span(q), f"{what} must be {'positive' if not allow_zero else 'zero or more'}, found {_fmt(v)} MW")
            return None
        return v

    # -- entry ------------------------------------------------------------------
    def run(self, tree: Tree) -> Optional[M.Portfolio]:
        stmts = tree.children
        name = None
        name_span = None
        horizon_node = None
        for st in stmts:
            kind = st.data
            if kind == "portfolio_decl":
                if name is not None:
                    self.sink.add(DuplicateSetting, self.span(st), "the portfolio is named twice",
                                  f"note: first named at {name_span}")
                else:
                    name, name_span = str(st.children[0]), self.span(st)
            elif kind == "horizon":
                if horizon_node is not None:
                    self.sink.add(DuplicateSetting, self.span(st), "the horizon is declared twice",
                                  f"note: first declared at {self.span(horizon_node)}")
                else:
                    horizon_node = st
        if horizon_node is None:
            self.sink.add(MissingSetting, Span(self.path, 1, 1, 1, 1),
                          "the portfolio has no horizon",
                          "note: add e.g. 'horizon start 2027-03-01T00:00 length 24 h step 1 h zone \"UTC\"'")
        else:
            self.horizon = self.check_horizon(horizon_node)

        # First pass: declare every name so that order of declaration does not matter.
        for st in stmts:
            self.collect(st)
        # Second pass: build typed declarations.
        connections: Dict[str, M.Connection] = {}
        sites: Dict[str, M.Site] = {}
        storages: Dict[str, M.Storage] = {}
        supplies: Dict[str, M.Supply] = {}
        demands: Dict[str, M.Demand] = {}
        routes: List[M.Route] = []
        cap = None
        for st in stmts:
            if st.data == "price":
                self.series_spec(st.children[0], st.children[1], "price", st)
            elif st.data == "connection":
                c = self.check_connection(st)
                if c:
                    connections[c.name] = c
            elif st.data == "cap":
                if cap is not None:
                    self.sink.add(DuplicateSetting, self.span(st), "'total' limits are declared twice")
                cap = self.check_cap(st)
            elif st.data == "site":
                self.check_site(st, sites, storages, supplies, demands, routes)
            elif st.data == "route":
                r = self.check_route_syntax(st)
                if r:
                    routes.append(r)
            elif st.data == "preset":
                self.check_preset_chain(st)
        for pname, node in self.presets.items():
            if pname not in self.used_presets:
                self.sink.add(UnusedPreset, self.span(node.children[0]), f"preset '{pname}' is not used by any storage")

        routes = self.check_routes(routes, storages)

        series = {}
        if self.horizon is not None:
            series = load_series(self.specs, self.horizon, self.base_dir, self.sink,
                                 confine=self.confine)
        if self.sink.has_errors or self.horizon is None:
            return None
        if name is None:
            name = Path(self.path).stem
        if not connections:
            self.sink.add(MissingSetting, Span(self.path, 1, 1, 1, 1), "the portfolio has no connection",
                          "note: declare one with 'connection NAME { export max ... }'")
            return None
        return M.Portfolio(name=name, path=self.path, horizon=self.horizon, series=series,
                           connections=connections, sites=sites, storages=storages, supplies=supplies,
                           demands=demands, routes=tuple(routes), cap=cap,
                           span=name_span or Span(self.path, 1, 1, 1, 1))

    def collect(self, st: Tree) -> None:
        kind = st.data
        if kind == "price":
            self.declare(st.children[0], "price", st)
        elif kind == "connection":
            self.declare(st.children[0], "connection", st)
        elif kind == "preset":
            if self.declare(st.children[0], "preset", st):
                self.presets[str(st.children[0])] = st
        elif kind == "site":
            self.declare(st.children[0], "site", st)
            for item in st.children[2:]:
                if isinstance(item, Tree) and item.data in ("demand", "storage", "supply"):
                    self.declare(item.children[0], item.data, item)
                    if item.data == "storage":
                        for s in item.children[1:]:
                            if isinstance(s, Tree) and s.data == "supply":
                                self.declare(s.children[0], "supply", s)  # a storage's own supply

    # -- horizon --------------------------------------------------------------------
    def check_horizon(self, node: Tree) -> Optional[M.Horizon]:
        parts: Dict[str, Tree] = {}
        for part in node.children:
            if part.data in parts:
                self.sink.add(DuplicateSetting, self.span(part), f"the horizon's '{_word(part.data)}' is given twice")
                continue
            parts[part.data] = part
        hsp = self.span(node)
        ok = True
        zone = "UTC"
        if "h_zone" in parts:
            zone = _unquote(parts["h_zone"].children[0])
            try:
                if zone not in _zones():
                    raise ZoneInfoNotFoundError(zone)
                ZoneInfo(zone)
            except (ZoneInfoNotFoundError, ValueError):
                self.sink.add(UnknownZone, self.span(parts["h_zone"].children[0]),
                              f"unknown time zone \"{zone}\"{suggest(zone, _zones())}",
                              "note: use an IANA zone name such as \"Europe/Berlin\" or \"UTC\"")
                return None
        for need in ("h_start", "h_step"):
            if need not in parts:
                self.sink.add(MissingSetting, hsp, f"the horizon needs '{_word(need)}'")
                ok = False
        if "h_length" in parts and "h_end" in parts:
            self.sink.add(DuplicateSetting, self.span(parts["h_end"]), "give the horizon's 'length' or its 'end', not both")
            ok = False
        elif "h_length" not in parts and "h_end" not in parts:
            self.sink.add(MissingSetting, hsp, "the horizon needs 'length' or 'end'")
            ok = False
        if not ok:
            return None
        start = self.timestamp(parts["h_start"].children[0], zone)
        got = self.quantity(parts["h_step"].children[0], (U.TIME,), "the step")
        if start is None or got is None:
            return None
        step_h = got[1]
        if step_h <= 0:
            self.sink.add(OutOfRange, self.span(parts["h_step"]), "the step must be longer than zero")
            return None
        if step_h < MIN_STEP_H:
            self.sink.add(OutOfRange, self.span(parts["h_step"]), "the step must be at least one second")
            return None
        if "h_length" in parts:
            got = self.quantity(parts["h_length"].children[0], (U.TIME,), "the horizon length")
            if got is None:
                return None
            length_h = got[1]
            lsp = self.span(parts["h_length"])
        else:
            end = self.timestamp(parts["h_end"].children[0], zone)
            if end is None:
                return None
            length_h = (end - start) / pd.Timedelta(hours=1)
            lsp = self.span(parts["h_end"])
        if length_h <= 0:
            self.sink.add(OutOfRange, lsp, "the horizon must end after it starts")
            return None
        steps = length_h / step_h
        if not math.isfinite(steps) or steps > MAX_STEPS + 0.5:
            shown = f"{steps:.6g} steps" if math.isfinite(steps) else "too many steps"
            self.sink.add(OutOfRange, lsp, f"the horizon has {shown}; at most {MAX_STEPS} are supported")
            return None
        if steps < 1 - 1e-6:
            self.sink.add(HorizonMisfit, lsp, f"the horizon ({_fmt(length_h)} h) is shorter than one step ({_fmt(step_h)} h)")
            return None
        if abs(steps - round(steps)) > max(1e-6, 1e-9 * steps):  # relative: 1 min is 0.0166666666667 h
            self.sink.add(HorizonMisfit, lsp, f"the horizon ({_fmt(length_h)} h) is not a whole number of "
                          f"{_fmt(step_h * 60)}-minute steps ({steps:.3f})")
            return None
        steps = int(round(steps))
        try:
            start + pd.Timedelta(hours=step_h * steps)
        except (OverflowError, ValueError):
            self.sink.add(OutOfRange, lsp, f"the horizon ends after {LAST_YEAR}, the last year supported")
            return None
        return M.Horizon(start=start, steps=steps, step_hours=step_h, zone=zone, span=hsp)

    def timestamp(self, tok: Token, zone: str) -> Optional[pd.Timestamp]:
        text = str(tok)
        sp = self.span(tok)
        m = re.match(r"(\d{4}-\d{2}-\d{2})T24:00(?::00(?:\.0+)?)?(.*)$", text)
        if m:     # ISO 8601's end of day: say which instant it is, in the language's spelling
            try:
                nxt = (pd.Timestamp(m.group(1)) + pd.Timedelta(days=1)).strftime("%Y-%m-%d")
                hint = f"; write the next day's start, '{nxt}T00:00{m.group(2)}'"
            except (ValueError, OverflowError):
                hint = ""
            self.sink.add(BadTimestamp, sp, f"'{text}': 24:00 (the end of a day) is not accepted{hint}")
            return None
        try:
            ts = pd.Timestamp(text)
        except (ValueError, OverflowError):
            self.sink.add(BadTimestamp, sp, f"'{text}' is not a valid date and time")
            return None
        if ts is pd.NaT:
            self.sink.add(BadTimestamp, sp, f"'{text}' is not a valid date and time")
            return None
        if not FIRST_YEAR <= ts.year <= LAST_YEAR:
            self.sink.add(BadTimestamp, sp, f"'{text}' is outside the years supported "
                          f"({FIRST_YEAR} to {LAST_YEAR})")
            return None
        if ts.tzinfo is None:
            try:
                ts = ts.tz_localize(zone, nonexistent="raise", ambiguous="raise")
            except Exception:
                self.sink.add(BadTimestamp, sp, f"'{text}' does not name one instant in {zone} "
                              "(a daylight-saving change); add a UTC offset such as +01:00")
                return None
        else:
            ts = ts.tz_convert(zone)
        return ts

    # -- series -----------------------------------------------------------------------
    def series_spec(self, name: Token, src: Tree, quantity: str, stmt: Tree) -> Optional[str]:
        dims = (U.POWER,) if quantity == "power" else (U.PRICE,)
        sp = self.span(stmt)
        nm = str(name)
        kind = src.data
        if kind == "csv_source":
            path_tok, col_tok = src.children[0], src.children[1]
            time_col = time_span = None
            fac = 1.0
            seen = set()
            for opt in src.children[2:]:
                if opt.data in seen:
                    self.sink.add(DuplicateSetting, self.span(opt), f"'{_word(opt.data)}' is given twice")
                    continue
                seen.add(opt.data)
                if opt.data == "time_column":
                    time_col, time_span = _unquote(opt.children[0]), self.span(opt.children[0])
                else:
                    fac = self.unit_factor(opt.children[0], dims, f"the unit of series '{nm}'")
                    if fac is None:
                        return None
            self.specs.append(SeriesSpec(name=nm, quantity=quantity, span=sp, path=_unquote(path_tok),
                                         path_span=self.span(path_tok), column=_unquote(col_tok),
                                         column_span=self.span(col_tok), time_column=time_col,
                                         time_column_span=time_span, factor=fac))
        elif kind == "list_source":
            nums = [c for c in src.children if isinstance(c, Tree) and c.data == "number"]
            us = [c for c in src.children if isinstance(c, Tree) and c.data in ("unit_spec", "per_unit")]
            fac = 1.0
            if us:
                fac = self.unit_factor(us[0], dims, f"the values of '{nm}'")
                if fac is None:
                    return None
            values = tuple(float(n.children[0]) for n in nums)
            if not all(math.isfinite(v) for v in values):
                self.sink.add(OutOfRange, self.span(src), f"the values of '{nm}' must be finite numbers")
                return None
            self.specs.append(SeriesSpec(name=nm, quantity=quantity, span=sp, values=values,
                                         values_span=self.span(src), factor=fac))
        else:  # constant_source
            got = self.quantity(src.children[0], dims, f"the value of '{nm}'")
            if got is None:
                return None
            self.specs.append(SeriesSpec(name=nm, quantity=quantity, span=sp, constant=got[1],
                                         values_span=self.span(src)))  # a negative power is P410 there
        return nm

    def unit_factor(self, node: Tree, dims, what) -> Optional[float]:
        unit, per = _unit_parts(node)
        try:
            return U.factor(unit, per, dims)[1]
        except U.UnitProblem as p:
            if p.kind == "unknown":
                self.sink.add(UnknownUnit, self.span(node), f"unknown unit '{p}'{_unit_hint(str(p))}")
            else:
                self.sink.add(WrongDimension, self.span(node),
                              f"{what} must be in units of {dims[0].words}, e.g. {dims[0].example}; "
                              f"'{U.written(unit, per)}' is {p}")
            return None

    def ref(self, tok: Token, want: Tuple[str, ...], what: str) -> Optional[str]:
        nm = str(tok)
        d = self.names.get(nm)
        if d is None:
            pool = [n for n, x in self.names.items() if x.kind in want]
            self.sink.add(UnknownName, self.span(tok), f"unknown {what} '{nm}'{suggest(nm, pool)}")
            return None
        if d.kind not in want:
            self.sink.add(WrongNameKind, self.span(tok), f"'{nm}' is {_a(d.kind)}, not {_a(what)}",
                          f"note: '{nm}' is declared at {d.span}")
            return None
        return nm

    # -- connections and caps ------------------------------------------------------
    def settings(self, nodes, what: str) -> Dict[str, Tree]:
        out: Dict[str, Tree] = {}
        for n in nodes:
            if not isinstance(n, Tree):
                continue
            key = n.data
            if key in out:
                self.sink.add(DuplicateSetting, self.span(n), f"'{_word(key)}' is given twice in {what}",
                              f"note: first given at {self.span(out[key])}")
                continue
            out[key] = n
        return out

    def check_connection(self, st: Tree) -> Optional[M.Connection]:
        name = str(st.children[0])
        s = self.settings(st.children[1:], f"connection '{name}'")
        spans = {}
        vals = {}
        for key, fld in (("export_max", "export_max"), ("import_max", "import_max")):
            if key in s:
                vals[fld] = self.power(s[key].children[0], f"the {_word(key)} of '{name}'")
                spans[fld] = self.span(s[key])
        for key in ("sell", "buy"):
            if key in s:
                vals[key] = self.price_expr(s[key].children[0], name)
                spans[key] = self.span(s[key])
        if "direction_exclusive" in s:
            vals["exclusive"] = True
            spans["exclusive"] = self.span(s["direction_exclusive"])
        self.check_prices(name, st.children[0], s, vals)
        return M.Connection(name=name, span=self.span(st), spans=spans, **vals)

    def check_prices(self, name: str, name_tok: Token, s: Dict[str, Tree], vals: dict) -> None:
        """Every direction a connection can carry needs a price: a missing buy price
        would make imports free (an error), a missing sell price makes exports worthless."""
        sp = self.span(name_tok)
        if "buy" not in s and vals.get("import_max", 1.0) != 0:
            self.sink.add(ImportUnpriced, sp, f"connection '{name}' can import but has no 'buy at' price: "
                          "imported energy would be free; write 'buy at 0 per MWh' if that is really meant",
                          "note: give the price it buys at, e.g. 'buy at spot plus 9.5 per MWh'",
                          "note: or write 'import max 0 MW' if the connection cannot import")
        if "sell" not in s and vals.get("export_max", 1.0) != 0:
            self.sink.add(ExportUnpriced, sp, f"connection '{name}' can export but has no 'sell at' price: "
                          "exported energy earns nothing",
                          "note: write 'sell at 0 per MWh' if exports really earn nothing",
                          "note: or 'export max 0 MW' if the connection cannot export")

    def price_expr(self, node: Tree, owner: str) -> Optional[M.PriceExpr]:
        sp = self.span(node)
        if node.data == "price_constant":
            got = self.quantity(node.children[0], (U.PRICE,), f"the price of '{owner}'")
            return M.PriceExpr(series=None, adder=got[1], span=sp) if got else None
        series = self.ref(node.children[0], ("price",), "price series")
        adder = 0.0
        if len(node.children) > 1:
            got = self.quantity(node.children[2], (U.PRICE,), f"the price adder of '{owner}'")
            if got is None:
                return None
            adder = got[1] if str(node.children[1]) == "plus" else -got[1]
        return M.PriceExpr(series=series, adder=adder, span=sp) if series else None

    def check_cap(self, st: Tree) -> M.Cap:
        s = self.settings(st.children, "the 'total' limits")
        vals, spans = {}, {}
        for key in ("export_max", "import_max"):
            if key in s:
                vals[key] = self.power(s[key].children[0], f"the total {_word(key)}")
                spans[key] = self.span(s[key])
        if not s:
            self.sink.add(UnusedSetting, self.span(st), "'total' declares no limit")
        return M.Cap(name="total", span=self.span(st), spans=spans, **vals)

    # -- sites ----------------------------------------------------------------------------
    def check_site(self, st, sites, storages, supplies, demands, routes) -> None:
        name = str(st.children[0])
        conn = self.ref(st.children[1], ("connection",), "connection")
        items = st.children[2:]
        limits = self.settings([i for i in items if i.data in ("export_max", "import_max")], f"site '{name}'")
        vals, spans = {}, {}
        for key in ("export_max", "import_max"):
            if key in limits:
                vals[key] = self.power(limits[key].children[0], f"the {_word(key)} of site '{name}'")
                spans[key] = self.span(limits[key])
        sites[name] = M.Site(name=name, connection=conn or "", span=self.span(st), spans=spans, **vals)
        for item in items:
            if item.data == "demand":
                nm = str(item.children[0])
                self.series_spec(item.children[0], item.children[1], "power", item)
                demands[nm] = M.Demand(name=nm, site=name, profile=nm, span=self.span(item))
            elif item.data == "storage":
                s = self.check_storage(item, name)
                if s is not None:
                    storages[s.name] = s
            elif item.data == "supply":
                i = self.check_supply(item, name)
                if i is not None:
                    supplies[i.name] = i
            elif item.data == "route":
                r = self.check_route_syntax(item)
                if r:
                    routes.append(r)

    def check_supply(self, node: Tree, site: str) -> Optional[M.Supply]:
        nm = str(node.children[0])
        self.series_spec(node.children[0], node.children[1], "power", node)
        s = self.settings(node.children[2:], f"supply '{nm}'")
        targets: List[str] = []
        spans = {}
        if "into" in s:
            spans["targets"] = self.span(s["into"])
            seen = set()
            for t in s["into"].children:
                if t.data == "site_target":
                    tn = "site"
                else:
                    tn = self.ref(t.children[0], ("storage",), "storage")
                    if tn is None:
                        continue
                if tn in seen:
                    self.sink.add(DuplicateSetting, self.span(t), f"'{tn}' is listed twice")
                    continue
                seen.add(tn)
                targets.append(tn)
        else:
            targets = ["site"]
        curtail = False
        if "curtail" in s:
            curtail = str(s["curtail"].children[0]) == "allowed"
            spans["curtail_allowed"] = self.span(s["curtail"])
        return M.Supply(name=nm, site=site, profile=nm, targets=tuple(targets), curtail_allowed=curtail,
                        span=self.span(node), spans=spans)

    # -- presets and storages ------------------------------------------------------
    def preset_settings(self, name: str, chain: Tuple[str, ...], at: Span,
                        use: bool = True) -> Optional[Dict[str, Tree]]:
        node = self.presets.get(name)
        if node is None:
            return None
        if name in chain:
            circle = frozenset(chain[chain.index(name):])
            if circle not in self.circles:
                self.circles.add(circle)
                self.sink.add(LimitInconsistent, at, f"presets take each other in a circle: {' -> '.join(chain + (name,))}")
            return None
        if use:
            self.used_presets.add(name)
        merged: Dict[str, Tree] = {}
        rest = node.children[1:]
        if rest and isinstance(rest[0], Token):
            parent = self.ref(rest[0], ("preset",), "preset")
            if parent:
                got = self.preset_settings(parent, chain + (name,), self.span(rest[0]), use)
                if got is None:
                    return None
                merged.update(got)
            else:
                return None
            rest = rest[1:]
        own = self.storage_settings(rest, f"preset '{name}'")
        merged.update(own)
        return merged

    def check_preset_chain(self, st: Tree) -> None:
        # Presets are checked through the storages that take them; a circle is reported once here.
        self.preset_settings(str(st.children[0]), (), self.span(st.children[0]), use=False)

    def storage_settings(self, nodes, what) -> Dict[str, Tree]:
        out: Dict[str, Tree] = {}
        for n in nodes:
            if not isinstance(n, Tree):
                continue
            keys = [n.data] if n.data != "soc" else [p.data for p in n.children]
            parts = [n] if n.data != "soc" else list(n.children)
            for key, part in zip(keys, parts):
                key = "efficiency" if key == "round_trip" else key
                if key in out:
                    self.sink.add(DuplicateSetting, self.span(part), f"'{_word(key)}' is given twice in {what}",
                                  f"note: first given at {self.span(out[key])}")
                    continue
                out[key] = part
        if "supply" in out and what.startswith("preset"):
            self.sink.add(LimitInconsistent, self.span(out["supply"]),
                          "a preset cannot hold a supply (each supply needs its own name); put it in the storage")
            del out["supply"]
        return out

    def check_storage(self, node: Tree, site: str) -> Optional[M.Storage]:
        nm = str(node.children[0])
        rest = node.children[1:]
        settings: Dict[str, Tree] = {}
        if rest and isinstance(rest[0], Token):
            pname = self.ref(rest[0], ("preset",), "preset")
            got = self.preset_settings(pname, (), self.span(rest[0])) if pname else None
            if got is None:
                # the preset is unknown or broken (reported): settings would be missing for no fault of this storage
                self.storage_settings(rest[1:], f"storage '{nm}'")
                return None
            settings.update(got)
            rest = rest[1:]
        settings.update(self.storage_settings(rest, f"storage '{nm}'"))
        return StorageBuilder(self, nm, site, self.span(node), settings).build()

    # -- routes ------------------------------------------------------------------------
    def check_route_syntax(self, st: Tree) -> Optional[Tuple[M.Route, float]]:
        src = self.ref(st.children[0], ("storage",), "storage")
        kind = str(st.children[1])
        dst = self.ref(st.children[2], ("storage",), "storage")
        opts = self.settings(st.children[3:], "the route")
        spans = {"source": self.span(st.children[0]), "target": self.span(st.children[2])}
        vals = {}
        delay_h = 0.0
        if "delay" in opts:
            got = self.quantity(opts["delay"].children[0], (U.TIME,), "the delay")
            if got is not None:
                delay_h = got[1]
                if delay_h < 0:
                    self.sink.add(OutOfRange, self.span(opts["delay"]), "the delay cannot be negative")
                    delay_h = 0.0
            spans["delay_steps"] = self.span(opts["delay"])
        if "factor" in opts:
            f = float(opts["factor"].children[0].children[0])
            if not (f > 0 and math.isfinite(f)):
                self.sink.add(OutOfRange, self.span(opts["factor"]), f"the factor must be above zero, found {_fmt(f)}")
            elif f > U.FACTOR_PLAUSIBLE:
                self.sink.add(Implausible, self.span(opts["factor"]), f"the factor {_fmt(f)} is beyond any "
                              f"plausible conversion (at most {U.FACTOR_PLAUSIBLE:g})")
            vals["factor"] = f
            spans["factor"] = self.span(opts["factor"])
        if "route_max" in opts:
            vals["max_mw"] = self.power(opts["route_max"].children[0], "the route's max")
            spans["max_mw"] = self.span(opts["route_max"])
        if "route_efficiency" in opts:
            got = self.quantity(opts["route_efficiency"].children[0], (U.FRACTION,), "the route's efficiency")
            if got is not None:
                if not 0 < got[1] <= 1:
                    self.sink.add(OutOfRange, self.span(opts["route_efficiency"]),
                                  f"the route's efficiency must be above 0 % and at most 100 %, found {_fmt(got[1] * 100)} %")
                vals["efficiency"] = got[1]
            spans["efficiency"] = self.span(opts["route_efficiency"])
            if kind != M.ROUTE_TRANSFER:
                self.sink.add(UnusedSetting, self.span(opts["route_efficiency"]),
                              f"an efficiency applies to 'transfer' routes; a {kind} route loses nothing on the way (use 'factor')")
        if "in_transit" in opts:
            got = self.quantity(opts["in_transit"].children[0], (U.ENERGY,), "what is in transit at the start")
            if got is not None:
                if got[1] < 0:
                    self.sink.add(OutOfRange, self.span(opts["in_transit"]), "what is in transit cannot be negative")
                vals["in_transit"] = got[1]
            spans["in_transit"] = self.span(opts["in_transit"])
        if src is None or dst is None:
            return None
        r = M.Route(name=f"{src}_{kind}_to_{dst}", source=src, kind=kind, target=dst, span=self.span(st),
                    spans=spans, **vals)
        return r, delay_h  # the delay in steps is settled in check_routes, once the horizon is known

    def check_routes(self, routes: List[Tuple[M.Route, float]], storages: Dict[str, M.Storage]) -> List[M.Route]:
        out = []
        taken: set = set()
        seen: Dict[Tuple[str, str], M.Route] = {}
        step = self.horizon.step_hours if self.horizon else None
        for r, delay_h in routes:
            ok = True
            if step:
                d = delay_h / step
                if not d <= MAX_STEPS:
                    self.sink.add(OutOfRange, r.where("delay_steps"), f"the delay of {_fmt(delay_h)} h is longer "
                                  f"than any horizon can be ({MAX_STEPS} steps)")
                    continue
                if abs(d - round(d)) > 1e-6:
                    self.sink.add(DelayNotWhole, r.where("delay_steps"),
                                  f"the delay of {_fmt(delay_h)} h is not a whole number of {_fmt(step * 60)}-minute steps")
                    ok = False
                d = int(round(d))
            else:
                d = 0
            if r.in_transit > 0 and d == 0:
                self.sink.add(UnusedSetting, r.where("in_transit"), "nothing can be in transit on a route with no delay")
            src, dst = storages.get(r.source), storages.get(r.target)
            if r.source == r.target:
                self.sink.add(RouteToSelf, r.span, f"'{r.source}' cannot route to itself")
                ok = False
            key = (r.source, r.kind)
            if key in seen and r.kind != M.ROUTE_TRANSFER:
                self.sink.add(RouteDuplicate, r.span, f"'{r.source}' already has a {r.kind} route",
                              f"note: first declared at {seen[key].span}")
                ok = False
            seen.setdefault(key, r)
            if src is not None and dst is not None:
                sk = src.kind if src.kind in M.KNOWN_KINDS else "other"
                tk = dst.kind if dst.kind in M.KNOWN_KINDS else "other"
                if (sk, tk) not in ROUTE_RULES[r.kind]:
                    allowed = ", ".join(f"{a} -> {b}" for a, b in sorted(ROUTE_RULES[r.kind]))
                    self.sink.add(RouteKindMismatch, r.span,
                                  f"a {r.kind} route cannot join a {src.kind} to a {dst.kind}",
                                  f"note: a {r.kind} route may join: {allowed}")
                    ok = False
                if r.kind == M.ROUTE_SPILL and not src.spill_allowed:
                    self.sink.add(SpillNotAllowed, r.span, f"'{r.source}' does not allow spill, so nothing can flow down this spill route",
                                  f"note: add 'spill allowed' to '{r.source}'")
                    ok = False
                if r.kind == M.ROUTE_RELEASE and src.discharge_max <= 0:
                    self.sink.add(UnusedSetting, r.span, f"'{r.source}' cannot discharge, so it never releases anything")
            if ok and self.horizon is not None and d > self.horizon.steps:
                self.sink.add(UnusedSetting, r.where("delay_steps"),
                              f"the delay ({d} steps) is longer than the horizon ({self.horizon.steps} steps): "
                              "nothing sent down this route arrives within it")
            name = r.name
            if ok:
                # a unique output name: a second transfer between the same two stores gets a suffix
                n = 2
                while name in taken:
                    name = f"{r.name}_{n}"
                    n += 1
                if name in self.names:
                    self.sink.add(DuplicateName, r.span, f"this route's output name '{name}' is already declared "
                                  f"(as {_a(self.names[name].kind)})",
                                  f"note: '{name}' is declared at {self.names[name].span}; rename one of them")
                    ok = False
            if ok:
                taken.add(name)
                out.append(M.Route(name=name, source=r.source, kind=r.kind, target=r.target, delay_steps=d,
                                   factor=r.factor, efficiency=r.efficiency, max_mw=r.max_mw,
                                   in_transit=r.in_transit, span=r.span, spans=r.spans))
        return out


class StorageBuilder:
    """Interprets a storage's merged settings (preset first, own settings over it)."""

    def __init__(self, ck: Checker, name: str, site: str, span: Span, s: Dict[str, Tree]):
        self.ck, self.name, self.site, self.span_, self.s = ck, name, site, span, s
        self.spans: Dict[str, Span] = {}
        self.vals: dict = {}

    def q(self, key, dims, what):
        node = self.s[key]
        return self.ck.quantity(node.children[0], dims, f"{what} of '{self.name}'")

    def sp(self, key):
        return self.ck.span(self.s[key])

    def build(self) -> Optional[M.Storage]:
        ck, s, nm = self.ck, self.s, self.name
        sink = ck.sink
        before = len(sink.errors)
        v, spans = self.vals, self.spans
        if "kind" in s:
            v["kind"] = str(s["kind"].children[0])
            spans["kind"] = self.sp("kind")
            if v["kind"] not in M.KNOWN_KINDS:
                hint = suggest(v["kind"], M.KNOWN_KINDS)
                if hint:
                    sink.add(UnusedSetting, self.sp("kind"), f"'{v['kind']}' is not a kind the checks know{hint}",
                             "note: battery, reservoir and thermal decide which routes are allowed; any other label is 'other'")
        if "energy" not in s:
            sink.add(MissingSetting, self.span_, f"storage '{nm}' needs an 'energy' capacity, e.g. 'energy 40 MWh'")
            return None
        got = self.q("energy", (U.ENERGY,), "the energy")
        if got is None:
            return None
        energy = got[1]
        spans["energy"] = self.sp("energy")
        if energy <= 0:
            sink.add(OutOfRange, self.sp("energy"), f"the energy of '{nm}' must be above zero, found {_fmt(energy)} MWh")
            return None
        v["energy"] = energy
        for key in ("charge", "discharge"):
            if key not in s:
                continue
            spans[f"{key}_max"] = self.sp(key)
            lim = s[key].children[0]
            if lim.data == "power_off":
                v[f"{key}_max"] = 0.0
                continue
            mx = ck.power(lim.children[0], f"the {key} max of '{nm}'")
            if mx is None:
                continue
            v[f"{key}_max"] = mx
            if len(lim.children) > 1:
                mn = ck.power(lim.children[1], f"the {key} min of '{nm}'")
                spans[f"{key}_min"] = ck.span(lim.children[1])
                if mn is not None:
                    if mn > mx:
                        sink.add(LimitInconsistent, ck.span(lim.children[1]),
                                 f"the {key} min when running ({_fmt(mn)} MW) is above the {key} max ({_fmt(mx)} MW)")
                    v[f"{key}_min"] = mn
        if "efficiency" in s:
            node = s["efficiency"]
            spans["eta_charge"] = spans["eta_discharge"] = self.sp("efficiency")
            if node.data == "round_trip":
                got = ck.quantity(node.children[0], (U.FRACTION,), f"the round-trip efficiency of '{nm}'")
                if got and self.fraction_ok(got[1], node.children[0], "round-trip efficiency"):
                    v["eta_charge"] = v["eta_discharge"] = math.sqrt(got[1])
            else:
                for i, key in enumerate(("eta_charge", "eta_discharge")):
                    got = ck.quantity(node.children[i], (U.FRACTION,), f"the {key[4:]} efficiency of '{nm}'")
                    if got and self.fraction_ok(got[1], node.children[i], f"{key[4:]} efficiency"):
                        v[key] = got[1]
        # state of charge: a percentage means a share of the energy capacity
        soc = {}
        for key, fld in (("soc_min", "soc_min"), ("soc_max", "soc_max"), ("soc_start", "soc_start")):
            if key in s:
                val = self.energy_or_share(s[key].children[0], energy, f"the soc {key[4:]}")
                spans[fld] = self.sp(key)
                if val is not None:
                    soc[fld] = val
        lo = soc.get("soc_min", 0.0)
        hi = soc.get("soc_max", energy)
        start = soc.get("soc_start", lo)
        v.update(soc_min=lo, soc_max=hi, soc_start=start)
        end_rule, end_val = M.END_AT_LEAST, start
        if "soc_end" in s:
            spans["end_rule"] = spans["end_value"] = self.sp("soc_end")
            rule = s["soc_end"].children[0]
            if rule.data == "end_free":
                end_rule = M.END_FREE
            else:
                end_rule = M.END_AT_LEAST if rule.data == "end_at_least" else M.END_EQUAL
                ev = rule.children[0]
                if ev.data == "value_start":
                    end_val = start
                else:
                    got = self.energy_or_share(ev.children[0], energy, "the soc end")
                    end_val = got if got is not None else start
        v.update(end_rule=end_rule, end_value=end_val)
        self.check_soc(lo, hi, start, end_rule, end_val, energy)
        if "loss" in s:
            got = self.loss_per_hour()
            spans["loss_per_h"] = self.sp("loss")
            if got is not None:
                v["loss_per_h"] = got
        if "wear" in s:
            got = self.q("wear", (U.PRICE,), "the wear cost")
            spans["wear"] = self.sp("wear")
            if got is not None:
                if got[1] < 0:
                    sink.add(OutOfRange, self.sp("wear"), "the wear cost cannot be negative")
                v["wear"] = got[1]
        if "modes" in s:
            v["exclusive"] = str(s["modes"].children[0]) == "exclusive"
            spans["exclusive"] = self.sp("modes")
        step = ck.horizon.step_hours if ck.horizon else None
        for key, fld, word in (("min_run", "min_run_h", "run"), ("min_rest", "min_rest_h", "rest")):
            if key in s:
                got = self.q(key, (U.TIME,), f"the minimum {word}")
                spans[fld] = self.sp(key)
                if got is None:
                    continue
                if got[1] < 0:
                    sink.add(OutOfRange, self.sp(key), f"the minimum {word} cannot be negative")
                    continue
                v[fld] = got[1]
                if step:
                    whole = steps_rounded_up(got[1], step)
                    if ck.horizon and got[1] / step > ck.horizon.steps:
                        sink.add(RuleTooLong, self.sp(key), f"the minimum {word} is longer than the whole horizon")
                    elif whole is not None:
                        sink.add(RuleTooLong, self.sp(key), f"the minimum {word} of {_fmt(got[1])} h is not a whole "
                                 f"number of steps; it is rounded up to {whole} steps")
        for key, what in (("min_run", "holds each charge or discharge run on for at least {h}, but without "
                                      "a minimum output a run may go on at 0 MW: the rule then only keeps "
                                      "the other direction blocked for that long"),
                          ("min_rest", "keeps it idle for at least {h} after each run, but without a minimum "
                                       "output a run may go on at 0 MW instead of stopping: the rest then only "
                                       "separates a charge run from a discharge run")):
            h = v.get(f"{key}_h", 0)
            if h > 0 and v.get("charge_min", 0) <= 0 and v.get("discharge_min", 0) <= 0:
                sink.add(UnusedSetting, self.sp(key),
                         f"'{_word(key)}' on '{nm}' {what.format(h=f'{_fmt(h)} h')}",
                         "note: add 'min P when running' to 'charge max' or 'discharge max' "
                         "if a run must deliver power")
        self.exclusive_from_rules()
        if "ramp" in s:
            got = self.q("ramp", (U.RAMP,), "the ramp limit")
            spans["ramp_mw_per_h"] = self.sp("ramp")
            if got is not None:
                if got[1] <= 0:
                    sink.add(OutOfRange, self.sp("ramp"), "the ramp limit must be above zero")
                v["ramp_mw_per_h"] = got[1]
        check_carried_state(self)
        if "spill" in s:
            node = s["spill"]
            spans["spill_allowed"] = self.sp("spill")
            v["spill_allowed"] = str(node.children[0]) == "allowed"
            if len(node.children) > 1:
                spans["spill_max"] = ck.span(node.children[1])
                v["spill_max"] = ck.power(node.children[1], f"the spill max of '{nm}'")
                if not v["spill_allowed"]:
                    sink.add(UnusedSetting, ck.span(node.children[1]), "a spill max has no effect when spill is forbidden")
        if "supply" in s:
            node = s["supply"]
            inm = str(node.children[0])
            spans["supply"] = self.sp("supply")
            ck.series_spec(node.children[0], node.children[1], "power", node)
            if len(node.children) > 2:
                sink.add(UnusedSetting, ck.span(node.children[2]),
                         "a supply inside a storage always flows into that storage; 'into' and 'curtail' do not apply here "
                         "(use 'spill allowed' to let the storage shed what it cannot hold)")
            v["supply"] = inm
        cmin, dmin = v.get("charge_min", 0.0), v.get("discharge_min", 0.0)
        needs = v.get("exclusive") or cmin > 0 or dmin > 0 or v.get("min_run_h", 0) > 0 or v.get("min_rest_h", 0) > 0
        if needs and v.get("charge_max", 0.0) <= 0 and v.get("discharge_max", 0.0) <= 0:
            sink.add(LimitInconsistent, self.span_, f"'{nm}' has operating rules but can neither charge nor discharge")
        if len(sink.errors) > before:
            return None
        v = {k: x for k, x in v.items() if x is not None}
        return M.Storage(name=nm, site=self.site, span=self.span_, spans=dict(spans), **v)

    RULE_WORDS = (("charge_min", "minimum charge when running"),
                  ("discharge_min", "minimum discharge when running"),
                  ("min_run_h", "minimum run"), ("min_rest_h", "minimum rest"))

    def exclusive_from_rules(self) -> None:
        """A minimum output, run or rest makes the modes exclusive (:func:`model.rules_make_exclusive`):
        charging and discharging at once could net below a minimum output, keep a run alive
        or skip a rest.  The rows that keep the modes apart then point at the first such rule."""
        v, spans = self.vals, self.spans
        rules = [(f, words) for f, words in self.RULE_WORDS if (v.get(f) or 0) > 0]
        if not rules or v.get("exclusive"):
            return
        if "modes" in self.s:   # 'modes free', or it would be exclusive already
            said = " and ".join(f"its {words}" for _, words in rules)
            self.ck.sink.add(UnusedSetting, self.sp("modes"),
                             f"'modes free' is overridden on '{self.name}': {said} "
                             f"make{'s' if len(rules) == 1 else ''} its modes exclusive",
                             "note: charging and discharging at once could net below a minimum output, "
                             "keep a run alive or skip a rest; remove 'modes free'")
        v["exclusive"] = True
        spans["exclusive"] = spans.get(rules[0][0], self.span_)

    def loss_per_hour(self) -> Optional[float]:
        """``X% per P``: lose X % of the content over each period P, compounded.

        50 % per d is 1 - 0.5 ** (1/24) = 2.85 % per h, so a day loses exactly
        half; 0.5 % per h is 0.5 % per h.
        """
        node = self.s["loss"].children[0]
        got = self.ck.quantity(node, (U.RATE,), f"the loss of '{self.name}'")
        if got is None:
            return None
        unit, per = _unit_parts(node.children[1])
        period_h = U.factor(per, None, (U.TIME,))[1] if per else 1.0
        share = got[1] * period_h               # the fraction lost per stated period
        if not 0 <= share < 1:
            self.ck.sink.add(OutOfRange, self.sp("loss"), f"the loss of '{self.name}' must be from 0 % to below "
                             f"100 % per period, found {_fmt(share * 100)} % per {per or 'h'}")
            return None
        return float(f"{1 - (1 - share) ** (1 / period_h):.12g}")

    def fraction_ok(self, val, node, what) -> bool:
        if not 0 < val <= 1:
            self.ck.sink.add(OutOfRange, self.ck.span(node),
                             f"the {what} of '{self.name}' must be above 0 % and at most 100 %, found {_fmt(val * 100)} %")
            return False
        return True

    def energy_or_share(self, qnode, energy, what) -> Optional[float]:
        got = self.ck.quantity(qnode, (U.ENERGY, U.FRACTION), f"{what} of '{self.name}'")
        if got is None:
            return None
        dim, val = got
        if dim is U.FRACTION:
            if not 0 <= val <= 1:
                self.ck.sink.add(OutOfRange, self.ck.span(qnode), f"{what} of '{self.name}' must be from 0 % to 100 %, found {_fmt(val * 100)} %")
                return None
            return val * energy
        if val < 0:
            self.ck.sink.add(OutOfRange, self.ck.span(qnode), f"{what} of '{self.name}' cannot be negative")
            return None
        return val

    def check_soc(self, lo, hi, start, end_rule, end_val, energy):
        sink, nm, sp = self.ck.sink, self.name, self.spans
        eps = 1e-9
        if hi > energy + eps:
            sink.add(SocInconsistent, sp.get("soc_max", self.span_), f"the soc max of '{nm}' ({_fmt(hi)} MWh) is above its energy capacity ({_fmt(energy)} MWh)")
        if lo > hi + eps:
            sink.add(SocInconsistent, sp.get("soc_min", self.span_), f"the soc min of '{nm}' ({_fmt(lo)} MWh) is above its soc max ({_fmt(hi)} MWh)")
            return
        if not lo - eps <= start <= hi + eps:
            sink.add(SocInconsistent, sp.get("soc_start", sp.get("soc_min", self.span_)),
                     f"the soc start of '{nm}' ({_fmt(start)} MWh) is outside its bounds {_fmt(lo)}..{_fmt(hi)} MWh")
            if "end_rule" not in sp:
                return  # the default end rule (at least start) would only repeat this
        if end_rule != M.END_FREE and end_val > hi + eps:
            sink.add(SocInconsistent, sp.get("end_rule", self.span_), f"the soc end of '{nm}' ({_fmt(end_val)} MWh) is above its soc max ({_fmt(hi)} MWh)")
        if end_rule == M.END_EQUAL and end_val < lo - eps:
            sink.add(SocInconsistent, sp.get("end_rule", self.span_), f"the soc end of '{nm}' ({_fmt(end_val)} MWh) is below its soc min ({_fmt(lo)} MWh)")


# -- small helpers -------------------------------------------------------------------

def _unit_parts(node: Tree) -> Tuple[Optional[str], Optional[str]]:
    if node.data == "per_unit":
        return None, str(node.children[0])
    toks = [str(t) for t in node.children]
    return toks[0], (toks[1] if len(toks) > 1 else None)


_KEYWORDS = None


def _is_keyword(word: str) -> bool:
    global _KEYWORDS
    if _KEYWORDS is None:
        from .syntax import parser
        _KEYWORDS = {t.pattern.value for t in parser().terminals if t.pattern.type == "str"}
    return word in _KEYWORDS


_WORDS = {"h_start": "start", "h_end": "end", "h_length": "length", "h_step": "step", "h_zone": "zone",
          "export_max": "export max", "import_max": "import max", "min_run": "run at least",
          "min_rest": "rest at least", "soc_min": "soc min", "soc_max": "soc max", "soc_start": "soc start",
          "soc_end": "soc end", "time_column": "time column", "csv_unit": "unit", "route_max": "max",
          "route_efficiency": "efficiency", "in_transit": "in transit", "direction_exclusive": "direction exclusive"}


def _a(word: str) -> str:
    return ("an " if word[:1] in "aeiou" else "a ") + word


def _word(key: str) -> str:
    return _WORDS.get(key, key.replace("_", " "))


def _unquote(tok: Token) -> str:
    return str(tok)[1:-1]


def _fmt(x: float) -> str:
    return f"{x:.6g}"


_ZONES = None
# the years a timestamp may fall in: pandas' nanosecond timestamps run from
# 1677-09-21 to 2262-04-11; whole years inside that
FIRST_YEAR, LAST_YEAR = 1678, 2261
# an asset's output file is "<name>.parquet": 255 bytes at most on common file systems
MAX_NAME_BYTES = 255 - len(".parquet")


_NOT_ZONES = {"localtime", "posixrules", "Factory"}   # files of the system's zone folder, not IANA names


def _zones():
    """IANA zone names (the system's aliases such as "localtime", which mean
    something else on every machine, and the posix/ and right/ copies left out)."""
    global _ZONES
    if _ZONES is None:
        _ZONES = {z for z in available_timezones()
                  if z not in _NOT_ZONES and not z.startswith(("posix/", "right/"))} | {"UTC"}
    return _ZONES


def check(tree: Tree, path: str, base_dir: Path, sink: Sink,
          confine: bool = False) -> Optional[M.Portfolio]:
    return Checker(path, base_dir, sink, confine).run(tree)
