"""The network graph as the one topology owner, and expressions written once.

The answers of :class:`portfolio.topology.Topology` are checked against the
model's own declarations, read here directly (an independent re-derivation,
not the code under test); the shared expressions are checked on both of their
sides, row terms and value arrays, against each other.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))
import factory as F  # noqa: E402
import random_portfolios as RP  # noqa: E402

from portfolio.api import load  # noqa: E402
from portfolio.compile import build  # noqa: E402
from portfolio.compile import expressions as E  # noqa: E402
from portfolio.compile.context import Ctx  # noqa: E402
from portfolio.graph import build_graph, network  # noqa: E402
from portfolio.schedule import build_tables  # noqa: E402
from portfolio.topology import Topology  # noqa: E402

EXAMPLES = sorted((Path(__file__).parent.parent / "examples").glob("*/*.folio"))


def _portfolios():
    for path in EXAMPLES:
        yield path.stem, load(path).model
    for seed in range(6):
        yield f"linked{seed}", RP.linked(seed)
        yield f"single{seed}", RP.single_site(seed)


@pytest.mark.parametrize("name,p", list(_portfolios()), ids=lambda x: x if isinstance(x, str) else "")
def test_the_graph_as_data_is_the_networkx_graph(name, p):
    # lint reads the graph as data (no networkx import); pictures and the API
    # get networkx's graph: the same nodes in order, the same keyed edges with
    # their attributes, and each node's out-edges in the same order
    net, g = network(p), build_graph(p)
    assert list(net.nodes.items()) == list(g.nodes(data=True))
    assert net.edges == {(u, v, k): a for u, v, k, a in g.edges(keys=True, data=True)}
    for n in net.nodes:
        assert [(v, k) for u, v, k, _ in net.edge_list() if u == n] == \
            [(v, k) for _, v, k in g.out_edges(n, keys=True)]
    assert net.topology() == Topology.from_graph(g)


@pytest.mark.parametrize("name,p", list(_portfolios()), ids=lambda x: x if isinstance(x, str) else "")
@pytest.mark.parametrize("read", ["data", "networkx"])
def test_topology_answers_what_the_declarations_say(name, p, read):
    topo = network(p).topology() if read == "data" else Topology.from_graph(build_graph(p))
    assert topo.storages == tuple(p.storages) and topo.sites == tuple(p.sites)
    assert topo.supplies == tuple(p.supplies) and topo.demands == tuple(p.demands)
    assert topo.routes == tuple(p.routes)
    for s in p.sites.values():
        assert topo.storages_at(s.name) == tuple(k for k, x in p.storages.items() if x.site == s.name)
        assert topo.demands_at(s.name) == tuple(d for d, x in p.demands.items() if x.site == s.name)
        assert topo.site_supplies(s.name) == tuple(
            i for i, x in p.supplies.items() if x.site == s.name and "site" in x.targets)
        assert topo.connection_of(s.name) == s.connection
    for c in p.connections:
        assert topo.sites_at(c) == tuple(s for s, x in p.sites.items() if x.connection == c)
    for k, s in p.storages.items():
        assert topo.site_of(k) == s.site
        assert topo.supplies_into(k) == tuple(i for i, x in p.supplies.items() if k in x.targets)
        assert topo.routes_into(k) == tuple(r for r in p.routes if r.target == k)
        assert topo.routes_out_of(k) == tuple(r for r in p.routes if r.source == k)
        assert topo.natural_supply_of(k) == s.supply
        if s.supply is not None:
            assert topo.site_of(s.supply) == s.site
    for i, x in p.supplies.items():
        assert topo.supply_targets(i) == tuple(t for t in x.targets if t != "site")
        assert topo.feeds_site(i) == ("site" in x.targets)


def test_unknown_names_get_empty_answers():
    topo = Topology.from_graph(build_graph(RP.single_site(0)))
    assert topo.storages_at("nowhere") == () and topo.sites_at("nowhere") == ()
    assert topo.connection_of("nowhere") is None and topo.site_of("nowhere") is None
    assert topo.supplies_into("nowhere") == () and topo.routes_into("nowhere") == ()


def test_a_graph_with_dangling_names_still_indexes():
    """Lint builds the graph of a portfolio with errors too (here a supply into a
    store nobody declared): the index leaves the undeclared name out, and the
    topology checks run on it without failing."""
    from portfolio.diagnostics import Sink
    from portfolio.graph import check_topology

    p = F.portfolio(2, storages=[F.storage("cell")],
                    supplies=[F.supply("pv", "sun", targets=("ghost", "cell"))],
                    series_list=[F.series("sun", [1.0, 2.0])])
    g = network(p)
    topo = g.topology()
    assert topo.supply_targets("pv") == ("cell",) and topo.kind("ghost") is None
    check_topology(p, g, Sink())


@pytest.mark.parametrize("seed", range(4))
def test_expressions_give_the_same_numbers_as_rows_and_as_values(seed):
    """Each shared expression, read as row terms at every step and as value arrays,
    gives the same numbers on one random vector."""
    p = RP.linked(seed)
    built = build(p)
    ctx = Ctx(p, topology=built.topology)
    ctx.var_blocks, ctx._col_of = built.var_blocks, {
        n: {a: built.matrix.var_ranges[n][0] + pos for a, pos in blocks.items()}
        for n, blocks in built.var_blocks.items() if n in built.matrix.var_ranges}
    x = np.random.default_rng(seed).uniform(0, 2, built.matrix.num_col)
    values = {n: x[a:z] for n, (a, z) in built.matrix.var_ranges.items()}
    acc = E.Values(built, values)
    topo = built.topology

    def from_rows(make):
        return np.array([sum(c * x[v] for c, v in make(t)) for t in range(built.steps)])

    checked = 0
    for k in p.storages:
        parts = E.total_charge(topo, k)
        np.testing.assert_allclose(acc.of(parts), from_rows(lambda t: E.terms(ctx, parts, t)), atol=1e-12)
        checked += 1
    for s in p.sites:
        parts = E.meter("site", s)
        np.testing.assert_allclose(acc.of(parts), from_rows(lambda t: E.terms(ctx, parts, t)), atol=1e-12)
    for r in p.routes:
        flow = acc.route_flow(p, r)
        np.testing.assert_allclose(flow * built.step_hours,
                                   from_rows(lambda t: E.route_out_terms(ctx, r, t)), atol=1e-12)
        arriving = E.route_arriving_mwh(r, flow, built.step_hours)
        rows = np.array([sum(c * x[v] for c, v in E.route_arriving_terms(ctx, r, t)[0])
                         + E.route_arriving_terms(ctx, r, t)[1] for t in range(built.steps)])
        np.testing.assert_allclose(arriving, rows, atol=1e-12)
        checked += 1
    assert checked > len(p.storages)       # the seed has routes


def test_unknown_variable_family_is_an_error_not_zeros():
    p = RP.single_site(0)
    built = build(p)
    m = built.matrix
    values = {n: np.ones(z - a) for n, (a, z) in m.var_ranges.items()}
    k = next(iter(p.storages))
    assert built.array(values, E.SOC, k).sum() == built.steps          # a real family reads
    with pytest.raises(E.UnknownVariable):
        built.array(values, "charge_sit", k)                             # a misspelt one raises
    with pytest.raises(E.UnknownVariable):
        E.Values(built, values)("sco", k)
    # a declared family without entries for this asset reads as zeros
    assert not built.array(values, E.TRANSFER, "no such route").any()
    tables, _ = build_tables(built, values)
    assert set(tables) >= set(p.storages)


def test_two_routes_of_one_kind_between_the_same_stores_are_both_in_the_graph():
    """Edges are keyed by route kind; a second transfer between the same two stores
    must not replace the first (the tables and the balances would lose it)."""
    a, b = F.storage("a"), F.storage("b")
    routes = [F.route("ab1", "a", "b", kind="transfer"), F.route("ab2", "a", "b", kind="transfer")]
    p = F.portfolio(2, storages=[a, b], routes=routes)
    g = build_graph(p)
    assert sorted(k for _, _, k in g.edges("a", keys=True) if k.startswith("transfer")) == [
        "transfer", "transfer:ab2"]
    topo = Topology.from_graph(g)
    assert [r.name for r in topo.routes_out_of("a")] == ["ab1", "ab2"]
    assert [r.name for r in topo.routes_into("b")] == ["ab1", "ab2"]
