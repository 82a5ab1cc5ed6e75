"""The maps that move a proxy from one group to where it sits in another.

A numeric proxy is *quantile-mapped*: a row at mid-rank ``r`` among the ``n`` non-missing values of
its group sits at ``q = (r - 1/2) / n`` and moves to the ``to`` group's empirical quantile at ``q``
(the same ``(k - 1/2) / n`` plotting position, linearly interpolated; integer columns take the
nearest order statistic so values stay in the observed support). Ties share a mid-rank and so move
together; mapping a group onto itself is the identity. A categorical proxy is moved by the coupling
of the two level distributions that changes the fewest rows (optimal transport with a 0-1 cost):
the target counts are the ``to`` group's shares times the group size (largest-remainder rounding,
so the shares are preserved exactly up to whole rows); each level keeps ``min(have, need)`` of its
rows, the surplus rows (chosen by a seeded permutation) are dealt to the levels in deficit in a
fixed level order. Missing proxy values stay missing. Whether a column is numeric is
:func:`probe.data.is_numeric`, the encoder's rule.

**Weights.** Under a sampling design (:mod:`probe.flips.weighting`) both groups are weighted
distributions. A numeric proxy's plotting position becomes the weighted mid-rank
``q = (W_below + w_ties / 2) / W`` and the target quantile is read at ``q`` on the target's
cumulative weights, with each group's weights first scaled to a mean of 1 per row: unit weights then
give the unweighted map exactly and the map does not depend on the weights' scale. (Integer weights
are therefore *not* the same as duplicated rows here: duplication also changes how many rows the
``1/2`` of the plotting position is counted in. The two maps differ by less than one row's share.)
A categorical proxy's target counts are the target's weighted level shares times the source's
weight, and the coupling keeps a level's rows in ``order`` until their weight reaches that need;
rows move whole (no row is split between levels), so the moved shares match the target's up to
one row's weight per level.

References
----------
Villani, C. (2009). Optimal Transport, Old and New, ch. 2 (monotone rearrangement on the line).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..data import is_numeric
from ..errors import DataError

__all__ = ["quantile_map", "weighted_quantile_map", "transport_categorical", "level_order",
           "coupled_codes", "largest_remainder", "prepare_proxy", "move_proxy", "proxy_values"]


def quantile_map(source, target, *, integer=False) -> np.ndarray:
    """Map each source value to the target's empirical quantile at its mid-rank plotting position.

    ``q = (r - 1/2) / n`` with ``r`` the mid-rank (ties averaged) among the ``n`` non-missing source
    values; the result is the target's quantile at ``q`` with the same plotting position
    (``numpy.quantile(..., method="hazen")``), or the nearest order statistic when ``integer``.
    Missing source values stay missing.
    """
    source = np.asarray(source, dtype=float)
    target = np.asarray(target, dtype=float)
    src = np.sort(source[~np.isnan(source)])
    tgt = np.sort(target[~np.isnan(target)])
    return weighted_quantile_map(source, src, np.ones(len(src), np.int64), tgt,
                                 np.ones(len(tgt), np.int64), integer=integer)


def weighted_quantile_map(values, source, source_counts, target, target_counts, *,
                          integer=False) -> np.ndarray:
    """:func:`quantile_map` of ``values`` (each present in the source sample) when the source and
    target samples are the sorted non-missing ``source`` and ``target`` values with
    multiplicities ``source_counts`` and ``target_counts`` (a bootstrap resample as counts: no
    re-sorting). Missing values stay missing.
    """
    values = np.asarray(values, dtype=float)
    out = np.full(len(values), np.nan)
    ok = ~np.isnan(values)
    cs = np.concatenate([[0], np.cumsum(source_counts)])
    ct = np.cumsum(target_counts)
    n, nt = cs[-1], (ct[-1] if len(ct) else 0)
    if not ok.any() or n == 0 or nt == 0:
        return out
    below = cs[np.searchsorted(source, values[ok], side="left")]
    ties = cs[np.searchsorted(source, values[ok], side="right")] - below
    q = (below + (ties + 1) / 2 - 0.5) / n  # the mid-rank's plotting position

    def order_stat(k):  # the k-th (0-based) of the target sample
        return target[np.searchsorted(ct, k, side="right")]

    g = q * nt - 0.5  # numpy's "hazen" virtual index
    if integer:
        out[ok] = order_stat(np.clip(np.round(g), 0, nt - 1))
    else:
        g = np.clip(g, 0, nt - 1)
        k = np.floor(g)
        low = order_stat(k)
        out[ok] = low + (g - k) * (order_stat(np.minimum(k + 1, nt - 1)) - low)
    return out


def _weighted_quantiles(values, target, w_src, w_tgt, integer) -> np.ndarray:
    """:func:`quantile_map` of the weighted source sample (``values`` with weights ``w_src``) onto
    the weighted target sample; each side's weights are scaled to a mean of 1 per row, so that
    unit weights give :func:`quantile_map` exactly and the map does not depend on the weights'
    scale (the module notes)."""
    so, to = _sorted_weights(values, w_src), _sorted_weights(target, w_tgt)
    return weighted_quantile_map(values, *so, *to, integer=integer)


def _sorted_weights(values, weights):
    ok = np.flatnonzero(~np.isnan(values))
    order = ok[np.argsort(values[ok], kind="stable")]
    w = weights[order]
    return values[order], w * (len(w) / w.sum()) if w.sum() > 0 else w


def transport_categorical(source_codes, target_counts, rng) -> np.ndarray:
    """Reassign levels so their counts match ``target_counts``, changing the fewest rows.

    ``source_codes`` are level codes ``0..L-1`` (``-1`` missing, left as is); ``target_counts`` the
    desired count of each level among the non-missing rows (summing to their number). Each level
    keeps ``min(have, need)`` rows; the surplus rows (picked by a permutation from ``rng``) are dealt
    to the levels in deficit in level order.
    """
    codes = np.asarray(source_codes, dtype=np.int64)
    return coupled_codes(codes, np.ones(len(codes), np.int64),
                         np.asarray(target_counts, dtype=np.int64), level_order(codes, rng))


def level_order(codes, rng) -> np.ndarray:
    """The non-missing rows grouped by level, in a random order within each level: the priority in
    which :func:`coupled_codes` keeps a level's rows."""
    ok = np.flatnonzero(codes >= 0)
    perm = ok[rng.permutation(len(ok))]
    return perm[np.argsort(codes[perm], kind="stable")]


