"""The canonical layout of a portfolio file (``portfolio fmt``; docs/fmt.md).

The layout is driven by the parse tree, not by a rule per construct, so a new
grammar rule is laid out sensibly without code here:

* The items of a block are the children of the smallest tree node holding its
  ``{`` and ``}`` (the statements of the file are the children of the root).
  Each item goes on its own line, indented two spaces per block; a keyword the
  tree does not keep (``export``, ``max``) belongs to the item it leads.
* An item's tokens are joined by single spaces, except before ``,`` and
  ``]``, after ``[``, and between a number and ``%`` (``95%``).  A list
  longer than :data:`WIDTH` columns wraps, filling each line.
* A block holding at most one item, no comment and no inner block stays on
  its line when it fits (``storage b like p { energy 6 MWh }``); an empty
  block is ``{}``.
* Comments are kept, in order: one after code stays after that line's code,
  and the comments of consecutive lines at one indent are aligned two spaces
  after the longest code among them; one on a line of its own stays on a line of its
  own at its item's indent.  A comment inside an item breaks it there and its
  rest goes on the next line, four spaces further in.
* Blank lines between items are kept, at most one in a row; none at the
  start or end of a block or of the file.
* Numbers are spelled plainly (``+5`` -> ``5``, ``.5`` -> ``0.5``, ``2.50``
  -> ``2.5``, ``1E+03`` -> ``1e3``) and a unit's other spellings become its
  symbol (``hr`` -> ``h``; a unit's name, such as ``day``, stays): the same
  value and the same unit, so the checked model is the same.

Nothing here prints: :func:`format_source` and :func:`format_file` return a
:class:`Formatted`; ``portfolio/cli.py`` prints and writes.  Before returning,
the result is parsed again and its tokens and comments compared with the
input's: a layout that would change the tokens is a programming error
(:class:`LayoutError`), never written.
"""

from __future__ import annotations

import bisect
import difflib
import re
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Dict, List, Optional, Tuple, Union

from lark import Token, Tree

from .diagnostics import Diagnostic, Sink, UnreadableFile
from .spans import Span
from .syntax import lines_of, parse, parser
from .units_table import WORDS

INDENT = 2          # spaces per block
CONTINUE = 4        # further spaces for the rest of an item broken by a comment or a long list
WIDTH = 100         # a one-item block stays inline, and a list fills its lines, within this
COMMENT_GAP = 2     # spaces between the longest code of a run of lines and their comments

_NO_SPACE_BEFORE = frozenset([",", "]", ")"])
_NO_SPACE_AFTER = frozenset(["[", "("])


class LayoutError(RuntimeError):
    """The layout changed the file's tokens or comments (a bug here, never the user's)."""


@dataclass
class Formatted:
    """What ``fmt`` made of one file: ``text`` is None when the file was not read or did not parse."""

    path: str
    original: Optional[str] = None
    text: Optional[str] = None
    diagnostics: List[Diagnostic] = field(default_factory=list)
    unreadable: bool = False

    @property
    def ok(self) -> bool:
        return self.text is not None

    @property
    def changed(self) -> bool:
        return self.text is not None and self.text != self.original

    def diff(self) -> str:
        """A unified diff from the file to its canonical layout ('' when unchanged)."""
        if not self.changed:
            return ""
        return "".join(difflib.unified_diff(
            self.original.splitlines(keepends=True), self.text.splitlines(keepends=True),
            fromfile=self.path, tofile=f"{self.path} (formatted)"))


# ---- spelling ---------------------------------------------------------------------

_NUMBER = re.compile(r"([-+]?)(\d*)(?:\.(\d*))?(?:[eE]([-+]?)(\d+))?$")


def number(text: str) -> str:
    """The plain spelling of a number token; the same value (``float`` of both agree)."""
    m = _NUMBER.match(text)
    if not m:
        return text
    sign, whole, frac, esign, exp = m.groups()
    whole = whole.lstrip("0") or "0"
    frac = (frac or "").rstrip("0")
    out = ("-" if sign == "-" else "") + whole + ("." + frac if frac else "")
    if exp is not None:
        exp = exp.lstrip("0")
        if exp:
            out += "e" + ("-" if esign == "-" else "") + exp
    return out


