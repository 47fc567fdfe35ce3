"""Source positions.

Every diagnostic, model field, graph node and constraint family carries a
:class:`Span` so that a message or an infeasibility can point at a line of the
user's file.  Lines and columns are 1-based, as editors show them; ``end_col``
is exclusive.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True, order=True)
class Span:
    path: str
    line: int
    col: int
    end_line: int
    end_col: int

    def __str__(self) -> str:
        return f"{self.path}:{self.line}:{self.col}"

    @classmethod
    def whole_file(cls, path: str) -> "Span":
        return cls(path, 1, 1, 1, 1)


NOWHERE = Span("<api>", 1, 1, 1, 1)
