"""Fuzzing the front end: whatever the text, linting never raises.

Random text (unicode, decoded random bytes, deep braces, very long lines) and
random mutations of the example files go through ``lint_text`` and, on a temp
copy, through ``portfolio lint``.  The result is always diagnostics or a clean
result; every diagnostic has a registered code and a position inside the file.
"""

from __future__ import annotations

import io
import json
import re
import shutil
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from portfolio.syntax import lines_of
from portfolio import cli
from portfolio.api import lint_text
from portfolio.diagnostics import REGISTRY
from portfolio.render import format_text
from portfolio.syntax import keywords

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = sorted((ROOT / "examples").glob("*/*.folio"))
SOURCES = {p: p.read_text("utf-8") for p in EXAMPLES}

FAST = dict(deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
TOKEN = re.compile(r'\s+|"[^"\n]*"|[A-Za-z_%][A-Za-z0-9_]*|[-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?|\S')
NUMBER = re.compile(r"[-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?")
UNITS = ["W", "kW", "MW", "GW", "Wh", "kWh", "MWh", "GWh", "%", "h", "min", "s", "d", "per", "MWhr", "mw", "€"]
ODD_NUMBERS = ["1e308", "-1e308", "1e999", "-1e999", "nan", "inf", "-inf", "-5", "0", "-0", "1e-320",
               "99999999999999999999999", "0.000000001", "2027", "2027-03-01T00:00", "1.", ".5"]
SNIPPETS = ["{", "}", "{ }", "[", "]", ",", "->", '"', '""', '"x.csv"', "#", "\n", "\t", "\r\n", "\u2028", "\x0c",
            "0", "1 h", "5 MW", "2027-03-01T00:00", "2027-02-30T00:00", "é", "\ufeff", "site", "like", "per MWh"]


def check_result(result, text: str, path: str) -> None:
    nlines = lines_of(text).count("\n") + 1          # CR, CR LF and LF end a line
    for d in result.diagnostics:
        assert d.code in REGISTRY, d
        assert type(d) is REGISTRY[d.code]
        assert d.span.line >= 1 and d.span.col >= 1, d
        if d.span.path == path:
            assert d.span.line <= nlines, (d, nlines)
        format_text(d, texts={path: text})          # rendering never fails either
    if result.portfolio is not None:
        assert not result.errors
        assert result.graph is not None


# ---- random text ------------------------------------------------------------------

@settings(max_examples=150, **FAST)
@given(st.text(max_size=300))
def test_random_unicode(text):
    check_result(lint_text(text, "fuzz.folio"), text, "fuzz.folio")


@settings(max_examples=100, **FAST)
@given(st.binary(max_size=300), st.sampled_from(["utf-8", "latin-1"]))
def test_random_bytes_decoded(data, encoding):
    text = data.decode(encoding, errors="replace")
    check_result(lint_text(text, "fuzz.folio"), text, "fuzz.folio")


@settings(max_examples=80, **FAST)
@given(st.lists(st.sampled_from(sorted(keywords()) + SNIPPETS + ["a", "b", "12", "3 MWh"]), max_size=60))
def test_random_keyword_soup(words):
    text = " ".join(words)
    check_result(lint_text(text, "fuzz.folio"), text, "fuzz.folio")


@settings(max_examples=20, **FAST)
@given(st.integers(1, 20000), st.sampled_from(["", "site a at b ", "preset p ", "connection c ", "x "]),
       st.sampled_from(["{", "}", "{ ", "[", '"']))
def test_deep_nesting(depth, prefix, brace):
    text = prefix + brace * depth
    check_result(lint_text(text, "fuzz.folio"), text, "fuzz.folio")


@settings(max_examples=10, **FAST)
@given(st.sampled_from(["a", "9", " ", "#", "x y ", "1 MW ", "{ }"]), st.integers(1000, 50000))
def test_very_long_lines(piece, times):
    text = piece * (times // len(piece))
    check_result(lint_text(text, "fuzz.folio"), text, "fuzz.folio")


def test_long_inline_list():
    """A 20 000-value inline list on one line (more values than steps)."""
    text = SOURCES[EXAMPLES[0]] + "\nprice extra values [" + "1 " * 20000 + "] per MWh\n"
    check_result(lint_text(text, str(EXAMPLES[0]), EXAMPLES[0].parent), text, str(EXAMPLES[0]))


# ---- mutations of the examples ------------------------------------------------------

@st.composite
def mutated(draw):
    path = draw(st.sampled_from(EXAMPLES))
    toks = TOKEN.findall(SOURCES[path])
    for _ in range(draw(st.integers(1, 4))):
        op = draw(st.sampled_from(["delete", "duplicate", "swap", "number", "unit", "keyword",
                                   "char", "snippet"]))
        i = draw(st.integers(0, len(toks) - 1))
        if op == "delete":
            del toks[i]
        elif op == "duplicate":
            toks.insert(i, toks[i])
        elif op == "swap":
            j = draw(st.integers(0, len(toks) - 1))
            toks[i], toks[j] = toks[j], toks[i]
        elif op == "number":
            spots = [k for k, t in enumerate(toks) if NUMBER.fullmatch(t)]
            if spots:
                toks[draw(st.sampled_from(spots))] = draw(st.sampled_from(ODD_NUMBERS))
        elif op == "unit":
            spots = [k for k, t in enumerate(toks) if t in UNITS]
            if spots:
                toks[draw(st.sampled_from(spots))] = draw(st.sampled_from(UNITS))
        elif op == "keyword":
            toks.insert(i, " " + draw(st.sampled_from(sorted(keywords()))) + " ")
        elif op == "char":
            text = "".join(toks)
            k = draw(st.integers(0, len(text)))
            if draw(st.booleans()):
                text = text[:k] + text[k + 1:]
            else:
                text = text[:k] + draw(st.characters()) + text[k:]
            toks = TOKEN.findall(text) or [" "]
        else:
            toks.insert(i, draw(st.sampled_from(SNIPPETS)))
        if not toks:
            toks = [" "]
    return path, "".join(toks)


@settings(max_examples=600, **FAST)
@given(mutated())
def test_mutated_examples_lint(case):
    path, text = case
    result = lint_text(text, str(path), path.parent)       # CSVs resolve beside the example
    check_result(result, text, str(path))


QUANTITY = re.compile(r"(?<![\w.:-])[-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?\s*(?:%|[A-Za-z]+)(?:\s+per\s+[A-Za-z]+)?")


@settings(max_examples=300, **FAST)
@given(st.data())
def test_extreme_quantities(data):
    """Any quantity of an example replaced by an extreme number in any unit (overflow, underflow, nan)."""
    path = data.draw(st.sampled_from(EXAMPLES))
    text = SOURCES[path]
    spots = [m.span() for m in QUANTITY.finditer(text)]
    for _ in range(data.draw(st.integers(1, 3))):
        a, b = data.draw(st.sampled_from(spots))
        unit = data.draw(st.sampled_from(UNITS[:-3] + ["per MWh", "MW per h", "% per h", "per h"]))
        new = f"{data.draw(st.sampled_from(ODD_NUMBERS))} {unit}"
        text = text[:a] + new.ljust(b - a) + text[b:] if len(new) <= b - a else text[:a] + new + text[b:]
        spots = [m.span() for m in QUANTITY.finditer(text)] or spots
    check_result(lint_text(text, str(path), path.parent), text, str(path))


@settings(max_examples=60, **FAST)
@given(st.data())
def test_odd_line_breaks(data):
    """Form feeds, U+2028, NEL... do not end a line for the parser, nor for its positions
    (a lone CR does: old Mac files; tests/test_hostile_input.py)."""
    path = data.draw(st.sampled_from(EXAMPLES))
    text = SOURCES[path][:data.draw(st.integers(0, len(SOURCES[path])))]
    for _ in range(data.draw(st.integers(1, 8))):
        k = data.draw(st.integers(0, len(text)))
        text = text[:k] + data.draw(st.sampled_from(["\x0c", "\u2028", "\u2029", "\x85", "\x1c", "\x0b"])) + text[k:]
    text += data.draw(st.sampled_from(["", "{", "site x at y {", "\x0c\x0c{\x0c\x0c"]))
    check_result(lint_text(text, str(path), path.parent), text, str(path))


def test_form_feeds_do_not_count_as_lines():
    text = "site a at b \x0c\x0c\x0c {"
    (d,) = lint_text(text, "ff.folio").diagnostics
    assert (d.code, d.span.line, d.span.col) == ("P102", 1, 17)   # analytic: the '{' is the 17th character


@pytest.fixture(scope="module")
def sandbox(tmp_path_factory):
    """A temp copy of every example folder (with its CSVs)."""
    root = tmp_path_factory.mktemp("fuzz_examples")
    for p in EXAMPLES:
        shutil.copytree(p.parent, root / p.parent.name)
    return root


def _cli(argv):
    out, err = io.StringIO(), io.StringIO()
    code = cli.main(argv, out=out, err=err)
    return code, out.getvalue(), err.getvalue()


@settings(max_examples=120, **FAST)
@given(case=mutated(), fmt=st.sampled_from(["text", "json"]))
def test_mutated_examples_cli(sandbox, case, fmt):
    path, text = case
    target = sandbox / path.parent.name / "mutant.folio"
    target.write_text(text, "utf-8")
    code, out, err = _cli(["lint", "--format", fmt, str(target)])
    assert "Traceback" not in out + err
    if "\x00" in text:                                  # a NUL byte: not a text file (P001)
        assert code == 2 and "P001" in out
        return
    assert code in (0, 1)
    if fmt == "json":
        doc = json.loads(out)
        assert doc["files"][0]["errors"] == sum(d["severity"] == "error" for d in doc["diagnostics"])
        assert (code == 1) == (doc["files"][0]["errors"] > 0)
        for d in doc["diagnostics"]:
            assert d["code"] in REGISTRY and d["line"] >= 1 and d["column"] >= 1
    else:
        heads = [ln for ln in out.split("\n") if ln and not ln.startswith(" ")]
        assert all(re.match(r"^.+:\d+:\d+: (error|warning): ", ln) for ln in heads), heads
        assert all(len(ln) <= 80 for ln in out.split("\n") if ln.startswith("    text  ")), out
        assert (code == 1) == any(re.match(r"^.+:\d+:\d+: error: ", ln) for ln in heads)


@settings(max_examples=30, **FAST)
@given(data=st.binary(max_size=200))
def test_random_bytes_file_cli(sandbox, data):
    target = sandbox / "bytes.folio"
    target.write_bytes(data)
    code, out, _ = _cli(["lint", "--format", "json", str(target)])
    doc = json.loads(out)
    try:
        text = data.decode("utf-8-sig")
        readable = "\x00" not in text
    except UnicodeDecodeError:
        readable = False
    assert doc["files"][0]["readable"] is readable
    assert code == (2 if not readable else 1 if doc["files"][0]["errors"] else 0)
