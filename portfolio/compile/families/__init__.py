"""Constraint families, one per module, run in this order by ``compile.build``.

Every module exposes ``build(ctx)``; its docstring states the math.
Quantities several families share (total charge, route flows, meter flows)
come from :mod:`portfolio.compile.expressions`, and who is where from
``ctx.topo``, so the order below matters only where a module publishes
something in ``ctx.expr`` for a later one (``modes`` publishes its binaries
for ``run_rest``).
"""

from . import (cycles, direction, grid_limits, modes, objective, power_limits, pumping, ramp, routes, run_rest,
               site_balance, storage_balance, supplies)

FAMILIES = (
    power_limits,
    supplies,
    routes,
    pumping,
    storage_balance,
    site_balance,
    grid_limits,
    direction,
    modes,
    run_rest,
    ramp,
    cycles,
    objective,
)
