"""The checker's passes over the statements: the heading, the names, the declarations."""

from __future__ import annotations

from pathlib import Path
from typing import List, Optional

from .. import model as M
from ..diagnostics import DuplicateSetting, MissingSetting, UnusedPreset
from ..series import load_series
from ..spans import Span
from . import network
from .context import Context
from .currency import check_currency
from .horizon import check_horizon
from .sources import series_spec
from .storage import check_preset_chain
from .study import check_studies
from .tree import Node


class Checker(Context):
    """The passes over the statements."""

    def run(self, stmts: List[Node]) -> Optional[M.Portfolio]:
        name, name_span = self.heading(stmts)
        currency = check_currency(stmts, self.sink)
        # First pass: declare every name so that order of declaration does not matter.
        for st in stmts:
            self.collect(st)
        found = self.build(stmts)
        routes = network.check_routes(self, found.pop("routes"), found["storages"])
        network.check_charging_sources(self, found["storages"], found["supplies"])
        series = {}
        if self.horizon is not None:
            series = load_series(self.specs, self.horizon, self.base_dir, self.sink, confine=self.confine)
            found["studies"] = check_studies(self, stmts, found, series)
        if self.sink.has_errors or self.horizon is None:
            return None
        if not found["connections"]:
            self.sink.add(MissingSetting, Span.whole_file(self.path), "the portfolio has no connection",
                          "note: declare one with 'connection NAME { export max ... }'")
            return None
        return M.Portfolio(name=name or Path(self.path).stem, path=self.path, horizon=self.horizon, series=series,
                           routes=tuple(routes), span=name_span or Span.whole_file(self.path), currency=currency,
                           **found)

    def heading(self, stmts: List[Node]):
        """The portfolio's name (and its span) and the horizon, each given at most once."""
        name = name_span = horizon = None
        for st in stmts:
            if st.key == "portfolio_decl":
                if name is not None:
                    self.sink.add(DuplicateSetting, st.span, "the portfolio is named twice",
                                  f"note: first named at {name_span}")
                else:
                    name, name_span = st.name.text, st.span
            elif st.key == "horizon":
                if horizon is not None:
                    self.sink.add(DuplicateSetting, st.span, "the horizon is declared twice",
                                  f"note: first declared at {horizon.span}")
                else:
                    horizon = st
        if horizon is None:
            self.sink.add(MissingSetting, Span.whole_file(self.path), "the portfolio has no horizon",
                          "note: add e.g. 'horizon start 2027-03-01T00:00 length 24 h step 1 h zone \"UTC\"'")
        else:
            self.horizon = check_horizon(horizon, self.units)
        return name, name_span

    def collect(self, st: Node) -> None:
        if st.key in ("price", "connection", "study"):
            self.names.declare(st.name, st.key)
        elif st.key == "preset":
            if self.names.declare(st.name, "preset"):
                self.presets[st.name.text] = st
        elif st.key == "site":
            self.names.declare(st.name, "site")
            for item in st.settings:
                if item.key in ("demand", "storage", "supply"):
                    self.names.declare(item.name, item.key)
                if item.key == "storage":
                    for s in item.settings:
                        if s.key == "supply":
                            self.names.declare(s.name, "supply")  # a storage's own supply

    def build(self, stmts: List[Node]) -> dict:
        """Second pass: the typed declarations, by the Portfolio field they go to."""
        found = {"connections": {}, "sites": {}, "storages": {}, "supplies": {}, "demands": {}, "routes": [],
                 "cap": None}
        for st in stmts:
            if st.key == "price":
                series_spec(self.units, self.specs, st.name, st.source, "price", st.span)
            elif st.key == "connection":
                c = network.check_connection(self, st)
                found["connections"][c.name] = c
            elif st.key == "cap":
                if found["cap"] is not None:
                    self.sink.add(DuplicateSetting, st.span, "'total' limits are declared twice")
                found["cap"] = network.check_cap(self, st)
            elif st.key == "site":
                network.check_site(self, st, found)
            elif st.key == "route":
                r = network.route_syntax(self, st)
                if r:
                    found["routes"].append(r)
            elif st.key == "preset":
                check_preset_chain(self, st)
        for pname, node in self.presets.items():
            if pname not in self.used_presets:
                self.sink.add(UnusedPreset, node.name.span, f"preset '{pname}' is not used by any storage")
        return found
