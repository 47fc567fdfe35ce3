"""The TextMate grammar (editors/textmate/portfolio.tmLanguage.json) against the parser.

A small tokeniser runs the grammar's patterns as an editor does, line by
line: at each place the pattern whose match starts first wins (the earlier
pattern on a tie).  Over every example and every lint case that parses: no
character but spaces is left unmatched, and each token the parser reads has
the scope its kind calls for (a keyword is a keyword, a number a number, a
comment a comment).  The file is what editors/textmate/make_grammar.py makes
from the parser now.
"""

from __future__ import annotations

import importlib.util
import json
import re
from pathlib import Path

import pytest

from portfolio.diagnostics import Sink
from portfolio.syntax import fixed_keywords, keywords, lines_of, parse, parser

ROOT = Path(__file__).resolve().parents[1]
GRAMMAR = ROOT / "editors" / "textmate" / "portfolio.tmLanguage.json"
FILES = sorted((ROOT / "examples").glob("*/*.folio")) + sorted((ROOT / "tests" / "lint_cases").glob("*.folio"))


def _maker():
    spec = importlib.util.spec_from_file_location("make_grammar", ROOT / "editors" / "textmate" / "make_grammar.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def _rules(grammar: dict):
    """The grammar's patterns in order, includes resolved: (regex, name, captures)."""
    out = []

    def walk(items):
        for item in items:
            if "include" in item:
                walk([grammar["repository"][item["include"].lstrip("#")]])
            elif "patterns" in item:
                walk(item["patterns"])
            else:
                caps = {int(k): v["name"] for k, v in item.get("captures", {}).items()}
                out.append((re.compile(item["match"]), item.get("name"), caps))
    walk(grammar["patterns"])
    return out


def scopes(line: str, rules):
    """Each character's scope ('' where no pattern matched it)."""
    got = [""] * len(line)
    pos = 0
    while pos < len(line):
        best = None
        for rx, name, caps in rules:
            m = rx.search(line, pos)
            if m and m.end() > m.start() and (best is None or m.start() < best[0].start()):
                best = (m, name, caps)
        if best is None:
            break
        m, name, caps = best
        for i in range(m.start(), m.end()):
            got[i] = name or "(matched)"
        for g, cap in caps.items():
            if m.start(g) >= 0:
                for i in range(m.start(g), m.end(g)):
                    got[i] = cap
        pos = m.end()
    return got


@pytest.fixture(scope="module")
def rules():
    return _rules(json.loads(GRAMMAR.read_text("utf-8")))


def test_the_grammar_is_made_from_the_parser_now():
    assert json.loads(GRAMMAR.read_text("utf-8")) == _maker().grammar(), \
        "run python editors/textmate/make_grammar.py"


def test_every_keyword_is_in_the_grammar(rules):
    for word in keywords():
        assert any(rx.fullmatch(word) and (name or "").startswith(("keyword.", "constant.language."))
                   for rx, name, _ in rules), word


def _parsed(path: Path):
    try:
        text = lines_of(path.read_bytes().decode("utf-8-sig"))
    except UnicodeDecodeError:
        return None
    if parse(text, str(path), Sink()) is None:
        return None
    return text


EXPECTED = {"NUMBER": "constant.numeric.", "STRING": "string.quoted.", "TIMESTAMP": "constant.other.timestamp.",
            "NAME": "variable.other."}


@pytest.mark.parametrize("path", [p for p in FILES if _parsed(p) is not None], ids=lambda p: p.stem)
def test_every_file_is_highlighted_whole_and_by_kind(path, rules):
    text = _parsed(path)
    lines = text.split("\n")
    got = [scopes(line, rules) for line in lines]
    for n, (line, sc) in enumerate(zip(lines, got), 1):
        loose = [i + 1 for i, ch in enumerate(line) if not ch.isspace() and not sc[i]]
        assert not loose, f"{path.name}:{n}: columns {loose} matched by no pattern: {line!r}"
    fixed, choice = fixed_keywords(), keywords() - fixed_keywords()
    for tok in parser().parse_interactive(text).iter_parse():
        scope = got[tok.line - 1][tok.column - 1]
        value = str(tok)
        if value in fixed and tok.type not in ("NAME", "UNIT"):
            want = "keyword."
        elif value in choice and tok.type not in ("NAME", "UNIT"):
            want = "constant.language."
        elif tok.type == "UNIT" and (value == "%" or value.isalpha()) and scope.startswith("support.constant.unit"):
            continue
        else:
            want = EXPECTED.get(tok.type)
        if want is not None and tok.type != "NAME":
            assert scope.startswith(want), f"{path.name}:{tok.line}:{tok.column}: {value!r} is {scope!r}"
    for n, line in enumerate(lines):
        for m in re.finditer(r'"[^"\n]*"|#.*', line):
            if m.group(0).startswith("#"):
                assert all(s.startswith("comment.") for s in got[n][m.start():m.end()]), (path.name, n + 1)
