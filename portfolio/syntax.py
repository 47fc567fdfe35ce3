"""Stage 1: source text -> syntax tree with spans.

A Lark LALR parser with positions propagated: every tree node's ``meta`` and
every token carry line and column.  Syntax errors become ``P101``/``P102``/
``P103`` diagnostics in plain words; grammar token names never reach the user.
A word the language has retired (``RETIRED_WORDS``) is ``P104``, naming its
replacement; the file does not load (no silent alias).

The LALR tables are not built at each start: they ship in the package as
``portfolio/syntax_tables.json`` (``parser()`` says why and how), rewritten by
``python -m portfolio.syntax --regenerate`` after the grammar changes
(tests/test_syntax_tables.py fails until then).
"""

from __future__ import annotations

import difflib
import hashlib
import json
import os
import re
import sys
import threading
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Callable, Dict, Optional

import lark
from lark import Lark, Token, Tree
from lark.exceptions import UnexpectedCharacters, UnexpectedEOF, UnexpectedInput, UnexpectedToken
from lark.grammar import Rule
from lark.lexer import TerminalDef

from .diagnostics import BadTimestamp, RetiredWord, Sink, SyntaxProblem, UnclosedBlock
from .spans import Span

GRAMMAR_FILE = "portfolio.lark"


def grammar_text() -> str:
    """The grammar, from the installed package or, in a checkout, from grammar/."""
    try:
        return resources.files("portfolio.grammar").joinpath(GRAMMAR_FILE).read_text("utf-8")
    except (ModuleNotFoundError, FileNotFoundError, OSError):
        here = Path(__file__).resolve().parent.parent / "grammar" / GRAMMAR_FILE
        return here.read_text("utf-8")


class _GluedWord(Exception):
    """A keyword matched only the start of a longer word ('max' in 'maximum')."""

    def __init__(self, token: Token):
        super().__init__(str(token))
        self.token = token


_current = threading.local()
_WORD_CHAR = re.compile(r"[A-Za-z0-9_]")
_WORDY = re.compile(r"^[A-Za-z_|()?:]+$")


def _keyword_boundary(token: Token) -> Token:
    text = getattr(_current, "text", "")
    end = token.end_pos
    if end is not None and end < len(text) and _WORD_CHAR.match(text[end]):
        raise _GluedWord(token)
    return token


def _keyword_terminals(grammar: str) -> Dict[str, Callable]:
    """Lexer callbacks that keep keywords from matching the start of a longer word.

    Lark names a keyword terminal after its text in capitals ("max" -> MAX);
    the named word alternatives (ALLOWED, MODES, ...) are listed in the grammar.
    Read from the grammar's text, so building the parser stays a single pass.
    """
    names = {w.upper() for w in re.findall(r'"([A-Za-z][A-Za-z_]*)"', grammar)}
    names.update(m for m in re.findall(r'^([A-Z_]+)\s*:\s*"[a-z]+"\s*\|', grammar, flags=re.M))
    return {n: _keyword_boundary for n in names}


# How the parser is made from the grammar.  Changing one of these changes the
# tables' key, so the shipped tables stop being used until they are regenerated.
OPTIONS = {"parser": "lalr", "lexer": "contextual", "propagate_positions": True, "maybe_placeholders": False}
TABLES_FILE = "syntax_tables.json"


def grammar_key(grammar: str) -> str:
    """What the parse tables are made from besides Lark: the grammar and the options."""
    made_of = f"{sorted(OPTIONS.items())!r}\n{grammar}"
    return hashlib.sha256(made_of.encode("utf-8")).hexdigest()


def build_parser(text: str) -> Lark:
    """Lark builds the LALR tables from the grammar (most of a lint's start-up before
    the tables were shipped: docs/performance.md)."""
    return Lark(text, **OPTIONS, lexer_callbacks=_keyword_terminals(text))


