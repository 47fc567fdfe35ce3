"""The parse tables shipped in portfolio/syntax_tables.json against the grammar.

The reference is Lark itself: a parser built from grammar/portfolio.lark here,
in the test, must have the same terminals, rules and LALR table as the one
read from the shipped tables (up to how Lark numbered the states, which
changes from one build to the next), and both must read every example and
every lint case, and the mistakes made in them, alike.
"""

from __future__ import annotations

from pathlib import Path

import lark
import pytest

from portfolio import syntax
from portfolio.diagnostics import Sink

ROOT = Path(__file__).resolve().parents[1]
TEXTS = sorted((ROOT / "examples").rglob("*.folio")) + sorted((ROOT / "tests" / "lint_cases").glob("*.folio"))
CACHED = (syntax.parser, syntax.keywords, syntax.fixed_keywords, syntax._statement_words, syntax._terminal_names)


@pytest.fixture
def fresh_caches():
    """parser() and what is read from it, made again in the test and forgotten after it."""
    for f in CACHED:
        f.cache_clear()
    yield
    for f in CACHED:
        f.cache_clear()


@pytest.fixture(scope="module")
def built():
    return syntax.build_parser(syntax.grammar_text())


@pytest.fixture(scope="module")
def shipped():
    stored = syntax._tables()
    return lark.Lark._load_from_dict(stored["data"], stored["memo"],
                                lexer_callbacks=syntax._keyword_terminals(syntax.grammar_text()))


def test_the_shipped_tables_are_made_from_this_grammar_and_options():
    assert syntax._tables().get("grammar_key") == syntax.grammar_key(syntax.grammar_text()), (
        "stale parse tables: run python -m portfolio.syntax --regenerate")


SAME_LARK = syntax._tables().get("lark_version") == lark.__version__
needs_same_lark = pytest.mark.skipif(
    not SAME_LARK, reason=f"the tables were made by lark {syntax._tables().get('lark_version')}, this is "
                          f"{lark.__version__}: they are not read, the parser is built (docs/performance.md)")


def test_tables_made_by_another_lark_are_not_read(monkeypatch):
    text = syntax.grammar_text()
    assert syntax.tables_fit(text) == SAME_LARK
    monkeypatch.setattr(lark, "__version__", "0.0.1")
    assert not syntax.tables_fit(text)


def _rule(r):
    return (r.origin.name, tuple(s.name for s in r.expansion), r.order, r.alias, repr(r.options),
            tuple(r.options.empty_indices))


def _terminal(t):
    return (t.name, t.pattern.type, t.pattern.value, tuple(t.pattern.flags), t.priority)


def _canonical_table(lk):
    """The LALR table with states numbered in the order a breadth-first walk from
    the start state meets them, symbols taken in name order."""
    table = lk.parser.parser._parse_table
    start, end = table.start_states["start"], table.end_states["start"]
    number = {start: 0}
    queue, rows = [start], []
    while queue:
        state = queue.pop(0)
        row = []
        for symbol in sorted(table.states[state]):
            action, arg = table.states[state][symbol]
            if action.name == "Shift":
                if arg not in number:
                    number[arg] = len(number)
                    queue.append(arg)
                row.append((symbol, "shift", number[arg]))
            else:
                row.append((symbol, action.name, _rule(arg)))
        rows.append(tuple(row))
    assert len(number) == len(table.states), "a state the start state never reaches"
    return rows, number[end]


@needs_same_lark
def test_the_shipped_tables_are_the_ones_lark_builds(built, shipped):
    assert sorted(map(_terminal, shipped.terminals)) == sorted(map(_terminal, built.terminals))
    assert sorted(map(_rule, shipped.rules)) == sorted(map(_rule, built.rules))
    assert shipped.options.options == {**built.options.options, "lexer_callbacks": shipped.options.lexer_callbacks}
    rows, end = _canonical_table(shipped)
    assert len(rows) > 100
    assert (rows, end) == _canonical_table(built)


@needs_same_lark
def test_the_keyword_callbacks_are_given_again_on_loading(built, shipped):
    assert set(shipped.lexer_conf.callbacks) == set(built.lexer_conf.callbacks)
    assert "MAX" in shipped.lexer_conf.callbacks


@needs_same_lark
def test_parser_reads_the_shipped_tables_and_builds_nothing(fresh_caches, monkeypatch):
    def no_build(text):
        raise AssertionError("the parser was built from the grammar")

    monkeypatch.setattr(syntax, "build_parser", no_build)
    sink = Sink()
    tree = syntax.parse((ROOT / "examples" / "kestrel_bay" / "kestrel_bay.folio").read_text("utf-8"), "demo", sink)
    assert tree is not None and not list(sink.items)


def test_an_edited_grammar_is_built_not_read_from_stale_tables(fresh_caches, monkeypatch):
    edited = syntax.grammar_text() + "\n// an edit the shipped tables never saw\n"
    builds = []
    real = syntax.build_parser
    monkeypatch.setattr(syntax, "grammar_text", lambda: edited)
    monkeypatch.setattr(syntax, "build_parser", lambda text: builds.append(text) or real(text))
    assert syntax.parser() is not None
    assert builds == [edited]


def _tokens_and_spans(tree):
    """Everything a later stage reads from a tree: rule names, token types and
    values, and the positions of both (Token equality alone compares text)."""
    out = []
    for sub in tree.iter_subtrees_topdown():
        meta = sub.meta
        out.append((sub.data, getattr(meta, "line", None), getattr(meta, "column", None),
                    getattr(meta, "end_line", None), getattr(meta, "end_column", None)))
        for c in sub.children:
            if not hasattr(c, "data"):
                out.append((c.type, str(c), c.line, c.column, c.end_line, c.end_column, c.start_pos, c.end_pos))
    return out


def _mistakes(text):
    """The text, and the text broken in ways a user breaks it: cut short, a word
    glued to the next, a unit dropped, a misspelt keyword."""
    yield text
    yield text[: len(text) // 2]
    yield text.replace(" max ", " maxx ", 1)
    yield text.replace(" MW", "", 1)
    yield text.replace("storage", "storge", 1)
    yield text.replace("{", "{ {", 1)


def _read(parser_, text, monkeypatch):
    monkeypatch.setattr(syntax, "parser", lambda: parser_)
    sink = Sink()
    tree = syntax.parse(text, "f.folio", sink)
    return (_tokens_and_spans(tree) if tree is not None else None,
            [(d.code, d.span, d.message, tuple(d.notes)) for d in sink.items])


@needs_same_lark
@pytest.mark.parametrize("path", TEXTS, ids=lambda p: p.name)
def test_both_parsers_read_every_example_and_lint_case_alike(path, built, shipped, monkeypatch):
    for text in _mistakes(syntax.lines_of(path.read_text("utf-8", errors="replace"))):
        assert _read(shipped, text, monkeypatch) == _read(built, text, monkeypatch)
