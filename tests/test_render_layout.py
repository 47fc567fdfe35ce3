"""The text layout of a diagnostic (docs/cli.md, "portfolio lint"), and the JSON one.

Text: the first line is ``path:line:col: severity: message`` (what editors
parse); below it, indented and labelled, the code, the source line with the
span between ``>>`` and ``<<`` (at most 80 columns in all), then the notes,
a note written ``fix: ...`` labelled as the fix.
"""

from __future__ import annotations

import json
from types import SimpleNamespace

from hypothesis import given, settings
from hypothesis import strategies as st

from portfolio.diagnostics import DuplicateName, RetiredWord, SyntaxProblem
from portfolio.render import CLOSE, OPEN, WIDTH, excerpt, format_json, format_text
from portfolio.spans import Span

TEXT_LINE = "    text  "


def _text_line(out: str) -> str:
    [line] = [ln for ln in out.split("\n") if ln.startswith(TEXT_LINE)]
    return line


@settings(max_examples=300, deadline=None)
@given(src=st.text(st.characters(min_codepoint=32, max_codepoint=126, blacklist_characters="<>"), max_size=400),
       a=st.integers(0, 420), n=st.integers(0, 420))
def test_excerpt_fits_and_marks_the_span_once(src, a, n):
    start, end = min(a, len(src)), min(a + n, len(src))
    shown = excerpt(src, start, end)
    assert len(TEXT_LINE) + len(shown) <= WIDTH
    assert shown.count(OPEN) >= 1 and shown.count(CLOSE) >= 1
    o = shown.index(OPEN)
    c = shown.index(CLOSE, o + len(OPEN))
    inner = shown[o + len(OPEN):c]
    if "..." not in inner:
        assert inner == src[start:end]
    if len(src.strip()) + len(OPEN) + len(CLOSE) <= WIDTH - len(TEXT_LINE) and start >= len(src) - len(src.lstrip()):
        # a short line is shown whole, without its indentation
        assert shown.replace(OPEN, "", 1).replace(CLOSE, "", 1) == src[len(src) - len(src.lstrip()):]


def test_a_short_line_is_shown_whole_with_the_span_marked():
    src = "  storage b2 { energy 4 MW }"
    assert excerpt(src, src.index("4 MW"), src.index("4 MW") + 4) == "storage b2 { energy >>4 MW<< }"


def test_a_long_line_keeps_the_span_and_says_what_it_left_out():
    src = "a" * 150 + " target " + "b" * 150
    s = src.index("target")
    shown = excerpt(src, s, s + len("target"))
    assert f"{OPEN}target{CLOSE}" in shown
    assert shown.startswith("...") and shown.endswith("...")


def test_layout_of_one_diagnostic():
    text = "portfolio p\nsite a at g {\n  inflow pv 3 MW\n}\n"
    d = RetiredWord(Span("p.folio", 3, 3, 3, 9), "'inflow' is no longer a word of the language",
                    ("fix: write 'supply' in place of 'inflow'",))
    lines = format_text(d, texts={"p.folio": text}).split("\n")
    assert lines == ["p.folio:3:3: error: 'inflow' is no longer a word of the language",
                     "    code  P104",
                     "    text  >>inflow<< pv 3 MW",
                     "    fix   write 'supply' in place of 'inflow'"]


def test_notes_lose_their_prefix_to_the_label_and_wrap_in_80_columns():
    words = " ".join(["word"] * 40)
    d = DuplicateName(Span("p.folio", 1, 1, 1, 1), "twice", (f"note: {words}", "plain note"))
    lines = format_text(d, texts={"p.folio": "x\n"}).split("\n")
    notes = lines[2:]
    assert notes[0].startswith("    note  word") and notes[-1] == "    note  plain note"
    assert all(len(ln) <= WIDTH for ln in notes)
    assert all(ln.startswith(" " * 10 + "word") for ln in notes[1:-1])        # wrapped under the label
    assert " ".join(" ".join(ln.split()) for ln in notes[:-1]) == f"note {words}"


def test_a_span_over_several_lines_says_where_it_ends():
    text = "site a at g {\n  storage b { energy 4 MWh }\n}\n"
    d = SyntaxProblem(Span("p.folio", 1, 1, 3, 2), "a whole block")
    assert _text_line(format_text(d, texts={"p.folio": text})) == \
        f"{TEXT_LINE}{OPEN}site a at g {{{CLOSE} (on to line 3)"


def test_json_layout_is_two_space_indented_with_fixed_key_order():
    d = RetiredWord(Span("p.folio", 3, 3, 3, 9), "msg", ("fix: x",))
    result = SimpleNamespace(path="p.folio", errors=[d], diagnostics=[d], unreadable=False)
    out = format_json([result])
    doc = json.loads(out)
    assert out == json.dumps(doc, indent=2)
    assert list(doc) == ["files", "diagnostics"]
    assert list(doc["files"][0]) == ["path", "errors", "warnings", "readable"]
    assert list(doc["diagnostics"][0]) == ["path", "line", "column", "end_line", "end_column",
                                           "severity", "code", "message", "notes"]
    assert doc["diagnostics"][0]["notes"] == ["fix: x"]           # notes as written, prefix kept
