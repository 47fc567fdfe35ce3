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


def site_reach(p: Portfolio, site: str) -> Tuple[np.ndarray, np.ndarray]:
    """(most it can export, most it can import) in MW per step, before its own limits."""
    n = p.horizon.steps
    out, inn = np.zeros(n), np.zeros(n)
    for s in p.storages.values():
        if s.site == site:
            out += s.discharge_max
            inn += s.charge_max
    for f in p.supplies.values():
        if f.site == site and "site" in f.targets:
            out += p.profile(f.profile)
    for d in p.demands.values():
        if d.site == site:
            inn += p.profile(d.profile)
    return out, inn


def _within(values: np.ndarray, limit) -> np.ndarray:
    return values if limit is None else np.minimum(values, limit)


def connection_reach(p: Portfolio, connection: str,
                     declared: bool = False) -> Tuple[np.ndarray, np.ndarray]:
    """(most it can export, most it can import) in MW per step.

    ``declared=False``: what the assets can move, whatever the limits (a bound
    that holds even while a limit is allowed to give, as when an infeasible
    portfolio is explained).  ``declared=True``: within the sites' and the
    connection's own limits too (tighter, for a model whose limits hold).
    """
    n = p.horizon.steps
    out, inn = np.zeros(n), np.zeros(n)
    for name, site in p.sites.items():
        if site.connection == connection:
            so, si = site_reach(p, name)
            if declared:
                so, si = _within(so, site.export_max), _within(si, site.import_max)
            out += so
            inn += si
    if declared:
        c = p.connections[connection]
        out, inn = _within(out, c.export_max), _within(inn, c.import_max)
    return out, inn
