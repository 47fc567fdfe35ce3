"""The network's topology as a read-only index, read once from the network graph.

The graph (:mod:`portfolio.graph`) is the one owner of who is where and what
flows into what.  :meth:`Topology.from_graph` reads it once into plain
tuples, so the compiler's families, the graph's own checks, the schedule
tables, :mod:`portfolio.reach` and the pictures ask the same questions the
same way:

* membership: ``storages_at(site)``, ``supplies_at(site)``, ``demands_at(site)``,
  ``sites_at(connection)``, ``connection_of(site)``, ``site_of(asset)``;
* flows: ``supplies_into(storage)`` (supplies fed straight into a store),
  ``supply_targets(supply)`` (the stores a supply feeds), ``feeds_site(supply)``,
  ``site_supplies(site)`` (supplies delivering to a site),
  ``routes_into(storage)``, ``routes_out_of(storage)``, ``routes``,
  ``natural_supply_of(storage)``, ``pump_into(storage)`` (the pump route whose
  water a store's charge lifts).

Every answer lists names (routes: :class:`~portfolio.model.Route`
declarations) in declaration order, which keeps the compiled matrix and
every sum over assets in a fixed order.  A name the graph does not know
gives an empty answer (the checks run on portfolios with errors too).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from types import MappingProxyType
from typing import TYPE_CHECKING, Dict, Iterable, List, Mapping, Optional, Tuple

from .model import ROUTE_PUMP

if TYPE_CHECKING:
    import networkx as nx

Names = Tuple[str, ...]
_EMPTY: Names = ()

# node kinds of the network graph
CONNECTION, SITE, STORAGE, SUPPLY, DEMAND = "connection", "site", "storage", "supply", "demand"
# edge keys that are not routes
FEED, NATURAL, SERVE = "feed", "natural", "serve"


def _freeze(d: Dict[str, List]) -> Mapping[str, tuple]:
    return MappingProxyType({k: tuple(v) for k, v in d.items()})


@dataclass(frozen=True)
class Topology:
    """Who is where and what flows into what (see the module docstring)."""

    connections: Names = ()
    sites: Names = ()
    storages: Names = ()
    supplies: Names = ()            # declared supplies (not a store's natural supply)
    demands: Names = ()
    routes: tuple = ()              # Route declarations, in declaration order
    _kind: Mapping[str, str] = field(default_factory=dict, repr=False)
    _site: Mapping[str, str] = field(default_factory=dict, repr=False)
    _connection: Mapping[str, str] = field(default_factory=dict, repr=False)
    _at_site: Mapping[str, Mapping[str, Names]] = field(default_factory=dict, repr=False)
    _sites_at: Mapping[str, Names] = field(default_factory=dict, repr=False)
    _into: Mapping[str, Names] = field(default_factory=dict, repr=False)
    _targets: Mapping[str, Names] = field(default_factory=dict, repr=False)
    _to_site: frozenset = frozenset()
    _routes_in: Mapping[str, tuple] = field(default_factory=dict, repr=False)
    _routes_out: Mapping[str, tuple] = field(default_factory=dict, repr=False)
    _natural: Mapping[str, str] = field(default_factory=dict, repr=False)

    @classmethod
    def from_graph(cls, g: "nx.MultiDiGraph") -> "Topology":
        return cls.from_parts(g.nodes(data=True), g.edges(keys=True, data=True))

    @classmethod
    def from_parts(cls, node_items: Iterable[Tuple[str, dict]],
                   edge_items: Iterable[Tuple[str, str, str, dict]]) -> "Topology":
        """From the graph's nodes ``(name, attributes)`` and edges
        ``(u, v, key, attributes)``, each in the order they were made."""
        edges = list(edge_items)
        out_of: Dict[str, List[Tuple[str, str]]] = {}
        into_node: Dict[str, List[Tuple[str, str]]] = {}
        for u, v, key, _ in edges:
            out_of.setdefault(u, []).append((v, key))
            into_node.setdefault(v, []).append((u, key))
        nodes = {kind: [] for kind in (CONNECTION, SITE, STORAGE, SUPPLY, DEMAND)}
        kind_of, site_of, conn_of, natural = {}, {}, {}, {}
        for n, a in node_items:
            kind = a.get("kind")
            if kind is None:
                continue          # a name a declaration refers to but nobody declared
            kind_of[n] = kind
            if kind == SUPPLY and a.get("natural"):
                continue          # a store's natural supply: found through its edge below
            nodes[kind].append(n)
            if a.get("site") is not None:
                site_of[n] = a["site"]
            if kind == SITE and a.get("connection") is not None:
                conn_of[n] = a["connection"]
        at_site: Dict[str, Dict[str, List[str]]] = {}
        for kind in (STORAGE, SUPPLY, DEMAND):
            for n in nodes[kind]:
                if n in site_of:
                    at_site.setdefault(site_of[n], {}).setdefault(kind, []).append(n)
        sites_at: Dict[str, List[str]] = {}
        for s in nodes[SITE]:
            if s in conn_of:
                sites_at.setdefault(conn_of[s], []).append(s)
        into: Dict[str, List[str]] = {}
        targets: Dict[str, List[str]] = {}
        to_site = set()
        for i in nodes[SUPPLY]:
            for dest, key in out_of.get(i, ()):
                if key != FEED:
                    continue
                if kind_of.get(dest) == STORAGE:
                    targets.setdefault(i, []).append(dest)
                elif kind_of.get(dest) == SITE:
                    to_site.add(i)
        for i in nodes[SUPPLY]:                    # per store, in declaration order of the supplies
            for k in targets.get(i, ()):
                if i not in into.get(k, ()):
                    into.setdefault(k, []).append(i)
        route_edges = sorted(((a["order"], a["route"]) for *_, a in edges if "route" in a),
                             key=lambda x: x[0])
        routes = tuple(r for _, r in route_edges)
        routes_in: Dict[str, List] = {}
        routes_out: Dict[str, List] = {}
        for r in routes:
            routes_in.setdefault(r.target, []).append(r)
            routes_out.setdefault(r.source, []).append(r)
        for k in nodes[STORAGE]:
            for u, key in into_node.get(k, ()):
                if key == NATURAL:
                    natural[k] = u
        return cls(
            connections=tuple(nodes[CONNECTION]), sites=tuple(nodes[SITE]),
            storages=tuple(nodes[STORAGE]), supplies=tuple(nodes[SUPPLY]),
            demands=tuple(nodes[DEMAND]), routes=routes,
            _kind=MappingProxyType(kind_of), _site=MappingProxyType(site_of),
            _connection=MappingProxyType(conn_of),
            _at_site=MappingProxyType({s: _freeze(d) for s, d in at_site.items()}),
            _sites_at=_freeze(sites_at), _into=_freeze(into), _targets=_freeze(targets),
            _to_site=frozenset(to_site), _routes_in=_freeze(routes_in),
            _routes_out=_freeze(routes_out), _natural=MappingProxyType(natural))

    # -- membership ---------------------------------------------------------------
    def kind(self, name: str) -> Optional[str]:
        """The node kind of ``name`` (connection, site, storage, supply, demand), or None."""
        return self._kind.get(name)

    def storages_at(self, site: str) -> Names:
        return self._at_site.get(site, {}).get(STORAGE, _EMPTY)

    def supplies_at(self, site: str) -> Names:
        """Every declared supply at ``site``, whatever its targets."""
        return self._at_site.get(site, {}).get(SUPPLY, _EMPTY)

    def demands_at(self, site: str) -> Names:
        return self._at_site.get(site, {}).get(DEMAND, _EMPTY)

    def sites_at(self, connection: str) -> Names:
        return self._sites_at.get(connection, _EMPTY)

    def connection_of(self, site: str) -> Optional[str]:
        """The connection a site is declared on (None when it names no known one)."""
        return self._connection.get(site)

    def site_of(self, asset: str) -> Optional[str]:
        """The site of a storage, supply or demand; a natural supply's is its store's."""
        if asset in self._site:
            return self._site[asset]
        for k, n in self._natural.items():
            if n == asset:
                return self._site.get(k)
        return None

    def is_busy(self, site: str) -> bool:
        """Whether a site has any storage, supply or demand."""
        return bool(self._at_site.get(site))

    # -- flows --------------------------------------------------------------------
    def supplies_into(self, storage: str) -> Names:
        """The supplies fed straight into ``storage`` (their power counts as its charge)."""
        return self._into.get(storage, _EMPTY)

    def supply_targets(self, supply: str) -> Names:
        """The stores ``supply`` feeds straight into, in the order written."""
        return self._targets.get(supply, _EMPTY)

    def feeds_site(self, supply: str) -> bool:
        """Whether ``supply`` delivers power to its site."""
        return supply in self._to_site

    def site_supplies(self, site: str) -> Names:
        """The supplies at ``site`` that deliver power to it."""
        return tuple(i for i in self.supplies_at(site) if i in self._to_site)

    def routes_into(self, storage: str) -> tuple:
        return self._routes_in.get(storage, ())

    def routes_out_of(self, storage: str) -> tuple:
        return self._routes_out.get(storage, ())

    def pump_into(self, storage: str):
        """The pump route into ``storage`` (its charge lifts that route's water), or None."""
        for r in self.routes_into(storage):
            if r.kind == ROUTE_PUMP:
                return r
        return None

    def natural_supply_of(self, storage: str) -> Optional[str]:
        """The node name of a store's natural supply (its series), or None."""
        return self._natural.get(storage)
