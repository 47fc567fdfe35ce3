"""Compile a checked :class:`~portfolio.model.Portfolio` into a Pyomo MILP.

``build(p)`` creates the decision variables, then runs every constraint
family module of :mod:`portfolio.compile.families` in a fixed order.  Each
module adds rows and bounds through the :class:`~.context.Ctx` and registers
the :class:`~.context.Origin` (source Span plus description) of every limit it
encodes, so an infeasibility can be traced back to a line of the user's file.

Variable families (all >= 0, MW unless noted; index ``(asset..., t)``):

=============  =========================================================
charge_site    power a storage draws from its site bus
inflow_to      ``(inflow, storage, t)``: inflow power fed straight into a store
used_bus       inflow power delivered to its site bus
curtailed      inflow power not taken
discharge      storage output to its site bus (grid side)
soc            stored energy at the END of step t (MWh)
spill          spilled power (stored MWh per step / dt)
transfer       power moved along a transfer route
site_import    site bus import / export through its connection
site_export
conn_import    connection import / export (what the meter sees, net)
conn_export
=============  =========================================================

Binaries and start/stop variables are added by the modes, run_rest and
direction families where a rule needs them.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Dict, Hashable, List, Tuple

import numpy as np
import pyomo.environ as pe

from ..model import Portfolio
from .context import Ctx, Origin, lin  # noqa: F401  (re-exported)
from .families import FAMILIES

VARIANTS = ("tight", "plain")


@dataclass
class Built:
    """A compiled portfolio: the Pyomo model plus the maps needed to read it."""

    model: pe.ConcreteModel
    portfolio: Portfolio
    variant: str
    relax: bool
    steps: int
    step_hours: float
    var_keys: Dict[str, List[tuple]]
    var_blocks: Dict[str, Dict[Hashable, int]]
    binary_vars: List[str]
    origins: Dict[str, List[Origin]]
    """family (Pyomo component name, or bound family) -> origins it encodes."""
    family_kind: Dict[str, Tuple[str, str]]
    """family -> ("rows", "") or ("bounds", variable family it bounds)."""
    slack_info: List[tuple] = field(default_factory=list)
    """relax mode: per slack variable (family, origin index, side, row key)."""
    expr: Dict[str, object] = field(default_factory=dict, repr=False)
    build_seconds: float = 0.0

    def var(self, name: str):
        return getattr(self.model, name, None)

    def array(self, values: Dict[str, np.ndarray], name: str, asset: Hashable) -> np.ndarray:
        """The T values of ``name[asset, :]`` from a solution's value arrays.

        Absent variable families or assets give zeros.
        """
        blocks = self.var_blocks.get(name)
        if blocks is None or asset not in blocks or name not in values:
            return np.zeros(self.steps)
        start = blocks[asset]
        return values[name][start:start + self.steps]

    @property
    def has_binaries(self) -> bool:
        return any(self.var(n) is not None for n in self.binary_vars)


def _variables(ctx: Ctx) -> None:
    p = ctx.p
    st = list(p.storages.values())
    ctx.add_var("charge_site", [s.name for s in st if s.charge_max > 0])
    ctx.add_var("discharge", [s.name for s in st if s.discharge_max > 0])
    ctx.add_var("soc", [s.name for s in st])
    ctx.add_var("spill", [s.name for s in st if s.spill_allowed or s.inflow is not None])
    ins = list(p.inflows.values())
    ctx.add_var("inflow_to", [(i.name, k) for i in ins for k in i.targets if k != "site"])
    ctx.add_var("used_bus", [i.name for i in ins if "site" in i.targets])
    ctx.add_var("curtailed", [i.name for i in ins])
    ctx.add_var("transfer", [r.name for r in p.routes if r.kind == "transfer"])
    ctx.add_var("site_import", list(p.sites))
    ctx.add_var("site_export", list(p.sites))
    ctx.add_var("conn_import", list(p.connections))
    ctx.add_var("conn_export", list(p.connections))
    # storage -> inflows feeding it directly
    direct: Dict[str, List[str]] = {k: [] for k in p.storages}
    for i in ins:
        for k in i.targets:
            if k != "site" and k in direct:
                direct[k].append(i.name)
    ctx.expr["direct_inflows"] = direct


def build(p: Portfolio, variant: str = "tight", relax: bool = False) -> Built:
    """Compile ``p``.  ``relax=True`` adds a slack to every limit and rule and
    minimises their total (used to explain an infeasible portfolio)."""
    import gc
    import time

    t0 = time.perf_counter()
    # Pyomo creates millions of small objects and no garbage cycles worth
    # collecting while building: pausing the cyclic collector saves ~1/3.
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        ctx = Ctx(p, variant=variant, relax=relax)
        _variables(ctx)
        for module in FAMILIES:
            module.build(ctx)
        ctx.materialize()
    finally:
        if was_enabled:
            gc.enable()
    built = Built(
        model=ctx.m, portfolio=p, variant=variant, relax=relax,
        steps=ctx.T, step_hours=ctx.dt,
        var_keys=ctx.var_keys, var_blocks=ctx.var_blocks, binary_vars=list(ctx.binary_vars),
        origins={name: list(f.origins) for name, f in ctx.families.items()},
        family_kind={name: (f.kind, f.var or "") for name, f in ctx.families.items()},
        slack_info=ctx.slack_info, expr=ctx.expr,
    )
    built.build_seconds = time.perf_counter() - t0
    return built
