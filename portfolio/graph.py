"""Stage 3: checked model -> network graph, and the topology checks.

:func:`network` builds the graph as plain data (:class:`Network`: nodes with
attributes, keyed edges in the order made), so checking a file needs no
graph library; :func:`build_graph` gives the same graph as a
:class:`networkx.MultiDiGraph` (pictures, the API's ``.graph()``, cycle
search).  The graph's nodes are the portfolio's connections,
sites, storages, supplies (including a reservoir's natural supply) and demands,
and whose edges are every path energy or water can take.  Edge keys name the
path (``export``, ``import``, ``charge``, ``discharge``, ``feed``,
``serve``, ``natural``, and the route kinds: ``release``, ``spill``, ``transfer``
and ``pump``, the last from the lower store to the upper one, whose charge
lifts the water; a second route of one kind
between the same two stores is keyed ``kind:name``).  Every node and edge carries
``span``: the declaration it came from.  Membership is on the nodes: a
storage's, supply's and demand's ``site``, a site's ``connection``; a route
edge carries its declaration (``route``) and its place among them (``order``).

Nothing else reads topology from the model: :class:`portfolio.topology.Topology`
indexes this graph once, and the checks here, the compiler, the tables and the
pictures ask it.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Dict, Iterator, Optional, Tuple

import numpy as np

from . import model as M
from .diagnostics import (EmptySite, NoPathToGrid, NowhereToGo, Sink, SupplyTargetElsewhere,
                          UnusedConnection, ZeroDelayCycle)
from .topology import Topology

if TYPE_CHECKING:
    import networkx as nx


def _open(limit: Optional[float]) -> bool:
    return limit is None or limit > 0


@dataclass
class Network:
    """The network graph as data: what networkx's ``MultiDiGraph`` would hold,
    made by the same calls (``add_node`` merges attributes, ``add_edge`` adds a
    missing end as a bare node and replaces an edge with the same key)."""

    name: str
    nodes: Dict[str, dict] = field(default_factory=dict)
    edges: Dict[Tuple[str, str, str], dict] = field(default_factory=dict)

    def add_node(self, n: str, **attrs) -> None:
        self.nodes.setdefault(n, {}).update(attrs)

    def add_edge(self, u: str, v: str, key: str, **attrs) -> None:
        self.nodes.setdefault(u, {})
        self.nodes.setdefault(v, {})
        self.edges.setdefault((u, v, key), {}).update(attrs)

    def has_edge(self, u: str, v: str, key: str) -> bool:
        return (u, v, key) in self.edges

    def edge_list(self) -> Iterator[Tuple[str, str, str, dict]]:
        """(u, v, key, attributes) in the order the edges were made."""
        for (u, v, key), a in self.edges.items():
            yield u, v, key, a

    def to_networkx(self) -> "nx.MultiDiGraph":
        import networkx as nx

        g = nx.MultiDiGraph(name=self.name)
        g.add_nodes_from(self.nodes.items())
        for u, v, key, a in self.edge_list():
            g.add_edge(u, v, key=key, **a)
        return g

    def topology(self) -> Topology:
        return Topology.from_parts(self.nodes.items(), self.edge_list())


def build_graph(p: M.Portfolio) -> "nx.MultiDiGraph":
    """The network graph as a :class:`networkx.MultiDiGraph`."""
    return network(p).to_networkx()


def network(p: M.Portfolio) -> Network:
    g = Network(name=p.name)
    for c in p.connections.values():
        g.add_node(c.name, kind="connection", span=c.span, decl=c)
    for s in p.sites.values():
        g.add_node(s.name, kind="site", span=s.span, decl=s, connection=s.connection)
        c = p.connections.get(s.connection)
        if c is None:
            continue
        if _open(s.export_max) and _open(c.export_max):
            g.add_edge(s.name, c.name, key="export", span=s.where("export_max"), limit=s.export_max)
        if _open(s.import_max) and _open(c.import_max):
            g.add_edge(c.name, s.name, key="import", span=s.where("import_max"), limit=s.import_max)
    for k in p.storages.values():
        g.add_node(k.name, kind="storage", span=k.span, decl=k, storage_kind=k.kind, site=k.site)
        if k.discharge_max > 0:
            g.add_edge(k.name, k.site, key="discharge", span=k.where("discharge_max"), limit=k.discharge_max)
        if k.charge_max > 0 and k.charge_sources is None:   # charging only from sources: no draw from the site
            g.add_edge(k.site, k.name, key="charge", span=k.where("charge_max"), limit=k.charge_max)
        if k.supply:
            g.add_node(k.supply, kind="supply", span=k.where("supply"), decl=None, natural=True)
            g.add_edge(k.supply, k.name, key="natural", span=k.where("supply"), limit=None)
    for i in p.supplies.values():
        g.add_node(i.name, kind="supply", span=i.span, decl=i, natural=False, site=i.site)
        for t in i.targets:
            dest = i.site if t == "site" else t
            limit = None if t == "site" else p.storages[t].charge_max if t in p.storages else None
            g.add_edge(i.name, dest, key="feed", span=i.where("targets"), limit=limit)
    for d in p.demands.values():
        g.add_node(d.name, kind="demand", span=d.span, decl=d, site=d.site)
        g.add_edge(d.site, d.name, key="serve", span=d.span, limit=None)
    for order, r in enumerate(p.routes):
        # keyed by kind; a second route of one kind between the same stores keeps its own edge
        key = r.kind if not g.has_edge(r.source, r.target, r.kind) else f"{r.kind}:{r.name}"
        g.add_edge(r.source, r.target, key=key, span=r.span, limit=r.max_mw,
                   delay=r.delay_steps, factor=r.factor, route=r, order=order)
    return g


def check_topology(p: M.Portfolio, g: Network, sink: Sink) -> None:
    topo = g.topology()
    # Supplies sent into a storage at another site.
    for i in p.supplies.values():
        for t in topo.supply_targets(i.name):
            there = topo.site_of(t)
            if there != i.site:
                sink.add(SupplyTargetElsewhere, i.where("targets"),
                         f"supply '{i.name}' at site '{i.site}' cannot flow into '{t}', which is at site "
                         f"'{there}'", "note: a supply feeds its own site or storages there; use a route between storages")
    # Reachability: walk backwards once from every connection and demand (a battery
    # behind an import-only connection may still serve its site's demand).
    pred: Dict[str, list] = {}
    for u, v, _, _ in g.edge_list():
        pred.setdefault(v, []).append(u)
    reach = set()
    todo = deque(n for n, a in g.nodes.items() if a.get("kind") in ("connection", "demand"))
    reach.update(todo)
    while todo:
        n = todo.popleft()
        for u in pred.get(n, ()):
            if u not in reach:
                reach.add(u)
                todo.append(u)
    for k in p.storages.values():
        if k.name not in reach:
            sink.add(NoPathToGrid, k.span, f"storage '{k.name}' has no path to any connection or demand: "
                     "what it holds can never be used",
                     "note: give it a 'discharge max', a route to a storage that can discharge, or open its site's export")
    for n, a in g.nodes.items():
        if a.get("kind") == "supply" and n not in reach:
            sink.add(NoPathToGrid, a["span"], f"supply '{n}' has no path to any connection or demand")
    _check_zero_delay_cycles(g, sink)
    # Connections and sites with nothing to do.
    for c in p.connections.values():
        if not topo.sites_at(c.name):
            sink.add(UnusedConnection, c.span, f"connection '{c.name}' has no site attached")
    for s in p.sites.values():
        if not topo.is_busy(s.name):
            sink.add(EmptySite, s.span, f"site '{s.name}' has no storage, supply or demand")
    _check_nowhere_to_go(p, topo, sink)


def _check_zero_delay_cycles(g: Network, sink: Sink) -> None:
    # A pump edge is left out: what it lifts is paid for in grid energy each time round
    # (the upper store's charge), so a pumped pair with a release back is no free loop.
    zero_delay = [(u, v, a["route"]) for u, v, _, a in g.edge_list()
                  if "route" in a and a["delay"] == 0 and a["route"].kind != M.ROUTE_PUMP]
    if len(zero_delay) < 2:
        return                   # a cycle through two or more stores needs two routes
    import networkx as nx

    zero = nx.DiGraph()
    for u, v, r in zero_delay:
        zero.add_edge(u, v, route=r)
    for comp in nx.strongly_connected_components(zero):
        if len(comp) < 2:
            continue
        cyc = nx.find_cycle(zero.subgraph(comp))
        routes = [zero.edges[u, v]["route"] for u, v in cyc]
        first = min(routes, key=lambda r: r.span)
        path = " -> ".join([routes[0].source] + [r.target for r in routes])
        sink.add(ZeroDelayCycle, first.span, f"routes form a cycle with zero total delay: {path}",
                 *[f"note: route at {r.span}" for r in routes],
                 "note: give at least one route in the cycle a delay of a whole step or more")


def _check_nowhere_to_go(p: M.Portfolio, topo: Topology, sink: Sink) -> None:
    """Warn when a non-curtailable supply can peak above what its targets can take."""
    for i in p.supplies.values():
        if i.curtail_allowed or i.profile not in p.series:
            continue
        peak = float(np.max(p.profile(i.profile))) if p.horizon.steps else 0.0
        if peak <= 0:
            continue
        absorb = 0.0
        site = p.sites.get(i.site)
        for t in i.targets:
            if t == "site" and site is not None:
                conn = p.connections.get(topo.connection_of(site.name))
                limits = [x for x in (site.export_max, conn.export_max if conn else None) if x is not None]
                absorb += min(limits) if limits else float("inf")
                absorb += sum(p.storages[k].charge_max for k in topo.storages_at(site.name))
                absorb += sum(float(np.min(p.profile(p.demands[d].profile))) for d in topo.demands_at(site.name))
            elif t in topo.supply_targets(i.name):
                absorb += p.storages[t].charge_max
        if peak > absorb + 1e-9:
            sink.add(NowhereToGo, i.span,
                     f"supply '{i.name}' peaks at {peak:.6g} MW but its targets can take at most {absorb:.6g} MW, "
                     "and it may not be curtailed: dispatch is likely infeasible",
                     "note: add 'curtail allowed' to the supply, or raise the limits it flows into")
