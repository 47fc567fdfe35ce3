"""The one shared namespace: declaring names, finding them, suggesting close ones.

A name may be declared once, in any letter case once (output files are named
after it), and not as one of the names the dispatch writes itself.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from typing import Dict, Optional, Tuple

from ..diagnostics import DuplicateName, DuplicateSetting, NameCaseClash, NameTooLong, ReservedName, Sink, UnknownName, WrongNameKind
from ..contract import RESERVED_NAMES
from ..spans import Span
from .tree import Word

# an asset's output file is "<name>.parquet": 255 bytes at most on common file systems
MAX_NAME_BYTES = 255 - len(".parquet")


@dataclass
class Decl:
    """A declared name: what it names and where."""
    kind: str           # "price", "demand", "supply", "connection", "site", "storage", "preset"
    span: Span


def suggest(name: str, candidates) -> str:
    close = difflib.get_close_matches(name, list(candidates), n=1, cutoff=0.6)
    return f"; did you mean '{close[0]}'?" if close else ""


def a(word: str) -> str:
    """'a storage', 'an import'."""
    return ("an " if word[:1] in "aeiou" else "a ") + word


class Names:
    def __init__(self, sink: Sink):
        self.sink = sink
        self.decls: Dict[str, Decl] = {}
        self._folded: Dict[str, str] = {}     # casefolded name -> the name as declared

    def __contains__(self, name: str) -> bool:
        return name in self.decls

    def __getitem__(self, name: str) -> Decl:
        return self.decls[name]

    def declare(self, word: Word, kind: str) -> bool:
        name, sp = word.text, word.span
        if name.lower() in RESERVED_NAMES:
            self.sink.add(ReservedName, sp, f"'{name}' is reserved: dispatch writes its own {name.lower()} file",
                          "note: choose another name")
            return False
        if name in self.decls:
            first = self.decls[name]
            self.sink.add(DuplicateName, sp, f"'{name}' is already declared (as {a(first.kind)})",
                          f"note: first declared at {first.span}")
            return False
        if len(name.encode()) > MAX_NAME_BYTES:
            self.sink.add(NameTooLong, sp, f"the name '{name[:40]}...' is {len(name)} characters "
                          f"long; an output file is named after it, so at most {MAX_NAME_BYTES}",
                          "note: choose a shorter name")
            return False
        other = self._folded.get(name.casefold())
        if other is not None:
            self.sink.add(NameCaseClash, sp, f"'{name}' differs from '{other}' only in letter case; their "
                          f"output files would overwrite each other where file names ignore case",
                          f"note: '{other}' is declared at {self.decls[other].span}; rename one of them")
            return False
        self.decls[name] = Decl(kind, sp)
        self._folded[name.casefold()] = name
        return True

    def same_but_case(self, name: str) -> Optional[str]:
        """The declared name that differs from ``name`` only in letter case, if any."""
        other = self._folded.get(name.casefold())
        return other if other is not None and other != name else None

    def ref(self, word: Word, want: Tuple[str, ...], what: str) -> Optional[str]:
        """The name ``word`` refers to, when it is declared as one of ``want``."""
        nm = word.text
        d = self.decls.get(nm)
        if d is None:
            pool = [n for n, x in self.decls.items() if x.kind in want]
            self.sink.add(UnknownName, word.span, f"unknown {what} '{nm}'{suggest(nm, pool)}")
            return None
        if d.kind not in want:
            self.sink.add(WrongNameKind, word.span, f"'{nm}' is {a(d.kind)}, not {a(what)}",
                          f"note: '{nm}' is declared at {d.span}")
            return None
        return nm


def listed_once(sink: Sink, named) -> list:
    """The names of a written list, in order, each once: ``named`` holds (name, span)
    pairs (name None where it did not resolve, already reported); a repeat is ``P203``."""
    out, seen = [], set()
    for nm, span in named:
        if nm is None:
            continue
        if nm in seen:
            sink.add(DuplicateSetting, span, f"'{nm}' is listed twice")
            continue
        seen.add(nm)
        out.append(nm)
    return out
