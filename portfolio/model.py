"""The checked, typed model: what the rest of the pipeline consumes.

Everything here is already validated by :mod:`portfolio.check`; later stages
may rely on it without re-checking.  Canonical units:

* power in MW (always non-negative; direction is in the field name),
* energy in MWh, durations in hours, fractions in 0..1,
* money per MWh in the user's currency (the language does not name one).

Each declaration keeps the :class:`~portfolio.spans.Span` of its statement in
``span`` and, in ``spans``, the span of each setting by field name, so that a
constraint family can point at the exact line that set its limit.  A field
that was not set by the user (a default) has no entry in ``spans``; use
:meth:`Decl.where` to fall back to the declaration's span.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime
from typing import Mapping, Optional

import numpy as np

from .spans import NOWHERE, Span


# Storage kinds with a meaning to the checks (what a route may carry).  Any
# other kind label is accepted and treated as "other".
KIND_BATTERY = "battery"
KIND_RESERVOIR = "reservoir"
KIND_THERMAL = "thermal"
KNOWN_KINDS = (KIND_BATTERY, KIND_RESERVOIR, KIND_THERMAL)

# States carried in from before the horizon (Storage.prior_mode).
PRIOR_IDLE = "idle"
PRIOR_CHARGE = "charge"
PRIOR_DISCHARGE = "discharge"
PRIOR_WORDS = {PRIOR_IDLE: "idle", PRIOR_CHARGE: "charging", PRIOR_DISCHARGE: "discharging"}  # as written

# End-of-horizon rules for state of charge.
END_FREE = "free"          # no condition
END_AT_LEAST = "at_least"  # soc[T] >= value
END_EQUAL = "equal"        # soc[T] == value

# Route kinds: what one storage passes to another.
ROUTE_RELEASE = "release"    # water drawn to generate, passed downstream
ROUTE_SPILL = "spill"        # water spilled, passed downstream
ROUTE_TRANSFER = "transfer"  # energy moved store-to-store (e.g. heat network)
ROUTE_PUMP = "pump"          # water pumped up: the target's charge takes it from the source


@dataclass(frozen=True)
class Decl:
    name: str
    span: Span = NOWHERE
    spans: Mapping[str, Span] = field(default_factory=dict, compare=False, repr=False)

    def where(self, field_name: str) -> Span:
        """The span of one setting, or of the declaration when defaulted."""
        return self.spans.get(field_name, self.span)


@dataclass(frozen=True)
class Horizon:
    start: datetime              # tz-aware, in ``zone`` (pandas is not needed to check a file)
    steps: int
    step_hours: float
    zone: str
    span: Span = NOWHERE

    @property
    def index(self):
        """Step starts as a ``pandas.DatetimeIndex``, tz-aware in the horizon's zone
        (fixed absolute steps)."""
        import pandas as pd

        start_utc = pd.Timestamp(self.start).tz_convert("UTC")
        idx = pd.date_range(start_utc, periods=self.steps,
                            freq=pd.Timedelta(hours=self.step_hours))
        return idx.tz_convert(self.zone)

    @property
    def end(self):
        """The end as a ``pandas.Timestamp`` in the horizon's zone."""
        import pandas as pd

        return pd.Timestamp(self.start) + pd.Timedelta(hours=self.step_hours * self.steps)


@dataclass(frozen=True, eq=False)
class Series(Decl):
    """A time series already resampled onto the horizon: one value a step."""

    values: np.ndarray = field(default_factory=lambda: np.zeros(0))
    quantity: str = "power"      # "power" (MW) or "price" (money per MWh)
    origin: str = ""             # human description, e.g. 'spot.csv column "price"'
    source: Optional[str] = None  # the file it was read from (resolved), if any


@dataclass(frozen=True)
class PriceExpr:
    """``series + adder`` per MWh, or a constant when ``series`` is None."""

    series: Optional[str] = None
    adder: float = 0.0
    span: Span = NOWHERE


@dataclass(frozen=True)
class Connection(Decl):
    export_max: Optional[float] = None   # MW, None = unlimited
    import_max: Optional[float] = None   # MW, None = unlimited
    sell: Optional[PriceExpr] = None     # None: export earns nothing
    buy: Optional[PriceExpr] = None      # None: import costs nothing
    exclusive: bool = False              # never import and export in one step


@dataclass(frozen=True)
class Site(Decl):
    connection: str = ""
    export_max: Optional[float] = None
    import_max: Optional[float] = None


@dataclass(frozen=True)
class Demand(Decl):
    site: str = ""
    profile: str = ""                    # name of a power Series


