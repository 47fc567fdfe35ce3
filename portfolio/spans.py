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
    def from_meta(cls, path: str, meta) -> "Span":
        """Build a span from a Lark token or a tree's ``meta``."""
        if getattr(meta, "empty", False):
            return cls(path, 1, 1, 1, 1)
        return cls(path, meta.line, meta.column, meta.end_line, meta.end_column)

    @classmethod
    def whole_file(cls, path: str) -> "Span":
        return cls(path, 1, 1, 1, 1)

    def join(self, other: "Span") -> "Span":
        start = min((self.line, self.col), (other.line, other.col))
        end = max((self.end_line, self.end_col), (other.end_line, other.end_col))
        return Span(self.path, start[0], start[1], end[0], end[1])


NOWHERE = Span("<api>", 1, 1, 1, 1)
