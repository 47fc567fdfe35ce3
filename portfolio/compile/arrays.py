"""The compiled model as arrays (:class:`Matrix`, what HiGHS receives) and the
builders :meth:`portfolio.compile.context.Ctx.finish` fills while making it."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Dict, Hashable, Iterator, List, Sequence, Tuple

import numpy as np
import scipy.sparse as sp


class Keys(Sequence):
    """The index keys ``(*asset, t)`` of a variable family, asset-major, made when read.

    A family of 20 stores over 35,040 steps has 700,800 keys; a list of tuples
    costs about 100 bytes each, this costs nothing until a key is read (Pyomo,
    a diagnostic naming a column)."""

    def __init__(self, assets: Sequence[Hashable], steps: int):
        self.assets = list(assets)
        self.steps = int(steps)

    def __len__(self) -> int:
        return len(self.assets) * self.steps

    def _key(self, i: int) -> tuple:
        a = self.assets[i // self.steps]
        return (a if isinstance(a, tuple) else (a,)) + (i % self.steps,)

    def __getitem__(self, i):
        if isinstance(i, slice):
            return [self._key(j) for j in range(*i.indices(len(self)))]
        n = len(self)
        if i < 0:
            i += n
        if not 0 <= i < n:
            raise IndexError(i)
        return self._key(i)

    def __iter__(self) -> Iterator[tuple]:
        for a in self.assets:
            at = a if isinstance(a, tuple) else (a,)
            for t in range(self.steps):
                yield at + (t,)

    def __eq__(self, other) -> bool:
        return list(self) == list(other)

    def __repr__(self) -> str:
        return f"Keys({len(self.assets)} assets x {self.steps} steps)"


@dataclass
class RowBlock:
    """The rows of one family in :class:`Matrix`: ``start:stop`` and their keys."""

    name: str
    start: int
    stop: int
    keys: list


@dataclass
class Matrix:
    """A compiled model as arrays (what HiGHS receives; Pyomo is made from it).

    Columns are the variable families in the order they were added, each a
    contiguous ``var_ranges[name]`` (asset-major, as :meth:`Ctx.add_var`),
    then ``slack`` in relax mode.  Rows are the row families in the order
    they were first used (``blocks``).  Bounds of +-inf mean "none"; the
    constant of each row is already moved into its bounds.
    """

    A: sp.csc_matrix                  # rows x columns, no duplicates, no zeros
    row_lower: np.ndarray
    row_upper: np.ndarray
    col_lower: np.ndarray
    col_upper: np.ndarray
    integer: np.ndarray               # bool per column
    cost: np.ndarray
    offset: float
    maximize: bool
    var_ranges: Dict[str, Tuple[int, int]]
    var_index: Dict[str, Sequence]    # family -> Pyomo index keys, in column order (Keys or a list)
    binary: Dict[str, bool]
    blocks: List[RowBlock]

    @property
    def num_col(self) -> int:
        return self.A.shape[1]

    @property
    def num_row(self) -> int:
        return self.A.shape[0]


def _cat(parts, dtype) -> np.ndarray:
    return np.concatenate(parts) if parts else np.zeros(0, dtype=dtype)


@dataclass
class _Columns:
    """Column data while a :class:`Matrix` is made."""

    lower: np.ndarray
    upper: np.ndarray
    integer: np.ndarray
    ranges: Dict[str, Tuple[int, int]] = field(default_factory=dict)
    index: Dict[str, list] = field(default_factory=dict)
    binary: Dict[str, bool] = field(default_factory=dict)


class _Rows:
    """Row data while a :class:`Matrix` is made: triplets with global row numbers,
    row bounds, blocks, and (relax mode) the slack columns numbered after ``n_cols``."""

    def __init__(self, n_cols: int):
        self.n_cols = n_cols
        self.n = 0
        self.r: List[np.ndarray] = []
        self.c: List[np.ndarray] = []
        self.v: List[np.ndarray] = []
        self.lower: List[np.ndarray] = []
        self.upper: List[np.ndarray] = []
        self.blocks: List[RowBlock] = []
        self.slack_rows: List[tuple] = []     # (family, origin idx, side, row key)

    def triplets(self, r: np.ndarray, c: np.ndarray, v: np.ndarray) -> None:
        self.r.append(r)
        self.c.append(c)
        self.v.append(v)

    def block(self, name: str, lo: np.ndarray, hi: np.ndarray, keys: list) -> None:
        """Close a family's rows: ``n .. n + len(lo)``."""
        m = len(lo)
        self.lower.append(lo)
        self.upper.append(hi)
        self.blocks.append(RowBlock(name, self.n, self.n + m, keys))
        self.n += m

    def add_slacks(self, fam, lo: np.ndarray, hi: np.ndarray, keys, first_row: int) -> None:
        """A slack column per limited side of rows first_row.. (+s on the lower side,
        -s on the upper), numbered row by row, lower side first."""
        sides = np.stack([np.isfinite(lo), np.isfinite(hi)], axis=1).ravel()
        which = np.nonzero(sides)[0]          # 2 * row + (0 lower, 1 upper)
        s0 = self.n_cols + len(self.slack_rows)
        self.triplets(first_row + which // 2, s0 + np.arange(len(which)),
                      np.where(which % 2 == 0, 1.0, -1.0))
        oi = fam.oi if fam.kind == "rows" else [b[3] for b in fam.bounds]
        for w in which.tolist():
            i = w // 2
            self.slack_rows.append((fam.name, oi[i], "lo" if w % 2 == 0 else "hi", keys[i]))

    def matrix(self, n_total: int) -> sp.csc_matrix:
        A = sp.csc_matrix((_cat(self.v, float), (_cat(self.r, np.int64), _cat(self.c, np.int64))),
                          shape=(self.n, n_total))     # sums repeated entries
        A.eliminate_zeros()
        A.sort_indices()
        return A
