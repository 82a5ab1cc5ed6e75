"""The slice search's counter: every slice's rows and outcome sums, per column set, in shared passes.

This is the hot path of the search. Its per-cell sums go through the one counting primitive,
:func:`probe.counting.weighted_bincount`; what this module adds is the windowing: which column sets
share a pass over the rows, and counting each pass in chunks of rows that stay in cache.
"""

from __future__ import annotations

import math

import numpy as np

from ..counting import weighted_bincount

__all__ = ["SliceCounter", "BLOCK_CELLS", "column_masks"]

# joint cells counted in one pass (measured best: the histogram stays in cache and its sums over
# axes stay cheap)
BLOCK_CELLS = 1 << 13
_CHUNK_ROWS = 1 << 16  # rows keyed at a time


def column_masks(sets, words: int) -> np.ndarray:
    """Each column set as a bit mask over the columns, ``words`` 64-bit words per set (any number
    of columns; one integer would overflow past 63)."""
    out = np.zeros((len(sets), words), dtype=np.uint64)
    for i, cols in enumerate(sets):
        for c in cols:
            out[i, c >> 6] |= np.uint64(1) << np.uint64(c & 63)
    return out


class SliceCounter:
    """Per column set, every slice's rows and outcome sums, counted in shared passes.

    One pass over the rows counts a *block* of several columns at once (their codes combined into
    one ``uint16`` key, the 0/1 outcome as its last digit, then one weighted bincount); the counts of
    any column set inside the block are then sums over the block's other axes of that small
    histogram, with no further pass over the rows. A pass costs about the same for a block as for
    one column set, so grouping the column sets of a depth into few blocks divides the row passes.
    The marginal sums are exact for counts and for integer-valued outcomes; for any other outcome
    every column set is counted on its own, in row order, so two slices holding the same rows get
    bitwise the same sums (a refinement that keeps every row of its parent never beats it).

    With row ``weights`` (a design that is not plain, :mod:`probe.design`) the same pass also sums
    the weights and their squares: per slice, for a 0/1 outcome, ``(rows, event rows, sum w,
    sum w y, sum w^2, sum w^2 y)``, the additive sums the weighted rate and its effective counts
    (rows as units) are computed from; for a real outcome ``(rows, sum w, sum w y, sum w^2 y^2,
    sum w^2 y, sum w^2, sum w y+)``, counted a column set at a time. The weighted sums of a 0/1
    outcome are marginalised from the block like the counts (exact up to rounding).

    Parameters
    ----------
    codes : sequence of 1-D integer arrays
        One array of codes per column, over the rows searched.
    n_levels : sequence of int
    y : ndarray
        The outcome over those rows (0/1 when ``binary``).
    binary : bool
    weights : ndarray, optional
        Row weights (None: every row weighs 1, the plain counts).
    squares : bool, default=True
        For a 0/1 outcome with weights, whether to sum ``w^2`` too (without: ``(rows, event rows,
        sum w, sum w y)`` per slice, one weighted sum fewer per pass).
    """

    def __init__(self, codes, n_levels, y, binary, weights=None, squares=True):
        self.codes = codes
        self.n_levels = n_levels
        self.binary = binary
        self.mult = 2 if binary else 1
        if binary:
            self.y = y.astype(np.uint8)
            self.blocks = True
            self.values = (() if weights is None else
                           (weights, weights * weights) if squares else (weights,))
        elif weights is None:
            self.y = y
            y_sq = y * y
            self.values = (y, y_sq, np.maximum(y, 0.0))
            self.blocks = bool(np.all(y == np.round(y))) and float(y_sq.sum()) < 2.0**52
        else:
            self.y = y
            wy, w2 = weights * y, weights * weights
            self.values = (weights, wy, w2 * y * y, w2 * y, w2, np.maximum(wy, 0.0))
            self.blocks = False
        self.passes = 0  # passes over the rows (for the benchmarks)

    def cells(self, cols):
        """Histogram cells of a column set (times 2 for a 0/1 outcome, its last digit)."""
        return int(np.prod([self.n_levels[c] for c in cols])) * self.mult

    def count(self, sets):
        """``{cols: stats}`` for every column set in ``sets`` (all of one size); ``stats`` is
        ``(n, x)`` for a 0/1 outcome, else ``(n, sum, sum of squares, sum of positive parts)``,
        float arrays over the set's slices in key order (with weights, the sums in the class
        notes)."""
        out = {}
        if not sets:
            return out
        words = (len(self.n_levels) + 63) // 64
        bits = column_masks(sets, words)
        pending = np.ones(len(sets), dtype=bool)
        log_levels = np.log2(np.asarray(self.n_levels, dtype=float))
        for i, cols in enumerate(sets):
            if not pending[i]:
                continue
            block = self._grow(cols, bits, pending, log_levels) if self.blocks else cols
            hist = self._histogram(block)
            mask = column_masks([block], words)[0]
            inside = np.flatnonzero(pending & ~(bits & ~mask).any(axis=1))
            for j in inside:
                out[sets[j]] = self._marginal(hist, block, sets[j])
            pending[inside] = False
        return out

    def _grow(self, cols, bits, pending, log_levels):
        """Add columns to ``cols`` while the block stays within ``BLOCK_CELLS``, each time the one
        completing the most pending column sets (fewest levels first on ties)."""
        block = set(cols)
        mask = column_masks([cols], bits.shape[1])[0]
        room = math.log2(BLOCK_CELLS / self.cells(cols)) + 1e-9
        todo = bits[pending]
        while True:
            miss = todo & ~mask
            single = np.bitwise_count(miss).sum(axis=1) == 1  # one column short of the block
            if not single.any():
                break
            short = miss[single]
            word = np.argmax(short != 0, axis=1)
            bit = short[np.arange(len(short)), word].astype(float)  # a power of two: exact
            col = word * 64 + np.frexp(bit)[1] - 1  # the missing column's index
            gain = np.bincount(col, minlength=len(log_levels)).astype(float)
            gain[log_levels > room] = 0
            if gain.max() <= 0:
                break
            # most sets completed; ties to the fewest levels, then the lowest index
            best = int(np.lexsort((np.arange(len(gain)), log_levels, -gain))[0])
            block.add(best)
            mask[best >> 6] |= np.uint64(1) << np.uint64(best & 63)
            room -= log_levels[best]
        return tuple(sorted(block))

    def _histogram(self, block):
        """The block's joint histogram (counts; for a real outcome also its sum, sum of squares and
        sum of positive parts), counted in chunks of rows so the key and the bincount's own copy of
        it stay in cache (time linear in the rows)."""
        self.passes += 1
        cells = self.cells(block)
        dtype = np.uint16 if cells <= 1 << 16 else np.uint32 if cells <= 1 << 32 else np.int64
        N = len(self.y)
        buf = np.empty(min(N, _CHUNK_ROWS), dtype=dtype)
        values = self.values
        hist = [np.zeros(cells, dtype=np.int64 if i == 0 else float)
                for i in range(1 + len(values))]
        for start in range(0, N, _CHUNK_ROWS):
            rows = slice(start, min(start + _CHUNK_ROWS, N))
            key = buf[: rows.stop - start]
            key[:] = self.codes[block[0]][rows]
            for c in block[1:]:  # Horner: key = (.. (k0 * n1 + k1) * n2 + k2 ..)
                key *= self.n_levels[c]
                key += self.codes[c][rows]
            if self.binary:
                key *= 2
                key += self.y[rows]
            if values:  # one conversion of the key for every sum (bincount's own, else)
                key = key.astype(np.intp)
            weighted_bincount(key, cells, out=hist[0])
            for h, v in zip(hist[1:], values):
                weighted_bincount(key, cells, v[rows], out=h)
        return tuple(hist)

    def _marginal(self, hist, block, cols):
        shape = [self.n_levels[c] for c in block]
        axes = tuple(i for i, c in enumerate(block) if c not in cols)
        if self.binary:
            parts = []
            for arr in hist:  # (rows, events) of the counts, then of each weighted sum
                h = arr.reshape(shape + [2])
                if axes:
                    h = h.sum(axis=axes)
                h = h.reshape(-1, 2)
                parts += [h.sum(axis=1).astype(float), h[:, 1].astype(float)]
            return tuple(parts)
        parts = []
        for arr in hist:
            h = arr.reshape(shape)
            parts.append((h.sum(axis=axes) if axes else h).ravel().astype(float))
        return tuple(parts)