@lru_cache(maxsize=1)
def parser() -> Lark:
    """The parser, from the tables shipped in the package when they were made from
    this grammar, these options and this Lark; otherwise built from the grammar.

    Lark's own ``cache=True`` is not used: it is a pickle in a user-writable
    temporary folder, and unpickling a file such a folder holds runs whatever
    it holds.  The tables are instead ``portfolio/syntax_tables.json``, package
    data beside the code (as trusted as the code), written by
    ``python -m portfolio.syntax --regenerate``: Lark's own serialized form of
    the parser (``memo_serialize``, what its standalone generator embeds),
    read back with ``Lark._load_from_dict``.  JSON, so reading it runs nothing
    whatever it holds, and it reads in milliseconds with or without a bytecode
    cache (the same literals as a Python module take longer to compile than
    Lark takes to build the tables).  Lark's standalone generator was not
    chosen: its module carries a copy of Lark's runtime whose ``Tree``,
    ``Token`` and exceptions are other classes than those of ``lark``, which
    the checker and this module use.  The lexer callbacks (keyword boundaries)
    are functions, so they are not stored: they are given again on loading.
    """
    text = grammar_text()
    stored = _tables()
    if not _fit(stored, text):
        return build_parser(text)   # tests/test_syntax_tables.py fails until they are regenerated
    return Lark._load_from_dict(stored["data"], stored["memo"], lexer_callbacks=_keyword_terminals(text))


def tables_fit(text: str) -> bool:
    """Whether the shipped tables were made from the grammar ``text``, the options and this Lark."""
    return _fit(_tables(), text)


def _fit(stored: dict, text: str) -> bool:
    # Lark's serialized form changes between its releases (1.3 added an option
    # 1.2 refuses), so tables made by another version are never read: the
    # parser is built, as before the tables were shipped.
    return stored.get("grammar_key") == grammar_key(text) and stored.get("lark_version") == lark.__version__


def _int_keys(pairs):
    # JSON keys are strings; Lark numbers its memo entries, states and tokens.
    return {int(k) if k.isdigit() else k: v for k, v in pairs}


def _tables() -> dict:
    """The shipped tables ({} when the package has none)."""
    try:
        raw = resources.files("portfolio").joinpath(TABLES_FILE).read_bytes()
    except (FileNotFoundError, OSError):
        return {}
    return json.loads(raw, object_pairs_hook=_int_keys)


def tables_text(text: str) -> str:
    """The content of ``portfolio/syntax_tables.json`` for the grammar ``text``.

    Lark numbers terminals and states differently from one build to the next
    (it orders some sets by object identity), so two regenerations need not
    give the same text; tests/test_syntax_tables.py compares the tables with
    a fresh build up to that numbering."""
    built = build_parser(text)
    data, memo = built.memo_serialize([TerminalDef, Rule])
    data["options"] = {k: v for k, v in data["options"].items() if k != "lexer_callbacks"}
    head = {"note": "Lark's LALR tables for grammar/portfolio.lark, written by "
                    "python -m portfolio.syntax --regenerate; do not edit",
            "grammar_key": grammar_key(text), "lark_version": lark.__version__}
    fields = [f"{json.dumps(k)}: {json.dumps(v, separators=(',', ':'))}"
              for k, v in [*head.items(), ("memo", memo), ("data", data)]]
    return "{" + ",\n ".join(fields) + "}\n"


def write_tables(path: Path) -> None:
    """Write the tables file (atomically: a temporary file, then rename)."""
    import tempfile   # only for regenerating

    text = tables_text(grammar_text())
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=".syntax_tables.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as out:
            out.write(text)
        os.chmod(tmp, 0o644)   # mkstemp makes it readable by its owner only
        os.replace(tmp, path)
    except BaseException:
        os.unlink(tmp)
        raise


@lru_cache(maxsize=1)
def keywords() -> frozenset:
    """Every word the language reserves somewhere (for messages and suggestions)."""
    return frozenset(w for t in parser().terminals for w in keywords_of(t.name))


@lru_cache(maxsize=1)
def fixed_keywords() -> frozenset:
    """The words the grammar spells out one by one ('max', 'per', ...), without the
    words of a choice such as ALLOWED ('allowed' or 'forbidden')."""
    return frozenset(t.pattern.value for t in parser().terminals
                     if t.pattern.type == "str" and t.pattern.value[:1].isalpha())


@lru_cache(maxsize=1)
def _statement_words() -> frozenset:
    """The words a statement starts with: what the parser accepts at the top of a file."""
    return frozenset(w for n in parser().parse_interactive("").accepts() for w in keywords_of(n))


# Plain words for the grammar's named tokens.
EXPECTED_WORDS = {
    "NAME": "a name",
    "NUMBER": "a number",
    "UNIT": "a unit (such as MW, MWh, %, h, min)",
    "STRING": 'a quoted text such as "profiles/spot.csv"',
    "TIMESTAMP": "a date and time such as 2027-03-01T00:00",
    "ALLOWED": "'allowed' or 'forbidden'",
    "MODES": "'exclusive' or 'free'",
    "RUNNING_MODE": "'charging' or 'discharging'",
    "SIGN": "'plus' or 'minus'",
    "ROUTE_KIND": "'release', 'spill', 'transfer' or 'pump'",
    "GAP_FILL": "'hold' or 'interpolate'",
    "CASES": "'cross' or 'paired'",
    "$END": "the end of the file",
}

