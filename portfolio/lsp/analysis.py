"""What the language server knows about one document, without the protocol.

:func:`analyse` runs the lint's stages (parse, check, network graph and its
topology checks) on the editor's text and keeps what they made on the way:
the Lark tree, the checker's nodes, the model when there is one, and the
diagnostics, tidied as ``portfolio lint`` tidies them.  The questions an
editor asks (what is at this position, where is this name declared, which
words may come here) are answered from those, never from a list of the
language's constructs: a construct added to the grammar and the checker is
known here without a change.

Positions here are the project's: 1-based lines and columns counted in
characters (:class:`~portfolio.spans.Span`).  ``server.py`` converts them to
the protocol's 0-based, UTF-16 positions.  Nothing here imports pygls.
"""

from __future__ import annotations

import dataclasses
import gc
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Dict, Iterator, List, Optional, Tuple

import numpy as np
from lark import Token, Tree
from lark.exceptions import UnexpectedInput

from .. import units as U
from ..api import tidy_diagnostics
from ..check.checker import Checker
from ..check.tree import Node, Quantity, Reader, Word, read
from ..diagnostics import Diagnostic, Sink
from ..graph import check_topology, network
from ..model import Decl as ModelDecl
from ..model import Portfolio, ScenarioSet, Study, Varied
from ..model import PriceExpr as ModelPrice
from ..spans import Span
from ..syntax import keywords_of, lines_of, parse, parser, span_of

# How a model field (canonical units, docs/model.md) reads in a hover.  A
# field missing here is shown as its plain value: a new field needs no entry.
FIELD_UNITS = {
    "energy": "MWh", "charge_max": "MW", "discharge_max": "MW", "charge_min": "MW", "discharge_min": "MW",
    "eta_charge": "%", "eta_discharge": "%", "soc_min": "MWh", "soc_max": "MWh", "soc_start": "MWh",
    "end_value": "MWh", "loss_per_h": "% per h", "wear": "per MWh", "min_run_h": "h", "min_rest_h": "h",
    "ramp_mw_per_h": "MW per h", "spill_max": "MW", "export_max": "MW", "import_max": "MW",
    "max_mw": "MW", "in_transit": "MWh", "efficiency": "%", "prior_h": "h", "prior_net_mw": "MW",
    "cycles_per_day": "cycles per day", "cycles_horizon": "cycles", "delay_steps": "steps",
    "factor": "MWh per MWh", "stored_value": "per MWh", "transit_value": "per MWh", "cycles_drawn_mwh": "MWh",
    "mwh_per_m3": "MWh per m3",
}

# The canonical unit of each dimension (portfolio/units.py), as a hover writes it:
# a percentage is the fraction the model holds.
DIM_UNITS = {"power": "MW", "energy": "MWh", "time": "h", "fraction": "", "price": "per MWh",
             "rate": "per h", "ramp": "MW per h", "volume": "m3", "flow": "m3 per h",
             "equivalent": "MWh per m3"}
_PERCENT = {"%", "% per h"}
_MONEY = "per MWh"    # a unit of money per energy: the portfolio's currency goes before it


def number(x: float) -> str:
    return f"{x:.6g}"


def with_unit(value, unit: Optional[str]) -> str:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return str(value)
    if unit in _PERCENT:
        return f"{number(value * 100)} {unit}"
    return f"{number(value)} {unit}" if unit else number(value)


def money(unit: Optional[str], currency: Optional[str]) -> Optional[str]:
    """``unit`` with the portfolio's currency before a money unit (``EUR per MWh``)."""
    return f"{currency} {unit}" if currency and unit == _MONEY else unit


def shown(a: "Analysis", decl, fld: str) -> str:
    """A model field's value as a hover writes it: in its unit (FIELD_UNITS, money in the
    portfolio's currency), a price in the model's terms, a series by its range, names as names."""
    value = getattr(decl, fld)
    currency = a.model.currency if a.model is not None else None
    if isinstance(value, ModelPrice):
        adder = with_unit(abs(value.adder) if value.series else value.adder, money(_MONEY, currency))
        if not value.series:
            return adder
        return f"`{value.series}`" + ("" if value.adder == 0 else f" {'plus' if value.adder > 0 else 'minus'} {adder}")
    if isinstance(value, np.ndarray):
        if not value.size:
            return "no values"
        unit = money(_MONEY, currency) if getattr(decl, "quantity", "") == "price" else "MW"
        return f"{value.size} values, {with_unit(float(value.min()), unit)} to {with_unit(float(value.max()), unit)}"
    if isinstance(value, tuple) and value and all(isinstance(v, str) for v in value):
        return ", ".join(f"`{v}`" for v in value)
    return with_unit(value, money(FIELD_UNITS.get(fld), currency))