def rules_make_exclusive(charge_min: float, discharge_min: float, min_run_h: float,
                         min_rest_h: float) -> bool:
    """Whether a store's rules make its modes exclusive (docs/language.md).

    A minimum output would otherwise be dodged by charging and discharging at
    once, netting below it; a run could be kept alive, and a rest skipped, the
    same way.  The checker sets ``Storage.exclusive`` from this; a Storage
    built with one of these rules and ``exclusive=False`` is refused.
    """
    return charge_min > 0 or discharge_min > 0 or min_run_h > 0 or min_rest_h > 0


@dataclass(frozen=True)
class Storage(Decl):
    site: str = ""
    kind: str = "other"
    energy: float = 0.0                  # MWh capacity
    # 'energy equivalent X per m3': MWh of content per m3 of water (a reservoir declared in
    # volume; its volumes and flows were converted with it by the checker).  None: declared in MWh.
    mwh_per_m3: Optional[float] = None
    charge_max: float = 0.0              # MW, all charging: from the site and direct supplies (0: cannot charge)
    discharge_max: float = 0.0           # MW
    charge_min: float = 0.0              # MW whenever charging (needs a binary)
    discharge_min: float = 0.0           # MW whenever discharging (needs a binary)
    eta_charge: float = 1.0              # grid-side MW in -> stored MWh
    eta_discharge: float = 1.0           # stored MWh -> grid-side MW out
    soc_min: float = 0.0                 # MWh
    soc_max: float = 0.0                 # MWh
    soc_start: float = 0.0               # MWh at the start of the first step
    end_rule: str = END_AT_LEAST
    end_value: float = 0.0               # MWh, used unless end_rule is free
    loss_per_h: float = 0.0              # fraction of content lost per hour
    wear: float = 0.0                    # money per MWh discharged (grid side)
    exclusive: bool = False              # no simultaneous charge and discharge (implied by the rules below)
    min_run_h: float = 0.0               # minimum length of a discharge (or charge) run
    min_rest_h: float = 0.0              # minimum idle time between runs
    ramp_mw_per_h: Optional[float] = None  # limit on change of net output
    supply: Optional[str] = None         # power Series of natural supply (MW)
    spill_allowed: bool = False
    spill_max: Optional[float] = None    # MW equivalent, None = unlimited
    # 'charge only from A, B': the supplies fed straight in that may charge the store; never
    # the site (so never the grid).  None: any (the site and every supply fed into it).
    charge_sources: Optional[tuple] = None
    # 'cycles max N per day' / 'cycles max N': equivalent full cycles (discharged energy at the
    # store side / usable capacity, soc_max - soc_min; :attr:`usable_mwh`).  None = no limit.
    cycles_per_day: Optional[float] = None   # per calendar day of the horizon's zone (pro rata on part days)
    cycles_horizon: Optional[float] = None   # over the whole horizon
    # The state carried in from before the horizon ('was ...'); None: not declared, so idle
    # and rested, and no ramp limit on the first step.
    prior_mode: Optional[str] = None     # PRIOR_IDLE, PRIOR_CHARGE or PRIOR_DISCHARGE
    prior_h: Optional[float] = None      # hours in that state before step 0; None: longer than any rule
    prior_net_mw: float = 0.0            # net output just before step 0, MW: discharge +, charge -, idle 0
    # Hooks for one window of a longer horizon (portfolio.windows); never set from a file.
    arriving: tuple = ()                 # ((route name, (MWh arriving in step 0, 1, ...)), ...): water
    #                                      already on its way, fixed; replaces that route's in_transit
    stored_value: float = 0.0            # money per MWh left in store at the end (an objective term)
    cycles_days: tuple = ()              # ((date, share, MWh), ...): per calendar day the window
    #                                      touches, the share of it the WHOLE horizon covers and the
    #                                      MWh drawn for discharge in it before the window's start
    cycles_drawn_mwh: float = 0.0        # MWh drawn for discharge before the window's start

    def __post_init__(self) -> None:
        if not self.exclusive and rules_make_exclusive(self.charge_min, self.discharge_min,
                                                        self.min_run_h, self.min_rest_h):
            raise ValueError(f"storage {self.name!r}: a minimum output, run or rest makes the modes "
                             "exclusive; build it with exclusive=True (the checker does)")

    @property
    def usable_mwh(self) -> float:
        """The energy one full cycle moves: the state-of-charge span, soc_max - soc_min (MWh)."""
        return max(self.soc_max - self.soc_min, 0.0)

    @property
    def cycles(self) -> bool:
        """Whether it makes sense to count its equivalent full cycles: the store can charge
        (from its site or from supplies fed into it).  A store filled only by nature or
        by routes (a reservoir with 'charge off') does not cycle; it has none."""
        return self.charge_max > 0 and self.usable_mwh > 0

    @property
    def needs_modes(self) -> bool:
        return (self.exclusive or self.charge_min > 0 or self.discharge_min > 0
                or self.min_run_h > 0 or self.min_rest_h > 0)