# Words the language once used -> (the word that replaced it, what it declares).
# A retired word met where a keyword is expected is P104, never read as its
# replacement.  Where a name is expected it is an ordinary name.
RETIRED_WORDS = {
    "inflow": ("supply", "a solar, wind, river or heat supply"),
}

FOUND_WORDS = {
    "NAME": "the name '{v}'",
    "NUMBER": "the number {v}",
    "UNIT": "'{v}'",
    "STRING": "the text {v}",
    "TIMESTAMP": "the date {v}",
    "$END": "the end of the file",
}


def _terminal_words(name: str) -> str:
    if name in EXPECTED_WORDS:
        return EXPECTED_WORDS[name]
    term = parser().get_terminal(name) if name in _terminal_names() else None
    if term is not None and term.pattern.type == "str":
        return f"'{term.pattern.value}'"
    return name.lower()


@lru_cache(maxsize=1)
def _terminal_names() -> frozenset:
    return frozenset(t.name for t in parser().terminals)


def describe_expected(names) -> str:
    words = sorted({_terminal_words(n) for n in names if n not in ("COMMENT", "WS")},
                   key=lambda w: (w.startswith("a ") or w.startswith("the "), w))
    if not words:
        return "nothing more"
    if len(words) == 1:
        return words[0]
    if len(words) > 10:
        return ", ".join(words[:10]) + f", or one of {len(words) - 10} more"
    return ", ".join(words[:-1]) + " or " + words[-1]


_UNIT_WORDS = frozenset(["W", "kW", "MW", "GW", "Wh", "kWh", "MWh", "GWh", "h", "hr", "min", "s", "d", "%"])


def keywords_of(name: str):
    """The keywords a terminal stands for (none for NAME, NUMBER, ...)."""
    if name not in _terminal_names():
        return []
    pat = parser().get_terminal(name).pattern
    if pat.type == "str" and pat.value[:1].isalpha():
        return [pat.value]
    if name in EXPECTED_WORDS and "|" in pat.value and _WORDY.match(pat.value):
        return [w for w in re.split(r"[|()?:]+", pat.value) if w]
    return []


def _found(token: Token) -> str:
    if token.type == "$END":
        return "the end of the file"
    template = FOUND_WORDS.get(token.type)
    if template:
        return template.format(v=token.value)
    return f"'{token.value}'"


def span_of(path: str, node) -> Span:
    """The span of a token or of a tree's ``meta``: the one converter from Lark's
    positions (1-based columns, exclusive end) to a :class:`Span`.  Something
    with no position (an empty file's tree) is the file's first character."""
    if getattr(node, "line", None) is None or getattr(node, "empty", False):
        return Span.whole_file(path)
    end_col = node.end_column
    if end_col is None:
        end_col = node.column + len(node)
    return Span(path, node.line, node.column, node.end_line or node.line, end_col)


def _span_of_token(path: str, token: Token, text: str) -> Span:
    if token.type == "$END" or token.line is None:
        lines = _lines(text)
        while len(lines) > 1 and not lines[-1].strip():
            lines.pop()   # point at the end of the last line with text on it
        end = len(lines[-1].rstrip("\r")) + 1
        return Span(path, len(lines), end, len(lines), end)
    return span_of(path, token)


def _lines(text: str):
    """Lines as the parser counts them: only '\\n' ends a line (not form feeds, U+2028, ...)."""
    return text.split("\n")


def _open_braces(text: str) -> Optional[Span]:
    """The position of the innermost unclosed '{', ignoring comments and strings."""
    stack = []
    for lineno, line in enumerate(_lines(text), 1):
        in_str = False
        for col, ch in enumerate(line, 1):
            if ch == '"':
                in_str = not in_str
            elif in_str:
                continue
            elif ch == "#":
                break
            elif ch == "{":
                stack.append((lineno, col))
            elif ch == "}" and stack:
                stack.pop()
    if stack:
        line, col = stack[-1]
        return (line, col)
    return None


_UNIT_NOTE = "note: every quantity carries a unit: MW, kW, GW, MWh, kWh, GWh, %, h, min, or 'per MWh' for money"
_TIMESTAMP_LIKE = re.compile(r"\d{4}-\d")
_TAIL = 256   # characters before a token searched for "number, then keyword"
_NUMBER_THEN_WORD = re.compile(r"([-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?)\s+([A-Za-z_][A-Za-z0-9_]*)\s*$")