@dataclass(frozen=True)
class Declared:
    """A name the file declares: its kind (the checker's node key), the name's
    span and the span of the whole declaration."""
    name: str
    kind: str
    span: Span
    whole: Span


@dataclass
class Analysis:
    path: str
    text: str
    tree: Optional[Tree] = None
    nodes: List[Node] = field(default_factory=list)
    model: Optional[Portfolio] = None
    diagnostics: List[Diagnostic] = field(default_factory=list)
    declared: Dict[str, Declared] = field(default_factory=dict)   # the first declaration of each name
    declarations: List[Declared] = field(default_factory=list)    # every declaration, in file order
    uses: Dict[str, List[Span]] = field(default_factory=dict)      # every occurrence of a declared name
    csv_sources: List[Tuple[Path, Span]] = field(default_factory=list)

    @property
    def lines(self) -> List[str]:
        return self.text.split("\n")


def analyse(text: str, path: str, base_dir: Optional[Path] = None) -> Analysis:
    """The lint's stages on ``text`` (as ``api.lint_text`` runs them), keeping the tree,
    the nodes and the model.  Never raises for bad input."""
    text = lines_of(text)
    base = Path(base_dir) if base_dir is not None else Path(path).parent
    a = Analysis(path, text)
    sink = Sink()
    was_enabled = gc.isenabled()
    gc.disable()   # as the lint does: the tree holds no cycles worth collecting mid-run
    try:
        a.tree = parse(text, path, sink)
        if a.tree is not None:
            a.nodes = read(a.tree, path)
            p = Checker(path, base, sink).run(a.nodes)
            if p is not None:
                check_topology(p, network(p), sink)
                a.model = p            # kept for hovers even when the topology has errors
        _index(a, base)
    finally:
        if was_enabled:
            gc.enable()
    a.diagnostics = tidy_diagnostics(sink.items)
    return a


def _walk(value) -> Iterator[Node]:
    if isinstance(value, Node):
        yield value
        for f in dataclasses.fields(value):
            yield from _walk(getattr(value, f.name))
    elif isinstance(value, (list, tuple)):
        for v in value:
            yield from _walk(v)


def _index(a: Analysis, base: Path) -> None:
    """Declarations (every node that carries a name and more: a node that is only its name,
    as a storage in ``into cells, site``, is a use) and the uses of each name."""
    for node in _walk(a.nodes):
        name = getattr(node, "name", None)
        if isinstance(name, Word) and node.key != "portfolio_decl" and name.span != node.span:
            d = Declared(name.text, node.key, name.span, node.span)
            a.declarations.append(d)
            a.declared.setdefault(d.name, d)
        src = getattr(node, "path", None)
        if node.key == "csv_source" and isinstance(src, Word):
            a.csv_sources.append(((base / src.text.strip('"')).resolve(), node.span))
    if a.tree is None:
        return
    for tok in a.tree.scan_values(lambda t: isinstance(t, Token) and t.type == "NAME"):
        if str(tok) in a.declared:
            a.uses.setdefault(str(tok), []).append(span_of(a.path, tok))


# ---- positions -------------------------------------------------------------


def contains(span: Span, line: int, col: int) -> bool:
    """Whether the character at (line, col) lies in ``span`` (its end is exclusive;
    a cursor just after a word still counts as on it)."""
    return (span.line, span.col) <= (line, col) <= (span.end_line, span.end_col)


def name_at(a: Analysis, line: int, col: int) -> Optional[str]:
    """The declared name under the cursor (at a declaration or a use)."""
    for name, spans in a.uses.items():
        if any(contains(s, line, col) for s in spans):
            return name
    return None


def _inside(tree: Tree, line: int, col: int) -> List[Tree]:
    """The trees holding (line, col), outermost first."""
    chain = []
    node = tree
    while True:
        chain.append(node)
        for child in node.children:
            if isinstance(child, Tree) and not child.meta.empty and contains(span_of("", child.meta), line, col):
                node = child
                break
        else:
            return chain


# ---- hover -----------------------------------------------------------------


def hover(a: Analysis, line: int, col: int) -> Optional[Tuple[str, Span]]:
    """Markdown for the thing under the cursor, and its span."""
    name = name_at(a, line, col)
    if name is not None:
        span = next(s for s in a.uses[name] if contains(s, line, col))
        return describe_name(a, name), span
    if a.tree is None:
        return None
    inside = _inside(a.tree, line, col)
    quantity = next((t for t in reversed(inside) if t.data == "quantity"), None)
    if quantity is None:
        return _plain_number(a, inside[-1], line, col) or _unnamed(a, line, col)
    try:
        q = Reader(a.path).transform(quantity)
    except Exception:      # a rule's shape the reader does not know: no hover rather than a wrong one
        return None
    if not isinstance(q, Quantity):
        return None
    return describe_quantity(a, q), q.span