@lru_cache(maxsize=1)
def _unit_spellings() -> Dict[str, str]:
    """Each other spelling of a unit -> its symbol ('hr' -> 'h').  A unit's name and its
    symbol stay as written ('per day' and 'per d' both read well); the symbol is the
    shortest word for the unit other than its name."""
    words: Dict[str, List[str]] = {}
    for word, unit in WORDS.items():
        words.setdefault(unit, []).append(word)
    out: Dict[str, str] = {}
    for unit, ws in words.items():
        others = sorted((w for w in ws if w != unit), key=lambda w: (len(w), w))
        for w in others[1:]:
            out[w] = others[0]
    return out


def spelled(tok: Token) -> str:
    """A token as the layout writes it."""
    if tok.type == "NUMBER":
        return number(str(tok))
    if tok.type == "UNIT":
        return _unit_spellings().get(str(tok), str(tok))
    return str(tok)


def _spaced(prev: Optional[Token], tok: Token, text: str) -> bool:
    """Whether a space goes between ``prev`` and ``tok`` (written ``text``) on one line."""
    return not (prev is None or text in _NO_SPACE_BEFORE or prev.value in _NO_SPACE_AFTER
                or (tok.type == "UNIT" and text == "%" and prev.type == "NUMBER"))


# ---- the token stream and its comments ---------------------------------------------

@dataclass(frozen=True)
class Comment:
    text: str            # from '#', trailing spaces dropped
    trailing: bool       # on the line of the token before it
    blank: bool          # a blank line before it


@dataclass
class Source:
    """A parsed text: every token (keywords too), the comments and blank lines between them."""

    tree: Tree
    tokens: List[Token]
    comments: Dict[int, List[Comment]]    # gap k (before token k; k == len(tokens): the end) -> comments
    blank: Dict[int, bool]                # gap k -> a blank line just before token k

    @classmethod
    def read(cls, text: str, tree: Tree) -> "Source":
        tokens = list(parser().parse_interactive(text).iter_parse())
        comments: Dict[int, List[Comment]] = {}
        blank: Dict[int, bool] = {}
        prev_end = 0
        for k in range(len(tokens) + 1):
            start = tokens[k].start_pos if k < len(tokens) else len(text)
            gap = text[prev_end:start]
            found: List[Comment] = []
            pos = 0
            for m in re.finditer(r"#[^\n]*", gap):
                before = gap[pos:m.start()]
                found.append(Comment(m.group(0).rstrip(), trailing=k > 0 and not found and "\n" not in before,
                                     blank=before.count("\n") >= 2))
                pos = m.end()
            if found:
                comments[k] = found
            blank[k] = gap[pos:].count("\n") >= 2
            if k < len(tokens):
                prev_end = tokens[k].end_pos
        return cls(tree, tokens, comments, blank)

    def signature(self) -> Tuple[list, list]:
        """What the layout must keep: the tokens as spelled, and the comments' text in order."""
        toks = [(t.type, spelled(t)) for t in self.tokens]
        notes = [c.text for k in sorted(self.comments) for c in self.comments[k]]
        return toks, notes


# ---- the output lines ----------------------------------------------------------------

@dataclass
class Line:
    indent: int
    code: str = ""
    comment: Optional[str] = None


