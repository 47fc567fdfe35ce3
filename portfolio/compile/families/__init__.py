"""Constraint families, one per module, run in this order by ``compile.build``.

Every module exposes ``build(ctx)``; its docstring states the math.  Modules
may publish expressions in ``ctx.expr`` for later ones (``routes`` publishes
what each storage receives and sends before ``storage_balance`` runs).
"""

from . import (direction, grid_limits, modes, objective, power_limits, ramp, routes, run_rest,
               site_balance, storage_balance, supplies)

FAMILIES = (
    power_limits,
    supplies,
    routes,
    storage_balance,
    site_balance,
    grid_limits,
    direction,
    modes,
    run_rest,
    ramp,
    objective,
)