def _plain_number(a: Analysis, tree: Tree, line: int, col: int) -> Optional[Tuple[str, Span]]:
    """A number without a unit (``factor 0.9``, ``cycles max 300``; one of a list of
    values: the series it is part of) when the model takes a field from it."""
    for tok in tree.scan_values(lambda t: isinstance(t, Token) and t.type == "NUMBER"):
        span = span_of(a.path, tok)
        if contains(span, line, col):
            used = model_uses(a, span)
            if not used:
                return None
            return "\n".join([f"`{tok}`: a plain number", "", "as the model uses it:", *(f"- {u}" for u in used)]), span
    return None


def describe_quantity(a: Analysis, q: Quantity) -> str:
    written = f"{q.number.text} {U.written(q.unit.unit, q.unit.per)}"
    try:
        dim, f = U.factor(q.unit.unit, q.unit.per, U.ALL)
        value = float(q.number.text) * f
    except (U.UnitProblem, ValueError):
        return f"`{written}`: not a quantity the language knows (see the diagnostic)"
    unit = money(DIM_UNITS.get(dim.key), a.model.currency if a.model is not None else None)
    out = [f"`{written}` = **{with_unit(value, unit)}** ({dim.words})"]
    used = model_uses(a, q.span)
    if used:
        out.append("")
        out.append("as the model uses it:")
        out.extend(f"- {u}" for u in used)
    return "\n".join(out)


def model_decls(p: Portfolio) -> Iterator[ModelDecl]:
    """Every declaration of the model (each field of the portfolio that holds them)."""
    for f in dataclasses.fields(p):
        value = getattr(p, f.name)
        items = value.values() if isinstance(value, dict) else value if isinstance(value, tuple) else [value]
        for d in items:
            if isinstance(d, ModelDecl):
                yield d


def model_uses(a: Analysis, span: Span) -> List[str]:
    """The model's fields set from the text at ``span``: those whose setting's span is the
    smallest holding it (a setting with several quantities has a span for each)."""
    if a.model is None:
        return []
    found = []
    for d in model_decls(a.model):
        for fld, s in d.spans.items():
            if s.path == span.path and contains(s, span.line, span.col) and contains(s, span.end_line, span.end_col):
                found.append(((s.end_line - s.line, s.end_col - s.col if s.line == s.end_line else 0), d, fld))
    if not found:
        return []
    smallest = min(size for size, _, _ in found)
    out = []
    for size, d, fld in found:
        if size == smallest and hasattr(d, fld):
            kind = type(d).__name__.lower()
            out.append(f"{kind} `{d.name}`: {fld.replace('_', ' ')} = {shown(a, d, fld)}")
    return out


def describe_name(a: Analysis, name: str) -> str:
    d = a.declared[name]
    out = [f"**{d.kind.removesuffix('_decl')}** `{name}`, declared at line {d.span.line}"]
    # the model's declarations made here: one of the kind declared first (a supply's own
    # settings, then those of the series its inline values make)
    made = [] if a.model is None else [m for m in model_decls(a.model)
                                       if m.name == name and m.span.line == d.whole.line]
    made.sort(key=lambda m: type(m).__name__.lower() != d.kind)
    if made:
        out.extend(dict.fromkeys(line for m in made for line in settings_of(a, m)))
    else:
        first = a.lines[d.whole.line - 1].strip() if d.whole.line <= len(a.lines) else ""
        if first:
            out.append(f"```\n{first}\n```")
    return "\n".join(out)


def settings_of(a: Analysis, decl: ModelDecl) -> List[str]:
    """The settings the file gives a declaration, a line each, in the model's units."""
    where = [f"- {fld}: `{getattr(decl, fld)}`" for fld in _WHERE if isinstance(getattr(decl, fld, None), str)
             and getattr(decl, fld)]
    settings = [f"- {fld.replace('_', ' ')}: {shown(a, decl, fld)}" for fld in decl.spans
                if hasattr(decl, fld) and fld not in _WHERE]
    if isinstance(decl, Study):
        settings.extend(_dimensions(a, decl))
    return (where + settings)[:12]


_WHERE = ("site", "connection", "source", "target")   # names of other declarations: shown first, as names


