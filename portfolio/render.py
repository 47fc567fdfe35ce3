"""Rendering of diagnostics for people (text) and tools (JSON).

Only the CLI calls this module; the library itself never prints.
"""

from __future__ import annotations

import io
import json
import os
import textwrap
from functools import lru_cache
from pathlib import Path
from typing import Dict, Iterable, List, Optional

from .diagnostics import Diagnostic


def _split(text: str, path: str) -> List[str]:
    """Lines as the stage that made the span counts them."""
    if path.endswith(".folio") or "." not in Path(path).name:
        from .syntax import lines_of
        return lines_of(text).split("\n")                    # as the parser counts them
    return [ln.rstrip("\r\n") for ln in io.StringIO(text, newline="")]  # CSV: \r, \n or \r\n


@lru_cache(maxsize=64)
def _cached_lines(path: str, mtime_ns: int, size: int) -> Optional[List[str]]:
    # read as every input is (files.read_bytes): a device or a pipe (/dev/zero, a FIFO)
    # is refused there, never read until it ends
    from .files import InputError, read_bytes
    try:
        data = read_bytes(path)
    except (OSError, InputError):
        return None
    return _split(data.decode("utf-8-sig", errors="replace"), path)


def _lines_of(path: str) -> Optional[List[str]]:
    try:
        st = os.stat(path)   # part of the cache key: a file rewritten in place is read again
    except OSError:
        return None
    return _cached_lines(path, st.st_mtime_ns, st.st_size)


def source_line(path: str, line: int, texts: Optional[Dict[str, str]] = None) -> Optional[str]:
    if texts and path in texts:
        lines = _split(texts[path], path)
    else:
        lines = _lines_of(path)
    if not lines or not 1 <= line <= len(lines):
        return None
    return lines[line - 1]


def printable(text: str) -> str:
    """``text`` safe for a terminal: every control or otherwise unprintable
    character (ESC and its colour or cursor sequences, carriage returns, bells,
    U+2028 ...) shown as a visible escape such as ``\\x1b``.

    Everything echoed from outside (file names, CSV headers and cells quoted
    in messages, notes) goes through this before it is printed.
    """
    if text.isprintable():
        return text
    return "".join(c if c.isprintable() else c.encode("unicode_escape").decode("ascii") for c in text)


# The text layout (docs/cli.md).  The first line is what editors read:
# ``path:line:col: severity: message``.  Below it, indented, one labelled line
# each: the code, the source line with the span between >> and <<, then the
# notes (a note written "fix: ..." is labelled as the fix), wrapped under
# their label.  The lines below the first fit in WIDTH columns (only a word
# longer than that, such as a long path, overruns); no colour is needed.
WIDTH = 80
INDENT = "    "
LABEL = 6                  # "code", "text", "note", "fix" padded to this width
OPEN, CLOSE = ">>", "<<"   # around the span in the source line
_FIT = WIDTH - len(INDENT) - LABEL
_CONTEXT = 12              # characters kept on a side when a long line is cut


def _field(label: str, text: str, wrap: bool = False) -> str:
    first = f"{INDENT}{label:<{LABEL}}"
    if wrap:
        lines = textwrap.wrap(text, WIDTH, initial_indent=first, subsequent_indent=" " * len(first),
                              break_long_words=False, break_on_hyphens=False)
        if lines:
            return "\n".join(lines)
    return (first + text).rstrip()


def _cut_left(text: str, room: int) -> str:
    return text if len(text) <= room else "..." + text[len(text) - room + 3:] if room > 3 else ""


def _cut_right(text: str, room: int) -> str:
    return text if len(text) <= room else text[:room - 3] + "..." if room > 3 else ""


def excerpt(src: str, start: int, end: int, room: int = _FIT) -> str:
    """``src`` with ``src[start:end]`` between the markers, in at most ``room`` characters.

    Leading indentation is dropped; a long line keeps the span and some text
    either side, and shows what it left out as ``...``.
    """
    start = max(0, min(start, len(src)))
    end = max(start, min(end, len(src)))
    lead = min(len(src) - len(src.lstrip()), start)
    before, inner, after = src[lead:start], src[start:end], src[end:]
    room = max(room - len(OPEN) - len(CLOSE), 2 * _CONTEXT + 9)
    if len(before) + len(inner) + len(after) > room:
        keep = room - 2 * _CONTEXT
        if len(inner) > keep:
            half = (keep - 3) // 2
            inner = inner[:half] + "..." + inner[len(inner) - half:]
        left = room - len(inner)
        side = max(_CONTEXT, left - len(after))
        before = _cut_left(before, min(len(before), side))
        after = _cut_right(after, left - len(before))
    return before + OPEN + inner + CLOSE + after


def _note(note: str) -> str:
    text = printable(note)
    if text.startswith("fix: "):
        return _field("fix", text[5:], wrap=True)
    if text.startswith("note: "):
        text = text[6:]
    return _field("note", text, wrap=True)


def format_text(d: Diagnostic, texts: Optional[Dict[str, str]] = None, context: bool = True) -> str:
    sp = d.span
    out = [printable(f"{sp.path}:{sp.line}:{sp.col}: {d.severity}: {d.message}"), _field("code", d.code)]
    if context:
        src = source_line(sp.path, sp.line, texts)
        if src is not None and not (sp.line == 1 and sp.col == 1 and sp.end_col == 1):
            src = "".join(c if c.isprintable() else " " for c in src)  # tabs, U+2028...: one column each
            end = sp.end_col if sp.end_line == sp.line else len(src) + 1
            shown = excerpt(src, sp.col - 1, end - 1)
            if sp.end_line > sp.line:
                shown += f" (on to line {sp.end_line})"
            out.append(_field("text", shown))
    out.extend(_note(n) for n in d.notes)
    return "\n".join(out)


def format_json(results: Iterable) -> str:
    """One JSON document for all files: {"files": [...], "diagnostics": [...]}"""
    files = []
    diags = []
    for r in results:
        files.append({"path": r.path, "errors": len(r.errors),
                      "warnings": len(r.diagnostics) - len(r.errors), "readable": not r.unreadable})
        diags.extend(d.to_dict() for d in r.diagnostics)
    return json.dumps({"files": files, "diagnostics": diags}, indent=2)
