"""The parse tree read into plain nodes with named parts.

:class:`Reader` (a Lark ``Transformer``) turns every rule of
``grammar/portfolio.lark`` into a node below and every token into a
:class:`Word`, each with its :class:`Span`.  The rest of the checker reads
parts by name (``route.source``), never by a child's position: the one place
that knows the order of a rule's children is its handler here, and
:func:`fit` makes a handler fail at once (:class:`GrammarShape`) when a
grammar change gives it children of other kinds or in another order.
``tests/test_check_tree.py`` holds every grammar rule to a handler.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, List, Optional, Tuple

from lark import Transformer, Tree, v_args
from lark.exceptions import VisitError

from ..spans import Span
from ..syntax import span_of


class GrammarShape(Exception):
    """A rule's children are not what its handler reads: the grammar and the reader disagree."""


@dataclass(frozen=True)
class Word:
    """A token: its terminal (``NAME``, ``NUMBER``, ...), its text and where it is."""
    terminal: str
    text: str
    span: Span

    def __str__(self) -> str:
        return self.text


@dataclass(frozen=True)
class Node:
    """A rule's node; ``key`` is its rule (or alternative) name, as settings are keyed."""
    key: str
    span: Span


@dataclass(frozen=True)
class Unit(Node):
    unit: Optional[str]        # None for 'per MWh'
    per: Optional[str]


@dataclass(frozen=True)
class Quantity(Node):
    number: Word
    unit: Unit


@dataclass(frozen=True)
class Setting(Node):
    """A setting with one value (a Quantity, a Word, a node, a list of nodes, or None)."""
    value: Any = None


@dataclass(frozen=True)
class CsvSource(Node):
    path: Word
    column: Word
    options: Tuple[Setting, ...]


@dataclass(frozen=True)
class ListSource(Node):
    numbers: Tuple[Word, ...]
    unit: Optional[Unit]


@dataclass(frozen=True)
class ConstantSource(Node):
    quantity: Quantity


@dataclass(frozen=True)
class Named(Node):
    """A statement or item that declares a name: portfolio, price, demand."""
    name: Word
    source: Any = None


@dataclass(frozen=True)
class Block(Node):
    """A declaration with settings: preset, connection, site, storage, supply, the 'total' caps."""
    name: Optional[Word]
    other: Any                  # preset: the parent; storage: its preset; site: its connection; supply: its source
    settings: Tuple[Any, ...]


@dataclass(frozen=True)
class PriceExpr(Node):
    series: Optional[Word]      # None for a constant price
    sign: Optional[Word]
    quantity: Optional[Quantity]


@dataclass(frozen=True)
class Target(Node):
    name: Optional[Word]        # None for 'site'


@dataclass(frozen=True)
class PowerLimit(Node):
    max: Optional[Quantity]     # None for 'off'
    min: Optional[Quantity]


@dataclass(frozen=True)
class Pair(Node):
    first: Any
    second: Any


@dataclass(frozen=True)
class CycleLimit(Node):
    number: Word
    unit: Optional[Unit]        # None: over the horizon; 'per day': each calendar day


@dataclass(frozen=True)
class EndRule(Node):
    value: Optional[Quantity]   # None for 'free' and for 'start'


@dataclass(frozen=True)
class Carried(Node):
    mode: Optional[Word]        # None for 'idle'
    duration: Optional[Quantity]
    output: Optional[Quantity]


@dataclass(frozen=True)
class Route(Node):
    source: Word
    kind: Word
    target: Word
    options: Tuple[Setting, ...]


@dataclass(frozen=True)
class ValueRange(Node):
    low: Quantity
    high: Quantity
    step: Quantity


@dataclass(frozen=True)
class Vary(Node):
    """``vary TARGET SETTING VALUES`` in a study: ``setting`` is a node keyed by the
    setting (``vary_energy``, ...), ``values`` a :class:`ValueRange` or a ``value_list``
    :class:`ListSource`."""
    target: Word
    setting: Node
    values: Any


@dataclass(frozen=True)
class Scenario(Node):
    """``scenario NAME for SERIES SOURCE`` in a study."""
    name: Word
    series: Word
    source: Any


# -- matching a rule's children ------------------------------------------------------

def _kind_of(child) -> str:
    return child.terminal if isinstance(child, Word) else type(child).__name__


