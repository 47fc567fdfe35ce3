"""Compile a checked :class:`~portfolio.model.Portfolio` into a MILP.

``build(p)`` creates the decision variables, then runs every constraint
family module of :mod:`portfolio.compile.families` in a fixed order.  Each
module adds rows and bounds through the :class:`~.context.Ctx` and registers
the :class:`~.context.Origin` (source Span plus description) of every limit it
encodes, so an infeasibility can be traced back to a line of the user's file.

The result holds the MILP twice over: as sparse arrays
(:class:`~.arrays.Matrix`, what the default solver path passes to HiGHS)
and as a Pyomo model (``Built.model``, one component per variable and row
family), which is made from the arrays the first time it is asked for.

Variable families (all >= 0, MW unless noted; index ``(asset..., t)``):

=============  =========================================================
charge_site    power a storage draws from its site
supply_to      ``(supply, storage, t)``: supply power fed straight into a store
supply_site    supply power delivered to its site
curtailed      supply power not taken
discharge      storage output to its site (grid side)
soc            stored energy at the END of step t (MWh)
spill          spilled power (stored MWh per step / dt)
transfer       power moved along a transfer route
pumped         a pump route's water leaving its lower store (its stored MWh per step / dt)
site_import    site import / export through its connection
site_export
conn_import    connection import / export (what the meter sees, net)
conn_export
=============  =========================================================

Binaries and start/stop variables are added by the modes, run_rest and
direction families where a rule needs them.

Who is where and what flows into what comes from the network graph, read
once into ``ctx.topo`` (:class:`portfolio.topology.Topology`); quantities
the rows and the schedule tables share (total charge, route flows, meter
flows) are defined once in :mod:`.expressions`.
"""

from __future__ import annotations

import gc
import time
from contextlib import contextmanager
from dataclasses import dataclass, field, replace
from typing import Dict, Hashable, List, Optional, Sequence, Tuple

import numpy as np

from ..graph import network
from ..model import Portfolio
from ..topology import Topology
from . import expressions as E
from .arrays import Matrix  # noqa: F401  (re-exported)
from .context import Ctx, Origin  # noqa: F401  (re-exported)
from .families import FAMILIES


@dataclass
class Built:
    """A compiled portfolio: its matrix, the Pyomo model, and the maps needed to read them."""

    matrix: Matrix
    portfolio: Portfolio
    variant: str
    relax: bool
    steps: int
    step_hours: float
    var_keys: Dict[str, Sequence]           # family -> its keys (*asset, t) (arrays.Keys)
    var_blocks: Dict[str, Dict[Hashable, int]]
    binary_vars: List[str]
    origins: Dict[str, List[Origin]]
    """family (Pyomo component name, or bound family) -> origins it encodes."""
    family_kind: Dict[str, Tuple[str, str]]
    """family -> ("rows", "") or ("bounds", variable family it bounds)."""
    slack_info: List[tuple] = field(default_factory=list)
    """relax mode: per slack variable (family, origin index, side, row key)."""
    expr: Dict[str, object] = field(default_factory=dict, repr=False)
    topology: Optional[Topology] = field(default=None, repr=False)
    build_seconds: float = 0.0
    _model: object = field(default=None, init=False, repr=False)
    _columns: Optional[list] = field(default=None, init=False, repr=False)
    _values: Optional[np.ndarray] = field(default=None, init=False, repr=False)

    @property
    def model(self):
        """The Pyomo ``ConcreteModel`` (made from :attr:`matrix` on first use;
        holds the last solution's values when there is one)."""
        if self._model is None:
            from .pyomo_model import to_pyomo
            with _gc_paused():
                self._model, self._columns = to_pyomo(
                    self.matrix, self.portfolio.name or "portfolio", self._values)
        return self._model

    def load_solution(self, x: np.ndarray) -> None:
        """Keep a solution (one value per column) for the Pyomo variables:
        loaded now if the model exists, else when it is made."""
        self._values = np.asarray(x, dtype=float)
        if self._columns is not None:
            from .pyomo_model import load_values
            load_values(self._columns, self._values)

    @property
    def solution(self) -> Optional[np.ndarray]:
        """The last solution kept by :meth:`load_solution` (one value per column), or None."""
        return self._values

    @property
    def model_columns(self) -> list:
        """The Pyomo VarData of every matrix column, in column order."""
        if self._columns is None:
            _ = self.model         # made on first use
        return self._columns

    def var(self, name: str):
        """The Pyomo ``Var`` of a variable family (None when it has no entries)."""
        return getattr(self.model, name, None) if name in self.matrix.var_ranges else None

    def array(self, values: Dict[str, np.ndarray], name: str, asset: Hashable) -> np.ndarray:
        """The T values of ``name[asset, :]`` from a solution's value arrays.

        An asset without entries in the family (or a family with no entries
        at all) gives zeros; a family this model never declared raises
        :class:`~.expressions.UnknownVariable` (a misspelt name is not zeros).
        """
        blocks = self.var_blocks.get(name)
        if blocks is None:
            raise E.UnknownVariable(f"the compiled model has no variable family {name!r}")
        if asset not in blocks or name not in values:
            return np.zeros(self.steps)
        start = blocks[asset]
        return values[name][start:start + self.steps]

    @property
    def has_binaries(self) -> bool:
        return bool(self.matrix.integer.any())

    def for_model(self, model) -> "Built":
        """This compiled portfolio as the Pyomo ``model`` now stands: ``model``
        is :attr:`model` (made by it), which the user may have changed.

        The matrix is read back from the model
        (:func:`~.pyomo_model.from_pyomo`): the portfolio's columns keep their
        places and families, added variables follow as families of their own,
        and the rows, bounds and objective are the model's.  Solving the
        result certifies against those arrays, and a solution is loaded into
        ``model``'s variables.
        """
        if model is not self._model:
            raise ValueError("the model was not made by this compiled portfolio")
        from .pyomo_model import from_pyomo
        with _gc_paused():
            mx, columns = from_pyomo(model, self.model_columns, self.matrix)
        other = replace(self, matrix=mx, binary_vars=[n for n, b in mx.binary.items()
                                                      if b and n in mx.var_ranges])
        other._model, other._columns = model, columns
        return other