def _number_before_keyword(text: str, tok: Token, prev: Optional[Token]):
    """'energy 40 charge max ...': the keyword after 40 was read as its unit."""
    if tok.start_pos is None:
        return None
    # Search only the tail before the token (a regex search over the whole
    # prefix is quadratic in a long digit run); a number cut by the window is
    # followed back to its first digit, in linear time.
    lo = max(0, tok.start_pos - _TAIL)
    m = _NUMBER_THEN_WORD.search(text, lo, tok.start_pos)
    if not m or m.group(2) not in keywords():
        return None
    pos = m.start(1)
    if pos == lo:
        while pos > 0 and (text[pos - 1].isdigit() or text[pos - 1] in ".eE+-"):
            pos -= 1
    line = text.count("\n", 0, pos) + 1
    col = pos - (text.rfind("\n", 0, pos) + 1) + 1
    return text[pos:m.end(1)], pos, line, col


_WORD = re.compile(r"[A-Za-z0-9_]+")


def _retired(text: str, path: str, tok: Token, sink: Sink) -> bool:
    """Report a retired word starting at ``tok`` (P104); False when it is none."""
    if tok.start_pos is None or tok.line is None:
        return False
    m = _WORD.match(text, tok.start_pos)
    word = m.group(0) if m else ""
    if word not in RETIRED_WORDS:
        return False
    new, what = RETIRED_WORDS[word]
    sink.add(RetiredWord, Span(path, tok.line, tok.column, tok.line, tok.column + len(word)),
             f"'{word}' is no longer a word of the language: {what} is declared with '{new}'",
             f"fix: write '{new}' in place of '{word}'")
    return True


def lines_of(text: str) -> str:
    """``text`` with every line ending as ``\n``: Windows (CR LF) and old Mac
    (CR alone) files read like any other.  The parser's line numbers count
    these lines; the renderer splits the file the same way."""
    if "\r" not in text:
        return text
    return text.replace("\r\n", "\n").replace("\r", "\n")


def parse(text: str, path: str, sink: Sink) -> Optional[Tree]:
    """Parse ``text``; on failure add one diagnostic and return None."""
    _current.text = text
    try:
        return parser().parse(text)
    except _GluedWord as glued:
        tok = glued.token
        if _retired(text, path, tok, sink):
            return None
        m = re.compile(r"[A-Za-z0-9_]+").match(text, tok.start_pos)
        word = m.group(0) if m else str(tok)
        if word in keywords():
            # a whole keyword out of place ('min 1 when running': 'when' was taken as the unit of 1)
            unitless = _number_before_keyword(text, tok, None)
            if unitless is not None:
                num, _, line, col = unitless
                sink.add(SyntaxProblem, Span(path, line, col, line, col + len(num)),
                         f"the number {num} needs a unit", _UNIT_NOTE)
            else:
                sink.add(SyntaxProblem, Span(path, tok.line, tok.column, tok.line, tok.column + len(word)),
                         f"'{word}' is not expected here")
            return None
        close = difflib.get_close_matches(word, sorted(keywords()), n=1, cutoff=0.6)
        hint = f"; did you mean '{close[0]}'?" if close else ""
        sink.add(SyntaxProblem, Span(path, tok.line, tok.column, tok.line, tok.column + len(word)),
                 f"'{word}' is not a word the language knows here{hint}")
        return None
    except UnexpectedInput as err:
        _report(err, text, path, sink)
        return None
    except RecursionError:  # pragma: no cover - absurdly deep input
        sink.add(SyntaxProblem, Span.whole_file(path), "the file is nested too deeply to read")
        return None
    finally:
        _current.text = ""


