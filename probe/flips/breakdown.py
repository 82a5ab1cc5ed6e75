"""Where flips concentrate: the slices of a source group with the highest flip rates.

The slices are the levels of the shared encoding (:func:`probe.encode.encode_columns`: quantile
bins, frequent levels, ``other`` and ``missing``, with the encoder's predicates and labels) and the
two-column conjunctions of them; the top few by flip rate among those with at least 30 rows and at
least one flip are reported, each with a Wilson interval. The slices are chosen by their flip rate,
so these intervals do not account for the selection (the report says so beside them).
"""

from __future__ import annotations

from itertools import combinations

import numpy as np

from ..bins import conjunction
from ..stats import Estimate, wilson_interval
from .findings import FlipSlice
from .weighting import weighted_shares

__all__ = ["slice_breakdown"]

_MIN_SLICE_ROWS = 30
_TOP_SLICES = 5


def slice_breakdown(columns, idx, flip, confidence_level, *, weighting=None) -> tuple:
    """The top slices of the rows ``idx`` by flip rate.

    Parameters
    ----------
    columns : sequence of EncodedColumn
        The encoded columns to slice on (over all rows of the frame).
    idx : ndarray of int
        Positions of the source group's rows.
    flip : ndarray of bool
        Per row of ``idx``: the decision changed.
    confidence_level : float
    weighting : tuple, optional
        ``(weights, units, clustered)`` of the rows ``idx`` under a non-plain design: the slices'
        flip rates are then weighted, ranked by that rate, with Wilson intervals on their
        effective counts (:func:`probe.design.effective_counts`); a slice still needs 30 rows.

    Returns
    -------
    tuple of FlipSlice
        Ordered by flip rate, then rows (both descending), then label.
    """
    if not columns:
        return ()
    f = flip.astype(np.int64)
    w = None if weighting is None else weighting[0]
    sub = [c.codes[idx].astype(np.int64) for c in columns]
    cands = []  # (rate, rows, label, predicates, flips, cell)
    singles = [(j,) for j in range(len(columns))]
    for combo in singles + list(combinations(range(len(columns)), 2)):
        sizes = [columns[j].n_levels for j in combo]
        key = sub[combo[0]]
        for j, m in zip(combo[1:], sizes[1:]):
            key = key * m + sub[j]
        total = int(np.prod(sizes))
        n = np.bincount(key, minlength=total)
        x = np.bincount(key, weights=f, minlength=total)
        if w is not None:  # weighted flip rates; the row rule stays on rows
            wn = np.bincount(key, weights=w, minlength=total)
            x = np.bincount(key, weights=w * f, minlength=total)
        for cell in np.flatnonzero((n >= _MIN_SLICE_ROWS) & (x > 0)):
            parts, rem = [], int(cell)
            for m in reversed(sizes):
                parts.append(rem % m)
                rem //= m
            parts.reverse()
            cols = [columns[j] for j in combo]
            label = conjunction(c.labels[p] for c, p in zip(cols, parts))
            preds = tuple(dict(c.predicates[p]) for c, p in zip(cols, parts))
            base = n[cell] if w is None else wn[cell]
            cands.append((x[cell] / base, int(n[cell]), label, preds, float(x[cell]),
                          (combo, parts)))
    cands.sort(key=lambda t: (-t[0], -t[1], t[2]))
    top = cands[:_TOP_SLICES]
    if not top:
        return ()
    if w is not None:
        return tuple(FlipSlice(t[3], t[2], t[1], _weighted(t[5], sub, f, weighting,
                                                           confidence_level)) for t in top)
    xs = np.array([t[4] for t in top])
    ns = np.array([t[1] for t in top], dtype=float)
    lo, hi = wilson_interval(xs, ns, confidence_level=confidence_level)
    return tuple(FlipSlice(t[3], t[2], t[1], Estimate(float(t[0]), float(a), float(b), "wilson"))
                 for t, a, b in zip(top, lo, hi))


def _weighted(cell, sub, f, weighting, confidence_level) -> Estimate:
    """A slice's weighted flip rate with Wilson's interval on its effective counts."""
    combo, parts = cell
    inside = np.logical_and.reduce([sub[j] == p for j, p in zip(combo, parts)])
    w, units, clustered = weighting
    return weighted_shares((f[inside].astype(bool),), w[inside],
                           None if units is None else units[inside], clustered,
                           confidence_level)[0]