@contextmanager
def _gc_paused():
    """Pause the cyclic garbage collector: compiling (and making the Pyomo
    model) creates millions of small objects and no cycles worth collecting,
    and the collector's passes over them cost about a third of the time."""
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


def _variables(ctx: Ctx) -> None:
    p, topo = ctx.p, ctx.topo
    st = [p.storages[k] for k in topo.storages]
    ctx.add_var(E.CHARGE_SITE, [s.name for s in st if s.charge_max > 0])
    ctx.add_var(E.DISCHARGE, [s.name for s in st if s.discharge_max > 0])
    ctx.add_var(E.SOC, [s.name for s in st])
    ctx.add_var(E.SPILL, [s.name for s in st if s.spill_allowed or s.supply is not None])
    ctx.add_var(E.SUPPLY_TO, [(i, k) for i in topo.supplies for k in topo.supply_targets(i)])
    ctx.add_var(E.SUPPLY_SITE, [i for i in topo.supplies if topo.feeds_site(i)])
    ctx.add_var(E.CURTAILED, list(topo.supplies))
    ctx.add_var(E.TRANSFER, [r.name for r in topo.routes if r.kind == "transfer"])
    ctx.add_var(E.PUMPED, [r.name for r in topo.routes if r.kind == "pump"])
    ctx.add_var(E.SITE_IMPORT, list(topo.sites))
    ctx.add_var(E.SITE_EXPORT, list(topo.sites))
    ctx.add_var(E.CONN_IMPORT, list(topo.connections))
    ctx.add_var(E.CONN_EXPORT, list(topo.connections))


def build(p: Portfolio, variant: str = "tight", relax: bool = False,
          topology: Optional[Topology] = None, layout_only: bool = False) -> Built:
    """Compile ``p``.  ``relax=True`` adds a slack to every limit and rule and
    minimises their total (used to explain an infeasible portfolio).
    ``topology``: the index of ``p``'s network graph, when the caller has it.
    ``layout_only=True``: the variables, their places, the expressions and the
    objective, but no row and no bound (a matrix of no rows, every column
    unbounded above): enough to read and tabulate a schedule of ``p`` and to
    price it, not to solve or check one."""
    t0 = time.perf_counter()
    with _gc_paused():
        topo = topology if topology is not None else network(p).topology()
        ctx = Ctx(p, variant=variant, relax=relax, topology=topo, layout_only=layout_only)
        _variables(ctx)
        for module in FAMILIES:
            module.build(ctx)
        matrix = ctx.finish()
    built = Built(
        matrix=matrix, portfolio=p, variant=variant, relax=relax,
        steps=ctx.T, step_hours=ctx.dt,
        var_keys=ctx.var_keys, var_blocks=ctx.var_blocks, binary_vars=list(ctx.binary_vars),
        origins={name: list(f.origins) for name, f in ctx.families.items()},
        family_kind={name: (f.kind, f.var or "") for name, f in ctx.families.items()},
        slack_info=ctx.slack_info, expr=ctx.expr, topology=topo,
    )
    built.build_seconds = time.perf_counter() - t0
    return built