def coupled_codes(codes, counts, need, order) -> np.ndarray:
    """The fewest-changes coupling of a sample given as rows with multiplicities ``counts``.

    Rows are taken in ``order`` (:func:`level_order`); within each level the first ``need`` copies
    keep it, the rest (the surplus, in level then ``order`` order) are dealt to the levels in
    deficit in level order. Returns each row's new code for its *first* copy (``-1`` for missing
    rows). With unit counts this is :func:`transport_categorical`; with bootstrap counts and the
    same ``order`` it is the resampled coupling, coherent with the original one (a row moves in a
    replicate only when the counts push it across its level's cut).
    """
    c, w = codes[order], counts[order]
    have = np.bincount(c, weights=w, minlength=len(need))
    before = np.cumsum(w) - w - np.concatenate([[0], np.cumsum(have)[:-1]])[c]
    surplus_start = np.concatenate([[0], np.cumsum(np.maximum(have - need, 0))[:-1]])
    moved = before >= need[c]
    new = c.copy()
    # (real-valued weights: a float sum may land on the last cut; the clip keeps it inside)
    new[moved] = np.minimum(np.searchsorted(np.cumsum(np.maximum(need - have, 0)),
                                            (surplus_start[c] + before - need[c])[moved],
                                            side="right"), len(need) - 1)
    out = np.array(codes, dtype=np.int64, copy=True)
    out[order] = new
    return out


