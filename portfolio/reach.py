"""What the assets behind a site or a connection can physically move, per step.

A site's net export can be no more than its storages' discharge limits plus
what its sources deliver to its site; its net import no more than its
storages' charge limits plus its demands.  A connection's reach is the sum of
its sites' (each within the site's own limits), within its own limits.

Any schedule can be written with export = max(net, 0) and import =
max(-net, 0) at every site and connection, so these bounds never cut off a
schedule: the compiler adds them to every site and connection flow (a
declared limit of 1e12 MW would otherwise reach the solver as it is, and
wreck its numerics) and uses them as the big-M of the direction rule.
"""

from __future__ import annotations

from typing import Tuple

import numpy as np

from .model import Portfolio
from .topology import Topology


def site_reach(p: Portfolio, topo: Topology, site: str) -> Tuple[np.ndarray, np.ndarray]:
    """(most it can export, most it can import) in MW per step, before its own limits."""
    n = p.horizon.steps
    out, inn = np.zeros(n), np.zeros(n)
    for k in topo.storages_at(site):
        s = p.storages[k]
        out += s.discharge_max
        inn += s.charge_max
    for i in topo.site_supplies(site):
        out += p.profile(p.supplies[i].profile)
    for d in topo.demands_at(site):
        inn += p.profile(p.demands[d].profile)
    return out, inn


def _within(values: np.ndarray, limit) -> np.ndarray:
    return values if limit is None else np.minimum(values, limit)


def connection_reach(p: Portfolio, topo: Topology, connection: str,
                     declared: bool = False) -> Tuple[np.ndarray, np.ndarray]:
    """(most it can export, most it can import) in MW per step.

    ``declared=False``: what the assets can move, whatever the limits (a bound
    that holds even while a limit is allowed to give, as when an infeasible
    portfolio is explained).  ``declared=True``: within the sites' and the
    connection's own limits too (tighter, for a model whose limits hold).
    """
    n = p.horizon.steps
    out, inn = np.zeros(n), np.zeros(n)
    for name in topo.sites_at(connection):
        site = p.sites[name]
        so, si = site_reach(p, topo, name)
        if declared:
            so, si = _within(so, site.export_max), _within(si, site.import_max)
        out += so
        inn += si
    if declared:
        c = p.connections[connection]
        out, inn = _within(out, c.export_max), _within(inn, c.import_max)
    return out, inn