def fit(rule: str, children: list, *pattern: str) -> list:
    """Bind ``children`` to ``pattern``: one entry per part, in order.

    A part is a terminal name (``NAME``) or a node class name (``Quantity``),
    ``|`` between kinds it may be, with ``?`` for an optional part (None when
    absent) or ``*`` for a repeated one (a tuple).  Children that do not fit
    raise :class:`GrammarShape`.
    """
    got = _fit(children, 0, pattern, 0)
    if got is None:
        shown = ", ".join(_kind_of(c) for c in children)
        raise GrammarShape(f"rule '{rule}' has children ({shown}), its reader expects ({', '.join(pattern)})")
    return got


def _fit(children, i, pattern, j):
    if j == len(pattern):
        return [] if i == len(children) else None
    part = pattern[j]
    kinds = set(part.rstrip("?*").split("|"))
    if part.endswith("*"):
        n = i
        while n < len(children) and _kind_of(children[n]) in kinds:
            n += 1
        for end in range(n, i - 1, -1):     # longest first, then shorter
            rest = _fit(children, end, pattern, j + 1)
            if rest is not None:
                return [tuple(children[i:end])] + rest
        return None
    if i < len(children) and _kind_of(children[i]) in kinds:
        rest = _fit(children, i + 1, pattern, j + 1)
        if rest is not None:
            return [children[i]] + rest
    if part.endswith("?"):
        rest = _fit(children, i, pattern, j + 1)
        if rest is not None:
            return [None] + rest
    return None


# -- the reader --------------------------------------------------------------------------

QUANTITY_SETTINGS = ("h_length", "h_step", "export_max", "import_max", "energy", "energy_equivalent", "round_trip", "loss", "wear",
                     "min_run", "min_rest", "ramp", "soc_min", "soc_max", "soc_start", "delay", "route_max",
                     "route_efficiency", "in_transit")
WORD_SETTINGS = {"h_start": "TIMESTAMP", "h_end": "TIMESTAMP", "h_zone": "STRING", "time_column": "STRING",
                 "curtail": "ALLOWED", "kind": "NAME", "modes": "MODES", "factor": "NUMBER",
                 "gaps": "GAP_FILL", "cases": "CASES"}
# The settings a study may vary (grammar rule 'varied'): each a node with no parts.
VARIED_SETTINGS = ("vary_energy", "vary_charge_max", "vary_discharge_max", "vary_round_trip",
                   "vary_eta_charge", "vary_eta_discharge", "vary_export_max", "vary_import_max")