def largest_remainder(shares, total) -> np.ndarray:
    raw = shares * total
    base = np.floor(raw).astype(np.int64)
    rest = int(total - base.sum())
    if rest > 0:
        order = np.lexsort((np.arange(len(raw)), -(raw - base)))
        base[order[:rest]] += 1
    return base


def prepare_proxy(col: pd.Series):
    """Once per proxy: float values (numeric) or level codes in a fixed order plus, for each level,
    one row holding it (categorical), so moved values are taken from the column itself and keep its
    dtype exactly."""
    if is_numeric(col):
        return ("numeric", col.to_numpy(dtype=float, na_value=np.nan))
    codes, uniques = pd.factorize(col, sort=False, use_na_sentinel=True)
    levels = list(uniques)
    try:
        order = sorted(range(len(levels)), key=lambda i: levels[i])
    except TypeError:
        order = sorted(range(len(levels)), key=lambda i: str(levels[i]))
    rank = np.empty(len(levels), dtype=np.int64)
    rank[order] = np.arange(len(levels))
    codes = np.where(codes >= 0, rank[np.maximum(codes, 0)], -1)
    first = np.full(len(levels), -1, dtype=np.int64)
    ok = np.flatnonzero(codes >= 0)
    first[codes[ok]] = ok  # some row holding each level (which one does not matter)
    return ("categorical", codes, first)


def move_proxy(col: pd.Series, prepared, idx, tgt, order, weights=None) -> pd.Series:
    """The proxy's values for the source rows ``idx`` moved onto the rows ``tgt``; ``order`` is the
    categorical coupling's :func:`level_order` of the source rows (unused for a numeric proxy).

    ``weights``, when given, are ``(source weights, target weights)``: the maps are then those of
    the weighted distributions (the module notes)."""
    if prepared[0] == "numeric":
        v = prepared[1]
        if not np.isfinite(v[tgt]).any():
            raise DataError(f"proxy `{col.name}` has no known value in the target group, so it "
                            "cannot be moved there; leave it out of `proxies`")
        integer = pd.api.types.is_integer_dtype(col.dtype)
        if weights is None:
            mapped = quantile_map(v[idx], v[tgt], integer=integer)
        else:
            mapped = _weighted_quantiles(v[idx], v[tgt], *weights, integer)
        return proxy_values(col, prepared, mapped, col.index[idx])
    _, codes, first = prepared
    src, tcodes = codes[idx], codes[tgt]
    w_src, w_tgt = (np.ones(len(src), np.int64), None) if weights is None else weights
    tgt_counts = np.bincount(tcodes[tcodes >= 0], minlength=len(first),
                             weights=None if w_tgt is None else w_tgt[tcodes >= 0])
    n_ok = w_src[src >= 0].sum()
    if tgt_counts.sum() == 0 or n_ok == 0:
        return col.iloc[idx]
    shares = tgt_counts / tgt_counts.sum()
    need = largest_remainder(shares, int(n_ok)) if weights is None else shares * n_ok
    new_codes = coupled_codes(src, w_src, need, order)
    return proxy_values(col, prepared, np.where(new_codes >= 0, first[np.maximum(new_codes, 0)],
                                                idx), col.index[idx])


def proxy_values(col: pd.Series, prepared, values, index) -> pd.Series:
    """A moved proxy as a column on ``index``: the mapped floats of a numeric proxy (its integer
    dtype kept when nothing is missing); for a categorical one, ``values`` are the rows of ``col``
    holding each new level, so the dtype is the column's own."""
    if prepared[0] == "numeric":
        out = pd.Series(values, index=index)
        if pd.api.types.is_integer_dtype(col.dtype) and not np.isnan(values).any():
            out = out.astype(col.dtype)
        return out
    out = col.iloc[values]
    out.index = index
    return out