def _unnamed(a: Analysis, line: int, col: int) -> Optional[Tuple[str, Span]]:
    """The smallest declaration of the model around the cursor that the file gives no name
    of its own (a route: ``route lower pump -> upper``), described as the model holds it."""
    if a.model is None:
        return None
    around = [m for m in model_decls(a.model) if m.name not in a.declared
              and m.span.path == a.path and contains(m.span, line, col)]
    if not around:
        return None
    m = min(around, key=lambda m: (m.span.end_line - m.span.line, m.span.end_col - m.span.col))
    kind = type(m).__name__.lower()
    return "\n".join([f"**{kind}** `{m.name}`, declared at line {m.span.line}", *settings_of(a, m)]), m.span


def _dimensions(a: Analysis, study: Study) -> List[str]:
    """What a study varies, a line each, in the model's units."""
    out = []
    for dim in study.dimensions:
        if isinstance(dim, Varied):
            unit = money(dim.unit, a.model.currency if a.model is not None else None)
            out.append(f"- vary `{dim.target}` {dim.setting}: {', '.join(with_unit(v, unit) for v in dim.values)}")
        elif isinstance(dim, ScenarioSet):
            out.append(f"- scenarios for `{dim.series}`: {', '.join(dim.names)}")
    out.append(f"- cases: {study.cases}")
    return out


# ---- definition, references, symbols -----------------------------------------


def definition(a: Analysis, line: int, col: int) -> Optional[Span]:
    name = name_at(a, line, col)
    return None if name is None else a.declared[name].span


def references(a: Analysis, line: int, col: int, include_declaration: bool = True) -> List[Span]:
    name = name_at(a, line, col)
    if name is None:
        return []
    decl = a.declared[name].span
    return [s for s in a.uses[name] if include_declaration or s != decl]


def outline(a: Analysis) -> List[Tuple[Declared, list]]:
    """The declarations nested by their spans: (declaration, children) pairs."""
    root: List[Tuple[Declared, list]] = []
    stack: List[Tuple[Declared, list]] = []
    for d in sorted(a.declarations, key=lambda d: (d.whole.line, d.whole.col, -d.whole.end_line)):
        while stack and not (contains(stack[-1][0].whole, d.whole.line, d.whole.col)
                             and contains(stack[-1][0].whole, d.whole.end_line, d.whole.end_col)):
            stack.pop()
        entry = (d, [])
        (stack[-1][1] if stack else root).append(entry)
        stack.append(entry)
    return root


# ---- completion --------------------------------------------------------------

_WORD_BEFORE = re.compile(r"[A-Za-z_][A-Za-z0-9_]*$")
_LAST_WORD = re.compile(r"([A-Za-z_][A-Za-z0-9_]*)\s*$")


def offset_of(text: str, line: int, col: int) -> int:
    lines = text.split("\n")
    line = max(1, min(line, len(lines)))
    return sum(len(x) + 1 for x in lines[:line - 1]) + min(max(col - 1, 0), len(lines[line - 1]))


def expected_at(text: str, offset: int) -> Optional[Tuple[frozenset, str]]:
    """What the parser accepts at ``offset`` (its terminal names), after the text before
    it minus the word being typed; and the word before that.  None after a syntax error."""
    start = offset
    m = _WORD_BEFORE.search(text, 0, offset)
    if m is not None:
        start = m.start()
    head = text[:start]
    try:
        ip = parser().parse_interactive(head)
        ip.exhaust_lexer()
        accepts = frozenset(ip.accepts())
    except UnexpectedInput:
        return None
    last = _LAST_WORD.search(head)
    return accepts, (last.group(1) if last else "")


def completions(a: Analysis, line: int, col: int, parsed: Optional[Analysis] = None) -> List[Tuple[str, str]]:
    """(word, what it is) pairs valid at the cursor: keywords the parser accepts there
    and, where it accepts a name, the declared names (not where a new name is declared).
    While the text does not parse (a statement half typed), the names are those of
    ``parsed``, the document's last analysis that did."""
    got = expected_at(a.text, offset_of(a.text, line, col))
    if got is None:
        return []
    accepts, before = got
    out = {}
    for terminal in sorted(accepts):
        for w in keywords_of(terminal):
            out.setdefault(w, "keyword")
    names = a if a.tree is not None or parsed is None else parsed
    declaring = {_declaring_word(names, d) for d in names.declarations}
    if "NAME" in accepts and before not in declaring:
        for d in names.declarations:
            out.setdefault(d.name, d.kind.removesuffix("_decl"))
    return sorted(out.items())


def _declaring_word(a: Analysis, d: Declared) -> str:
    """The word just before a declared name ('storage' in 'storage cells')."""
    m = _LAST_WORD.search(a.text, 0, offset_of(a.text, d.span.line, d.span.col))
    return m.group(1) if m else ""