@v_args(meta=True)
class Reader(Transformer):
    """Lark tree -> nodes.  Rules that never make a node of their own are in ``PASSED``."""

    # Rules whose unaliased alternatives are one child each, which Lark puts
    # in the parent's place ('?' rules): no tree of theirs reaches a handler.
    # (A rule whose every alternative has an alias makes trees of those names.)
    PASSED = frozenset({"statement", "site_item", "storage_setting"})

    def __init__(self, path: str):
        super().__init__(visit_tokens=True)
        self.path = path

    def __default_token__(self, token) -> Word:
        return Word(token.type, str(token), span_of(self.path, token))

    def __default__(self, data, children, meta):
        if data in QUANTITY_SETTINGS:
            (value,) = fit(data, children, "Quantity")
        elif data in WORD_SETTINGS:
            (value,) = fit(data, children, WORD_SETTINGS[data])
        elif data in VARIED_SETTINGS:
            return self._varied(data, children, meta)
        else:
            raise GrammarShape(f"no reader for rule '{data}'")
        return Setting(data, self._span(meta), value)

    def _varied(self, data, children, meta) -> Node:
        fit(data, children)
        return Node(data, self._span(meta))

    def _span(self, meta) -> Span:
        return span_of(self.path, meta)

    def start(self, meta, children) -> List[Node]:
        (stmts,) = fit("start", children, "Named|Block|Route*")
        return list(stmts)

    # quantities and sources
    def quantity(self, meta, children):
        return Quantity("quantity", self._span(meta), *fit("quantity", children, "NUMBER", "Unit"))

    def unit_spec(self, meta, children):
        unit, per = fit("unit_spec", children, "UNIT", "UNIT?")
        return Unit("unit_spec", self._span(meta), unit.text, per.text if per else None)

    def per_unit(self, meta, children):
        (per,) = fit("per_unit", children, "UNIT")
        return Unit("per_unit", self._span(meta), None, per.text)

    def number(self, meta, children):
        (num,) = fit("number", children, "NUMBER")
        return Word(num.terminal, num.text, self._span(meta))

    def csv_source(self, meta, children):
        return CsvSource("csv_source", self._span(meta), *fit("csv_source", children, "STRING", "STRING", "Setting*"))

    def list_source(self, meta, children):
        return ListSource("list_source", self._span(meta), *fit("list_source", children, "NUMBER*", "Unit?"))

    def constant_source(self, meta, children):
        return ConstantSource("constant_source", self._span(meta), *fit("constant_source", children, "Quantity"))

    def csv_unit(self, meta, children):
        return Setting("csv_unit", self._span(meta), *fit("csv_unit", children, "Unit"))

    # statements
    def portfolio_decl(self, meta, children):
        return Named("portfolio_decl", self._span(meta), *fit("portfolio_decl", children, "NAME"))

    def currency_decl(self, meta, children):
        return Named("currency_decl", self._span(meta), *fit("currency_decl", children, "NAME"))

    def horizon(self, meta, children):
        return Block("horizon", self._span(meta), None, None, *fit("horizon", children, "Setting*"))

    def price(self, meta, children):
        return Named("price", self._span(meta), *fit("price", children, "NAME", _SOURCES))

    def demand(self, meta, children):
        return Named("demand", self._span(meta), *fit("demand", children, "NAME", _SOURCES))

    def preset(self, meta, children):
        return Block("preset", self._span(meta), *fit("preset", children, "NAME", "NAME?", _STORAGE_SETTINGS))

    def storage(self, meta, children):
        return Block("storage", self._span(meta), *fit("storage", children, "NAME", "NAME?", _STORAGE_SETTINGS))

    def connection(self, meta, children):
        name, settings = fit("connection", children, "NAME", "Setting*")
        return Block("connection", self._span(meta), name, None, settings)

    def cap(self, meta, children):
        return Block("cap", self._span(meta), None, None, *fit("cap", children, "Setting*"))

    def site(self, meta, children):
        return Block("site", self._span(meta), *fit("site", children, "NAME", "NAME", "Setting|Named|Block|Route*"))

    def supply(self, meta, children):
        return Block("supply", self._span(meta), *fit("supply", children, "NAME", _SOURCES, "Setting*"))

    def route(self, meta, children):
        return Route("route", self._span(meta), *fit("route", children, "NAME", "ROUTE_KIND", "NAME", "Setting*"))

    # connection settings
    def sell(self, meta, children):
        return Setting("sell", self._span(meta), *fit("sell", children, "PriceExpr"))

    def buy(self, meta, children):
        return Setting("buy", self._span(meta), *fit("buy", children, "PriceExpr"))

    def direction_exclusive(self, meta, children):
        fit("direction_exclusive", children)
        return Setting("direction_exclusive", self._span(meta))

    def price_ref(self, meta, children):
        return PriceExpr("price_ref", self._span(meta), *fit("price_ref", children, "NAME", "SIGN?", "Quantity?"))

    def price_constant(self, meta, children):
        return PriceExpr("price_constant", self._span(meta), None, None, *fit("price_constant", children, "Quantity"))

    # supply settings
    def into(self, meta, children):
        (targets,) = fit("into", children, "Target*")
        return Setting("into", self._span(meta), targets)

    def target(self, meta, children):
        return Target("target", self._span(meta), *fit("target", children, "NAME"))

    def site_target(self, meta, children):
        fit("site_target", children)
        return Target("site_target", self._span(meta), None)

    # storage settings
    def charge(self, meta, children):
        return Setting("charge", self._span(meta), *fit("charge", children, "PowerLimit"))

    def discharge(self, meta, children):
        return Setting("discharge", self._span(meta), *fit("discharge", children, "PowerLimit"))

    def charge_from(self, meta, children):
        (names,) = fit("charge_from", children, "NAME*")
        return Setting("charge_from", self._span(meta), names)

    def cycles(self, meta, children):
        (limits,) = fit("cycles", children, "CycleLimit*")
        return Setting("cycles", self._span(meta), limits)

    def cycle_limit(self, meta, children):
        return CycleLimit("cycle_limit", self._span(meta), *fit("cycle_limit", children, "NUMBER", "Unit?"))

    def power_limit(self, meta, children):
        return PowerLimit("power_limit", self._span(meta), *fit("power_limit", children, "Quantity", "Quantity?"))

    def power_off(self, meta, children):
        fit("power_off", children)
        return PowerLimit("power_off", self._span(meta), None, None)

    def efficiency(self, meta, children):
        pair = Pair("pair", self._span(meta), *fit("efficiency", children, "Quantity", "Quantity"))
        return Setting("efficiency", self._span(meta), pair)

    def soc(self, meta, children):
        (parts,) = fit("soc", children, "Setting*")
        return Setting("soc", self._span(meta), parts)

    def soc_end(self, meta, children):
        return Setting("soc_end", self._span(meta), *fit("soc_end", children, "EndRule"))

    def end_at_least(self, meta, children):
        return EndRule("end_at_least", self._span(meta), _end_value(fit("end_at_least", children, "EndRule|Quantity")))

    def end_equal(self, meta, children):
        return EndRule("end_equal", self._span(meta), _end_value(fit("end_equal", children, "EndRule|Quantity")))

    def end_free(self, meta, children):
        fit("end_free", children)
        return EndRule("end_free", self._span(meta), None)

    def value_start(self, meta, children):
        fit("value_start", children)
        return EndRule("value_start", self._span(meta), None)

    def end_value(self, meta, children):
        (q,) = fit("end_value", children, "Quantity")
        return q

    def spill(self, meta, children):
        pair = Pair("pair", self._span(meta), *fit("spill", children, "ALLOWED", "Quantity?"))
        return Setting("spill", self._span(meta), pair)

    # studies
    def study(self, meta, children):
        name, items = fit("study", children, "NAME", "Vary|Scenario|Setting*")
        return Block("study", self._span(meta), name, None, items)

    def vary(self, meta, children):
        return Vary("vary", self._span(meta), *fit("vary", children, "NAME", "Node", "ValueRange|ListSource"))

    def value_range(self, meta, children):
        return ValueRange("value_range", self._span(meta),
                          *fit("value_range", children, "Quantity", "Quantity", "Quantity"))

    def value_list(self, meta, children):
        return ListSource("value_list", self._span(meta), *fit("value_list", children, "NUMBER*", "Unit"))

    def scenario(self, meta, children):
        return Scenario("scenario", self._span(meta), *fit("scenario", children, "NAME", "NAME", _SOURCES))

    def was(self, meta, children):
        return Setting("was", self._span(meta), *fit("was", children, "Carried"))

    def was_idle(self, meta, children):
        return Carried("was_idle", self._span(meta), None, *fit("was_idle", children, "Quantity?"), None)

    def was_running(self, meta, children):
        return Carried("was_running", self._span(meta),
                       *fit("was_running", children, "RUNNING_MODE", "Quantity?", "Quantity"))