class _Writer:
    def __init__(self):
        self.lines: List[Optional[Line]] = []     # None: a blank line
        self.cur: Optional[Line] = None
        self.want_blank = False

    def open(self, indent: int) -> None:
        self.close()
        if self.want_blank and self.lines:
            self.lines.append(None)
        self.want_blank = False
        self.cur = Line(indent)

    def close(self) -> None:
        if self.cur is not None and (self.cur.code or self.cur.comment is not None):
            self.lines.append(self.cur)
        self.cur = None

    def width(self) -> int:
        return 0 if self.cur is None else self.cur.indent + len(self.cur.code)

    def put(self, text: str, space: bool) -> None:
        self.cur.code += (" " if space and self.cur.code else "") + text

    def trailing(self, text: str) -> None:
        """A comment after the code of the line being written, or else of the last line written."""
        target = self.cur if self.cur is not None and self.cur.code else None
        if target is None and self.lines and self.lines[-1] is not None and self.lines[-1].code:
            target = self.lines[-1]
        if target is None or target.comment is not None:
            self.own(text, self.cur.indent if self.cur is not None else 0, False)
            return
        target.comment = text
        if target is self.cur:
            self.close()

    def own(self, text: str, indent: int, blank: bool) -> None:
        self.close()
        if blank and self.lines:
            self.want_blank = True
        self.open(indent)
        self.cur.comment = text
        self.close()

    def text(self) -> str:
        lines = self.lines
        while lines and lines[-1] is None:
            lines.pop()
        out: List[str] = []
        i = 0
        while i < len(lines):
            run = [i]
            if lines[i] is not None and lines[i].code and lines[i].comment is not None:
                while (run[-1] + 1 < len(lines) and lines[run[-1] + 1] is not None
                       and lines[run[-1] + 1].code and lines[run[-1] + 1].comment is not None
                       and lines[run[-1] + 1].indent == lines[i].indent):
                    run.append(run[-1] + 1)
                col = max(lines[j].indent + len(lines[j].code) for j in run) + COMMENT_GAP
                for j in run:
                    ln = lines[j]
                    code = " " * ln.indent + ln.code
                    out.append(code.ljust(col) + ln.comment)
                i = run[-1] + 1
                continue
            ln = lines[i]
            if ln is None:
                out.append("")
            else:
                out.append(" " * ln.indent + (ln.code or ln.comment or ""))
            i += 1
        return "\n".join(out) + "\n" if out else ""


# ---- layout ---------------------------------------------------------------------------

class _Layout:
    def __init__(self, src: Source):
        self.src = src
        self.toks = src.tokens
        self.starts = [t.start_pos for t in self.toks]
        self.match: Dict[int, int] = {}
        stack: List[int] = []
        for k, t in enumerate(self.toks):
            if t.value == "{" and t.type != "STRING":
                stack.append(k)
            elif t.value == "}" and t.type != "STRING" and stack:
                self.match[stack.pop()] = k
        self.w = _Writer()
        self.depth = 0      # '[' depth

    # -- where things are
    def _range(self, node) -> Optional[Tuple[int, int]]:
        if isinstance(node, Token):
            k = bisect.bisect_left(self.starts, node.start_pos)
            return (k, k)
        meta = node.meta
        if getattr(meta, "empty", True):
            return None
        a = bisect.bisect_left(self.starts, meta.start_pos)
        b = bisect.bisect_left(self.starts, meta.end_pos) - 1
        return (a, b) if a <= b else None

    def _holder(self, lo: int, hi: int) -> Tree:
        """The smallest tree node holding tokens lo and hi."""
        node = self.src.tree
        while True:
            for c in node.children:
                if isinstance(c, Tree):
                    r = self._range(c)
                    if r is not None and r[0] <= lo and hi <= r[1]:
                        node = c
                        break
            else:
                return node

    def items(self, lo: int, hi: int, holder: Tree) -> List[Tuple[int, int]]:
        """The items between tokens lo and hi (inclusive): one per child of ``holder``,
        each from the token after the item before it (keywords the tree drops lead their item)."""
        ends = []
        for c in holder.children:
            r = self._range(c)
            if r is not None and lo <= r[0] and r[1] <= hi:
                ends.append(r[1])
        if lo > hi:
            return []
        if not ends or ends[-1] != hi:
            if ends:
                ends[-1] = hi
            else:
                ends = [hi]
        out, a = [], lo
        for b in ends:
            if b >= a:
                out.append((a, b))
                a = b + 1
        return out

    # -- writing
    def run(self) -> str:
        n = len(self.toks)
        self.sequence(self.items(0, n - 1, self.src.tree), 0, end_gap=n)
        return self.w.text()

    def sequence(self, items: List[Tuple[int, int]], indent: int, end_gap: int) -> None:
        """Items one per line at ``indent``, each after the comments before it."""
        first = True        # nothing of the block written yet: no blank line
        for a, b in items:
            first = self.gap_comments(a, indent, first)
            if self.src.blank.get(a) and not first:
                self.w.want_blank = True
            self.w.open(indent)
            self.item(a, b, indent)
            self.w.close()
            first = False
        self.gap_comments(end_gap, indent, first)
        self.w.want_blank = False

    def gap_comments(self, k: int, indent: int, first: bool) -> bool:
        """The comments before token ``k``; whether the block is still empty after them."""
        for c in self.src.comments.get(k, ()):
            if c.trailing:
                self.w.trailing(c.text)
            else:
                self.w.own(c.text, indent, c.blank and not first)
                first = False
        return first

    def item(self, a: int, b: int, indent: int) -> None:
        k = a
        prev: Optional[Token] = None
        while k <= b:
            if k > a and k in self.src.comments:
                self.inner_comments(k, indent)
                prev = None
            tok = self.toks[k]
            if k in self.match and self.match[k] <= b:
                self.block(k, self.match[k], indent)
                prev = self.toks[self.match[k]]
                k = self.match[k] + 1
                continue
            self.token(tok, prev, indent)
            prev = tok
            k += 1

    def inner_comments(self, k: int, indent: int) -> None:
        """Comments inside an item: the item goes on after them, further in."""
        for c in self.src.comments[k]:
            if c.trailing:
                self.w.trailing(c.text)
            else:
                self.w.own(c.text, indent + CONTINUE, False)
        self.w.open(indent + CONTINUE)

    def token(self, tok: Token, prev: Optional[Token], indent: int) -> None:
        text = spelled(tok)
        space = _spaced(prev, tok, text)
        if self.w.cur is None:
            self.w.open(indent + CONTINUE)
        if (self.depth > 0 and text not in _NO_SPACE_BEFORE and self.w.cur.code
                and self.w.width() + int(space) + len(text) > WIDTH):
            self.w.open(indent + CONTINUE)
            space = False
        self.w.put(text, space)
        if text in _NO_SPACE_AFTER:
            self.depth += 1
        elif text in ("]", ")") and self.depth:
            self.depth -= 1

    def flat(self, a: int, b: int) -> str:
        out, prev = "", None
        for k in range(a, b + 1):
            tok = self.toks[k]
            text = spelled(tok)
            out += (" " if _spaced(prev, tok, text) else "") + text
            prev = tok
        return out

    def block(self, i: int, j: int, indent: int) -> None:
        items = self.items(i + 1, j - 1, self._holder(i, j))
        quiet = not any(k in self.src.comments for k in range(i + 1, j + 1))
        if quiet and not items:
            self.w.put("{}", True)
            return
        if quiet and len(items) == 1 and not any(k in self.match for k in range(i + 1, j)):
            inline = "{ " + self.flat(i + 1, j - 1) + " }"
            if self.w.width() + 1 + len(inline) <= WIDTH:
                self.w.put(inline, True)
                return
        self.w.put("{", True)
        if i + 1 in self.src.comments and self.src.comments[i + 1][0].trailing:
            self.w.trailing(self.src.comments[i + 1][0].text)
            rest = self.src.comments[i + 1][1:]
            if rest:
                self.src.comments[i + 1] = rest
            else:
                del self.src.comments[i + 1]
        self.w.close()
        self.sequence(items, indent + INDENT, end_gap=j)
        self.w.open(indent)
        self.w.put("}", False)