@dataclass(frozen=True)
class Supply(Decl):
    site: str = ""
    profile: str = ""                    # name of a power Series (MW available)
    targets: tuple = ()                  # storage names and/or "site"
    curtail_allowed: bool = False


@dataclass(frozen=True)
class Route(Decl):
    """``source`` passes ``kind`` flow to ``target`` after ``delay_steps``.

    The flow leaving the source is measured in the source's stored MWh; it
    arrives multiplied by ``factor`` (and, for transfers, ``efficiency``).
    """

    source: str = ""
    kind: str = ROUTE_RELEASE
    target: str = ""
    delay_steps: int = 0
    factor: float = 1.0
    efficiency: float = 1.0
    max_mw: Optional[float] = None
    in_transit: float = 0.0              # MWh in transit at start, spread over the delay
    # Hook for one window of a longer horizon (portfolio.windows); never set from a file.
    transit_value: float = 0.0           # money per MWh (target units) still on its way at the end


@dataclass(frozen=True)
class Cap(Decl):
    """A portfolio-wide limit across all connections."""

    export_max: Optional[float] = None
    import_max: Optional[float] = None


# The settings a study may vary ('vary NAME SETTING ...'): the words as written -> the kinds of
# declaration that have it and the canonical unit.  How a value is applied: portfolio.study.cases.
VARIED = {
    "energy": (("storage",), "MWh"),
    "charge max": (("storage",), "MW"),
    "discharge max": (("storage",), "MW"),
    "efficiency round trip": (("storage",), "%"),
    "efficiency charge": (("storage",), "%"),
    "efficiency discharge": (("storage",), "%"),
    "export max": (("connection", "site"), "MW"),
    "import max": (("connection", "site"), "MW"),
}
CASES_CROSS = "cross"      # every combination of the study's values and scenarios
CASES_PAIRED = "paired"    # the first of each together, then the second of each, ...


@dataclass(frozen=True)
class Varied:
    """One setting a study varies: ``setting`` (a key of :data:`VARIED`) of ``target``,
    taking each of ``values`` in canonical units (MW, MWh; a fraction for a percentage)."""

    target: str
    kind: str                    # 'storage', 'connection' or 'site'
    setting: str
    values: tuple
    span: Span = NOWHERE

    @property
    def unit(self) -> str:
        return VARIED[self.setting][1]


@dataclass(frozen=True, eq=False)
class ScenarioSet:
    """The series ``series`` takes each of ``names`` in turn: ``values[i]`` on the horizon."""

    series: str
    names: tuple
    values: tuple                # one np.ndarray per name, one value a step
    sources: tuple = ()          # the file each was read from (resolved), or None
    span: Span = NOWHERE


@dataclass(frozen=True, eq=False)
class Study(Decl):
    """A set of dispatches of the portfolio with settings or series changed
    (docs/studies.md): its dimensions in the order written, each a
    :class:`Varied` or a :class:`ScenarioSet`, combined as ``cases`` says."""

    dimensions: tuple = ()
    cases: str = CASES_CROSS


@dataclass(frozen=True, eq=False)
class Portfolio:
    name: str
    path: str
    horizon: Horizon
    series: Mapping[str, Series]
    connections: Mapping[str, Connection]
    sites: Mapping[str, Site]
    storages: Mapping[str, Storage]
    supplies: Mapping[str, Supply]
    demands: Mapping[str, Demand]
    routes: tuple = ()
    cap: Optional[Cap] = None
    span: Span = NOWHERE
    studies: Mapping[str, Study] = field(default_factory=dict)
    currency: Optional[str] = None   # ISO 4217 code of prices and money; None: not declared

    def price(self, expr: Optional[PriceExpr]) -> np.ndarray:
        """A price expression evaluated on every step (zeros when absent)."""
        n = self.horizon.steps
        if expr is None:
            return np.zeros(n)
        base = self.series[expr.series].values if expr.series else np.zeros(n)
        return np.asarray(base, dtype=float) + expr.adder

    def profile(self, name: Optional[str]) -> np.ndarray:
        if name is None:
            return np.zeros(self.horizon.steps)
        return np.asarray(self.series[name].values, dtype=float)

    @property
    def inputs(self) -> tuple:
        """Every file this portfolio was read from: its own file and its series files."""
        own = (self.path,) if self.path else ()
        scenarios = (src for st in self.studies.values() for d in st.dimensions
                     if isinstance(d, ScenarioSet) for src in d.sources)
        return own + tuple(dict.fromkeys([*(s.source for s in self.series.values() if s.source),
                                          *(src for src in scenarios if src)]))
