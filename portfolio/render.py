"""Rendering of diagnostics for people (text) and tools (JSON).

Only the CLI calls this module; the library itself never prints.
"""

from __future__ import annotations

import json
from functools import lru_cache
from pathlib import Path
from typing import Dict, Iterable, List, Optional

from .diagnostics import Diagnostic


@lru_cache(maxsize=64)
def _lines_of(path: str) -> Optional[List[str]]:
    try:
        return Path(path).read_text("utf-8-sig", errors="replace").splitlines()
    except OSError:
        return None


def source_line(path: str, line: int, texts: Optional[Dict[str, str]] = None) -> Optional[str]:
    if texts and path in texts:
        lines = texts[path].splitlines()
    else:
        lines = _lines_of(path)
    if not lines or not 1 <= line <= len(lines):
        return None
    return lines[line - 1]


def format_text(d: Diagnostic, texts: Optional[Dict[str, str]] = None, context: bool = True) -> str:
    sp = d.span
    head = f"{sp.path}:{sp.line}:{sp.col}: {d.severity}[{d.code}]: {d.message}"
    out = [head]
    if context:
        src = source_line(sp.path, sp.line, texts)
        if src is not None and not (sp.line == 1 and sp.col == 1 and sp.end_col == 1):
            src = src.replace("\t", " ")
            end = sp.end_col if sp.end_line == sp.line else len(src) + 1
            width = max(1, min(end, len(src) + 1) - sp.col)
            gutter = f"{sp.line:>5} | "
            out.append(gutter + src)
            out.append(" " * (len(gutter) - 2) + "| " + " " * (sp.col - 1) + "^" + "~" * (width - 1))
    for note in d.notes:
        out.append(f"  = {note}")
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