def _end_value(bound: list) -> Optional[Quantity]:
    """The quantity an end rule names, or None for 'start' (a ``value_start`` node)."""
    (value,) = bound
    return value if isinstance(value, Quantity) else None


_SOURCES = "CsvSource|ListSource|ConstantSource"
_STORAGE_SETTINGS = "Setting|Block*"    # a storage's own supply is a Block


def read(tree: Tree, path: str) -> List[Node]:
    """The statements of a parsed file, as nodes."""
    try:
        return Reader(path).transform(tree)
    except VisitError as e:     # Lark wraps what a handler raises; show the reader's own error
        raise e.orig_exc from None


# What a setting is called in messages, where its rule name is not the words the user wrote.
_WORDS = {"h_start": "start", "h_end": "end", "h_length": "length", "h_step": "step", "h_zone": "zone",
          "export_max": "export max", "import_max": "import max", "min_run": "run at least",
          "min_rest": "rest at least", "soc_min": "soc min", "soc_max": "soc max", "soc_start": "soc start",
          "soc_end": "soc end", "time_column": "time column", "csv_unit": "unit", "route_max": "max",
          "route_efficiency": "efficiency", "in_transit": "in transit", "direction_exclusive": "direction exclusive",
          "charge_from": "charge only from", "cycles": "cycles max",
          "energy_equivalent": "energy equivalent",
          "vary_energy": "energy", "vary_charge_max": "charge max", "vary_discharge_max": "discharge max",
          "vary_round_trip": "efficiency round trip", "vary_eta_charge": "efficiency charge",
          "vary_eta_discharge": "efficiency discharge", "vary_export_max": "export max",
          "vary_import_max": "import max"}


def said(key: str) -> str:
    """The words a setting is written with ('export_max' -> 'export max')."""
    return _WORDS.get(key, key.replace("_", " "))
