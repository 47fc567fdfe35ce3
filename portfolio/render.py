"""Rendering of diagnostics for people (text) and tools (JSON).

Only the CLI calls this module; the library itself never prints.
"""

from __future__ import annotations

import io
import json
import os
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
    try:
        return _split(Path(path).read_text("utf-8-sig", errors="replace"), path)
    except OSError:
        return None


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


def format_text(d: Diagnostic, texts: Optional[Dict[str, str]] = None, context: bool = True) -> str:
    sp = d.span
    head = printable(f"{sp.path}:{sp.line}:{sp.col}: {d.severity}[{d.code}]: {d.message}")
    out = [head]
    if context:
        src = source_line(sp.path, sp.line, texts)
        if src is not None and not (sp.line == 1 and sp.col == 1 and sp.end_col == 1):
            src = "".join(c if c.isprintable() else " " for c in src)  # tabs, U+2028...: one column each
            end = sp.end_col if sp.end_line == sp.line else len(src) + 1
            width = max(1, min(end, len(src) + 1) - sp.col)
            gutter = f"{sp.line:>5} | "
            out.append(gutter + src)
            out.append(" " * (len(gutter) - 2) + "| " + " " * (sp.col - 1) + "^" + "~" * (width - 1))
    for note in d.notes:
        out.append(f"  = {printable(note)}")
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
