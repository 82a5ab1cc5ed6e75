"""The counting engine: weighted counts and sums of per-row values in the cells of one or more columns.

Every rate probe reports is a ratio of two sums over a set of rows: errors over rows, false positives
over label-negatives, favourable decisions over rows. Groups, intersections, slices and the comparison
all reduce to "for each cell of these columns, sum these per-row values (times the row's weight)".
This module does that one thing, two ways:

- :func:`cell_keys` combines integer codes of several columns into one key per row: a mixed-radix
  number when the product of the level counts is small, else the observed combinations found with
  ``np.unique(..., return_inverse=True)``, so memory follows the cells that occur, never the product
  of the level counts (three 1,000-level columns do not allocate 10^9 cells);
- :func:`count_cells` returns a :class:`CellCounts` keyed by the cells' codes.

Counts are additive: the counts of two disjoint parts of the rows, merged with
:meth:`CellCounts.merge`, equal the counts of all the rows. That is what lets the work run on
partitions of a table too large for one machine (count each part, then add).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np

__all__ = ["CellCounts", "cell_keys", "count_cells", "weighted_bincount"]

_DENSE_CELLS = 1 << 22  # up to this many possible cells, key by mixed radix (no sort needed)


def weighted_bincount(key: np.ndarray, n_cells: int, values=None, weights=None, *,
                      out: np.ndarray | None = None) -> np.ndarray:
    """``sum(values * weights)`` per cell of ``key`` (counts when both are None), as float64.

    With ``out``, the sums are added to ``out`` in place and ``out`` is returned: the way to
    accumulate over chunks of rows (an integer ``out`` keeps plain counts integer, with no
    conversion per chunk)."""
    if values is None and weights is None:
        counts = np.bincount(key, minlength=n_cells)
        if out is not None:
            out += counts
            return out
        return counts.astype(np.float64)
    if values is None:
        w = weights
    elif weights is None:
        w = values
    else:
        w = np.asarray(values, dtype=np.float64) * weights
    sums = np.bincount(key, weights=w, minlength=n_cells)
    if out is not None:
        out += sums
        return out
    return sums


def cell_keys(codes: Sequence[np.ndarray], n_levels: Sequence[int] | None = None):
    """One integer key per row for the joint cell of several code columns.

    Parameters
    ----------
    codes : sequence of 1-D integer arrays
        Codes ``0 .. n_levels[j] - 1`` per column; a negative code marks a row in no cell (missing).
    n_levels : sequence of int, optional
        Levels per column (default: ``max + 1`` of each).

    Returns
    -------
    key : ndarray of int64
        The cell of every row, ``-1`` for a row with a negative code in any column.
    cells : ndarray of shape (n_cells, n_columns)
        The codes of each cell, in key order (sorted lexicographically by column).
    """
    cols = [np.asarray(c) for c in codes]
    if not cols:
        raise ValueError("cell_keys needs at least one code column")
    n = len(cols[0])
    if n_levels is None:
        n_levels = [int(c.max()) + 1 if len(c) else 1 for c in cols]
    known = np.ones(n, dtype=bool)
    for c in cols:
        if c.dtype.kind == "i":
            known &= c >= 0
    total = 1
    for m in n_levels:
        total *= max(int(m), 1)
    if total <= _DENSE_CELLS:
        key = np.zeros(n, dtype=np.int64)
        for c, m in zip(cols, n_levels):
            key *= max(int(m), 1)
            key += np.where(known, c, 0).astype(np.int64)
        present, key_known = np.unique(key[known], return_inverse=True)
        cells = np.empty((len(present), len(cols)), dtype=np.int64)
        rem = present.copy()
        for j in range(len(cols) - 1, -1, -1):
            m = max(int(n_levels[j]), 1)
            cells[:, j] = rem % m
            rem //= m
    else:
        stacked = np.column_stack([c[known].astype(np.int64) for c in cols])
        cells, key_known = np.unique(stacked, axis=0, return_inverse=True)
    out = np.full(n, -1, dtype=np.int64)
    out[known] = np.asarray(key_known).reshape(-1)
    return out, cells


@dataclass(frozen=True)
class CellCounts:
    """Weighted counts and sums per observed cell.

    Attributes
    ----------
    cells : ndarray of shape (n_cells, n_columns)
        Each cell's codes, sorted lexicographically.
    n : ndarray of float64
        Sum of the row weights in each cell (the row count when unweighted).
    sums : dict of str to ndarray of float64
        For each named per-row value, its weighted sum in each cell.
    """

    cells: np.ndarray
    n: np.ndarray
    sums: Mapping[str, np.ndarray]

    def __post_init__(self):
        for a in (self.cells, self.n, *self.sums.values()):
            a.setflags(write=False)

    def __len__(self) -> int:
        return len(self.n)

    def merge(self, other: "CellCounts") -> "CellCounts":
        """The counts of the union of two disjoint sets of rows (cells aligned by their codes)."""
        if set(self.sums) != set(other.sums):
            raise ValueError("cannot merge counts of different values")
        both = np.concatenate([self.cells, other.cells])
        cells, inv = np.unique(both, axis=0, return_inverse=True)
        inv = np.asarray(inv).reshape(-1)
        k = len(cells)

        def add(a, b):
            return np.bincount(inv, weights=np.concatenate([a, b]), minlength=k)

        return CellCounts(cells, add(self.n, other.n),
                          {name: add(self.sums[name], other.sums[name]) for name in self.sums})


def count_cells(codes: Sequence[np.ndarray], *, values: Mapping[str, np.ndarray] | None = None,
                weights: np.ndarray | None = None,
                n_levels: Sequence[int] | None = None) -> CellCounts:
    """Count rows and sum per-row values in every observed cell of one or more code columns.

    Parameters
    ----------
    codes : sequence of 1-D integer arrays
        One array of codes per column (negative = missing: the row is in no cell).
    values : mapping of str to 1-D array, optional
        Per-row values to sum (0/1 outcomes, or real numbers).
    weights : 1-D array, optional
        Row weights (default all ones).
    n_levels : sequence of int, optional

    Returns
    -------
    CellCounts

    Examples
    --------
    >>> import numpy as np
    >>> c = count_cells([np.array([0, 1, 1, 0])], values={"err": np.array([1, 0, 1, 1])})
    >>> c.n.tolist(), c.sums["err"].tolist()
    ([2.0, 2.0], [2.0, 1.0])
    """
    values = dict(values or {})
    key, cells = cell_keys(codes, n_levels)
    ok = key >= 0
    k = len(cells)
    kk = key[ok]
    w = None if weights is None else np.asarray(weights, dtype=np.float64)[ok]
    n = weighted_bincount(kk, k, None, w)
    sums = {name: weighted_bincount(kk, k, np.asarray(v)[ok], w) for name, v in values.items()}
    return CellCounts(cells, n, sums)
