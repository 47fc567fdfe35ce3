"""The checker reads the parse tree by name, through portfolio.check.tree.Reader.

These tests fail when the grammar and the reader drift apart: a rule with no
handler, a handler for a rule that is gone, or a rule whose children come in
another order or of other kinds than its handler binds.
"""

from __future__ import annotations

from dataclasses import fields
from pathlib import Path

import pytest
from lark import Token, Tree
from lark.tree import Meta

from portfolio.check.tree import QUANTITY_SETTINGS, VARIED_SETTINGS, WORD_SETTINGS, GrammarShape, Node, Reader, Word, fit, read
from portfolio.diagnostics import Sink
from portfolio.syntax import fixed_keywords, keywords, parse, parser

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = sorted((ROOT / "examples").glob("**/*.folio"))


def _tree_names() -> set:
    """Every name a tree of the parser's can carry: a rule's alias, else its own name
    (Lark's '__' helpers for repeats are inlined and never make a tree)."""
    return {r.alias or r.origin.name for r in parser().rules if not r.origin.name.startswith("_")}


def _handled() -> set:
    own = {n for n in vars(Reader) if not n.startswith("_")} - {"PASSED", "transform"}
    return own | set(QUANTITY_SETTINGS) | set(WORD_SETTINGS) | set(VARIED_SETTINGS)


def test_every_rule_has_a_reader_or_is_listed_as_passed_through():
    missing = _tree_names() - _handled() - Reader.PASSED
    assert not missing, f"rules with no handler in portfolio/check/tree.py: {sorted(missing)}"


def test_every_reader_is_for_a_rule_of_the_grammar():
    stale = (_handled() | Reader.PASSED) - _tree_names()
    assert not stale, f"handlers or passed names for rules the grammar no longer has: {sorted(stale)}"


def test_passed_rules_never_reach_the_reader():
    """A 'passed' rule is one Lark inlines: every alternative of it without an
    alias has a single child.  Were it to make a tree, the reader would refuse it."""
    for r in parser().rules:
        if r.origin.name in Reader.PASSED and not r.alias:
            assert r.options.expand1 and len(r.expansion) == 1, r


def _meta(line=1, col=1, end_col=5) -> Meta:
    m = Meta()
    m.line, m.column, m.end_line, m.end_column = line, col, line, end_col
    m.empty = False
    return m


def _tok(kind, text, col):
    return Token(kind, text, line=1, column=col, end_line=1, end_column=col + len(text))


def test_children_in_another_order_fail_loudly():
    """'route a release -> b' read with the kind and a name swapped is refused, not misread."""
    good = Tree("route", [_tok("NAME", "a", 7), _tok("ROUTE_KIND", "release", 9), _tok("NAME", "b", 20)], _meta())
    route = read(Tree("start", [good], _meta()), "f")[0]
    assert (route.source.text, route.kind.text, route.target.text) == ("a", "release", "b")
    swapped = Tree("route", [_tok("ROUTE_KIND", "release", 9), _tok("NAME", "a", 7), _tok("NAME", "b", 20)], _meta())
    with pytest.raises(GrammarShape, match="route"):
        read(Tree("start", [swapped], _meta()), "f")


def test_a_rule_with_no_handler_fails_loudly():
    with pytest.raises(GrammarShape, match="no reader for rule 'mystery'"):
        read(Tree("start", [Tree("mystery", [], _meta())], _meta()), "f")


def test_fit_binds_optional_and_repeated_parts():
    n, q1, q2 = Word("NUMBER", "1", None), Word("Q", "2", None), Word("Q", "3", None)
    assert fit("r", [q1, q2], "RUNNING_MODE?", "Q?", "Q") == [None, q1, q2]
    assert fit("r", [q2], "Q?", "Q") == [None, q2]
    assert fit("r", [n, q1, q2], "NUMBER", "Q*") == [n, (q1, q2)]
    assert fit("r", [n], "NUMBER", "Q*") == [n, ()]
    with pytest.raises(GrammarShape):
        fit("r", [q1, n], "NUMBER", "Q")
    with pytest.raises(GrammarShape):
        fit("r", [n, n], "NUMBER")


def _no_lark_left(x, seen_kinds):
    assert not isinstance(x, (Tree, Token)), f"a Lark object is left in the nodes: {x!r}"
    if isinstance(x, (Node, Word)):
        seen_kinds.add(x.key if isinstance(x, Node) else x.terminal)
        for f in fields(x):
            _no_lark_left(getattr(x, f.name), seen_kinds)
    elif isinstance(x, (list, tuple)):
        for y in x:
            _no_lark_left(y, seen_kinds)


@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.name)
def test_examples_read_into_nodes_only(path):
    text = path.read_text(encoding="utf-8")
    tree = parse(text, str(path), Sink())
    seen = set()
    _no_lark_left(read(tree, str(path)), seen)
    assert {"storage", "quantity", "NAME"} <= seen


def test_spans_of_nodes_are_the_parsers_positions():
    text = "connection g {\n  export max 5 MW\n}\n"
    (conn,) = read(parse(text, "f", Sink()), "f")
    (limit,) = conn.settings
    assert (conn.name.span.line, conn.name.span.col, conn.name.span.end_col) == (1, 12, 13)
    assert (limit.span.line, limit.span.col, limit.span.end_col) == (2, 3, 18)
    assert (limit.value.number.span.col, limit.value.unit.span.col) == (14, 16)


def test_keyword_lists_agree_with_the_parser():
    """syntax.keywords() and fixed_keywords() are read from the parser's terminals:
    one list, whatever the grammar holds."""
    spelled = {t.pattern.value for t in parser().terminals
               if t.pattern.type == "str" and t.pattern.value[:1].isalpha()}
    assert fixed_keywords() == spelled
    assert spelled < keywords()
    assert {"allowed", "forbidden", "charging", "plus", "transfer"} <= keywords() - fixed_keywords()