# ---- the front door ----------------------------------------------------------------------

def layout(text: str, tree: Tree) -> str:
    """The canonical layout of ``text`` (already normalised by ``lines_of``), whose parse tree is ``tree``."""
    src = Source.read(text, tree)
    want = src.signature()
    out = _Layout(Source.read(text, tree)).run()
    sink = Sink()
    again = parse(out, "<formatted>", sink)
    if again is None or Source.read(out, again).signature() != want:
        raise LayoutError("the layout changed the file's tokens or comments")
    return out


def format_source(text: str, path: str = "<text>") -> Formatted:
    """The canonical layout of ``text``; on a syntax error, its diagnostics and no text."""
    sink = Sink()
    norm = lines_of(text)
    tree = parse(norm, path, sink)
    if tree is None:
        return Formatted(path, text, None, list(sink.items))
    return Formatted(path, text, layout(norm, tree))


def format_file(path: Union[str, Path]) -> Formatted:
    """Read ``path`` (as lint reads it) and lay it out; nothing is written."""
    from .api import read_source

    text, problem = read_source(path)
    if problem is not None:
        return Formatted(str(path), diagnostics=[problem], unreadable=True)
    if "\x00" in text:
        return Formatted(str(path), diagnostics=[UnreadableFile(
            Span.whole_file(str(path)), f"cannot read '{path}': it holds binary data")], unreadable=True)
    return format_source(text, str(path))