def _report(err: UnexpectedInput, text: str, path: str, sink: Sink) -> None:
    if isinstance(err, UnexpectedToken) and err.token.type == "$END" or isinstance(err, UnexpectedEOF):
        brace = _open_braces(text)
        if brace is not None:
            line, col = brace
            sink.add(UnclosedBlock, Span(path, line, col, line, col + 1),
                     "this '{' is never closed", "note: add a matching '}' to end the block")
            return
    if isinstance(err, UnexpectedToken):
        tok = err.token
        if tok.type in ("NAME", "UNIT") and _retired(text, path, tok, sink):
            return
        span = _span_of_token(path, tok, text)
        # What the parser accepts here once pending reductions are made; the raw
        # LALR lookahead set also lists words of unrelated blocks.
        try:
            expected = set(getattr(err, "accepts", None) or ()) or set(err.expected)
        except Exception:  # pragma: no cover - accepts() replays the parser
            expected = set(err.expected)
        prev = err.token_history[-1] if getattr(err, "token_history", None) else None
        if (tok.type in ("UNIT", "NAME") and "UNIT" not in expected and prev is not None
                and prev.type == "UNIT" and str(tok.value) in _UNIT_WORDS):
            # e.g. "40 MW MWh": a second unit
            sink.add(SyntaxProblem, span, f"unexpected '{tok.value}' after the unit '{prev.value}'")
            return
        at = text[tok.start_pos:tok.start_pos + 6] if tok.start_pos is not None else ""
        if tok.type == "NUMBER" and _TIMESTAMP_LIKE.match(at) and "TIMESTAMP" in expected:
            word = re.compile(r"[0-9:.TZ+-]+").match(text, tok.start_pos).group(0)
            sink.add(BadTimestamp, Span(path, tok.line, tok.column, tok.line, tok.column + len(word)),
                     f"'{word}' is not a date and time such as 2027-03-01T00:00 "
                     "(four-digit year, two-digit month and day)")
            return
        if (tok.type == "NUMBER" and prev is not None and prev.type == "TIMESTAMP"
                and re.match(r"\d{1,2}:\d{2}", text[tok.start_pos:])):
            sink.add(BadTimestamp, _span_of_token(path, prev, text),
                     f"'{prev.value} {text[tok.start_pos:tok.start_pos + 5].strip()}' is not one date and time: "
                     "join the date and the time with 'T', as in 2027-03-01T06:30")
            return
        if tok.type in ("NAME", "UNIT") and "NAME" not in expected and tok.start_pos is not None:
            # a misspelt keyword, e.g. 'dischrge max 2 MW'
            words = sorted(w for n in expected for w in keywords_of(n))
            close = difflib.get_close_matches(str(tok.value), words, n=1, cutoff=0.75)
            if close and str(tok.value) not in words:
                sink.add(SyntaxProblem, span, f"'{tok.value}' is not a word the language knows here; "
                         f"did you mean '{close[0]}'?", f"note: expected {describe_expected(expected)}")
                return
        unitless = _number_before_keyword(text, tok, prev)
        if unitless is not None:
            num, pos, line, col = unitless
            sink.add(SyntaxProblem, Span(path, line, col, line, col + len(num)),
                     f"the number {num} needs a unit",
                     _UNIT_NOTE)
            return
        msg = f"expected {describe_expected(expected)}, found {_found(tok)}"
        notes = []
        brace = _open_braces(text[:tok.start_pos]) if tok.start_pos is not None else None
        if brace is not None and str(tok.value) in _statement_words():
            notes.append(f"note: is the '{{' at line {brace[0]}, column {brace[1]} closed?")
        if "UNIT" in expected and prev is not None and prev.type == "NUMBER":
            msg = f"the number {prev.value} needs a unit, found {_found(tok)}"
            notes.append(_UNIT_NOTE)
            span = _span_of_token(path, prev, text)
        sink.add(SyntaxProblem, span, msg, *notes)
        return
    if isinstance(err, UnexpectedCharacters):
        line, col = err.line, err.column
        ch = text[err.pos_in_stream] if 0 <= err.pos_in_stream < len(text) else "?"
        span = Span(path, line, col, line, col + 1)
        if ch == '"':
            sink.add(SyntaxProblem, span, "this text is not closed with '\"' on the same line")
            return
        if ch.isdigit() and _TIMESTAMP_LIKE.match(text[err.pos_in_stream:err.pos_in_stream + 6]):
            sink.add(BadTimestamp, span, "this is not a date and time in ISO 8601 form such as 2027-03-01T00:00")
            return
        allowed = getattr(err, "allowed", None) or ()
        what = f", expected {describe_expected(allowed)}" if allowed else ""
        shown = repr(ch) if ch.isprintable() else f"U+{ord(ch):04X}"
        sink.add(SyntaxProblem, span, f"unexpected character {shown}{what}")
        return
    sink.add(SyntaxProblem, Span.whole_file(path), f"cannot read the file: {err}")  # pragma: no cover


if __name__ == "__main__":      # python -m portfolio.syntax --regenerate: after editing the grammar
    if sys.argv[1:] != ["--regenerate"]:
        sys.exit("usage: python -m portfolio.syntax --regenerate")
    write_tables(Path(__file__).with_name(TABLES_FILE))
    sys.exit(0)
