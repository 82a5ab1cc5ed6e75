"""The estimate part under a design that is not plain: effective counts, tests and the bootstrap.

Per carried slice, the slice and the rest of the estimate part are two cells of
:func:`probe.design.effective_counts`: each gets its weighted total, its weighted rate and its own
effective counts ``(x_eff, n_eff)`` (linearisation variance with the clusters, or the rows, or for
membership copies their original rows, as the units). The closed-form estimates of
:mod:`.estimate` then run unchanged on *pseudo-sums* that carry those variances: ``(n_eff, x_eff,
x_eff)`` for a 0/1 outcome (Wilson, Newcombe, MOVER-R on effective counts) and, for a real
outcome, ``n = n_eff``, ``s = m n_eff``, ``sq = m^2 n_eff + s_w^2 (n_eff - 1)`` (``s_w^2`` the weighted
variance), so the Wald rate's variance is the design variance ``s_w^2 / n_eff`` and Welch's gap uses
``v1 + v2`` with Satterthwaite's degrees of freedom on the effective sizes.

Tests. The exact tests of :mod:`.pvalues` condition on integer counts and are not exact under
weights: the p-value is the pooled two-proportion score statistic on the effective counts for a
0/1 outcome, referred to Student's t with the slice's effective rows less one (:func:`design_pvalue`), Welch's t on the pseudo-sums for a real one (the {-1, 0, 1} exact test too is replaced).
The slice and the rest are treated as independent; with clusters that straddle both, their
estimates are positively correlated and the test is conservative. The level is measured in
``tests/sim/sim_slices.py`` (``weighted_level``).

Bootstrap. The units are resampled with replacement (whole clusters; a membership row's copies
together), every carried slice's weighted rate and gap recomputed from the resampled unit totals;
percentile intervals (no BCa: its jackknife would be per unit and slice).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats as _sps

from ..design import effective_counts
from ..stats import Estimate
from .counter import SliceCounter
from .pvalues import welch, welch_pvalue

__all__ = ["Basis", "Weighting", "counted_sums", "design_pvalue", "effective_basis", "row_effective", "row_mean_var",
           "unit_bootstrap"]

_BOOT_BATCH = 16  # resamples drawn at once (a batch x units matrix of counts)


@dataclass(frozen=True)
class Weighting:
    """The estimate part's design: positive row weights, each row's unit (None: the row) and
    whether the units are clusters."""

    weights: np.ndarray
    units: np.ndarray | None
    clustered: bool


def row_effective(rows, W, A, W2, A2):
    """``(x_eff, n_eff)`` of a 0/1 outcome from additive sums (rows, ``sum w``, ``sum w y``,
    ``sum w^2``, ``sum w^2 y``), as :func:`probe.design.effective_counts` computes them with the
    rows as units: ``n_eff = p (1 - p) / v``, ``v = sum w^2 (y - p)^2 / W^2``; Kish's
    ``W^2 / sum w^2`` where the rate is 0 or 1; capped at the rows. The weights are positive, so
    an empty cell (``W = 0``) has no rows and gets 0."""
    with np.errstate(invalid="ignore", divide="ignore"):
        p = np.clip(A / W, 0.0, 1.0)
        spread = p * (1.0 - p)
        WW = W * W
        v = A2 * (1.0 - 2.0 * p) + p * p * W2  # W^2 times the variance
        n_eff = np.where((spread > 1e-12 * p * p + 1e-300) & (v > 0), spread * WW / v, WW / W2)
        n_eff = np.fmin(n_eff, rows)  # NaN (no rows) -> 0
        x_eff = p * n_eff
    x_eff[n_eff == 0] = 0.0
    return x_eff, n_eff


def row_mean_var(W, S, Q, R, W2):
    """The weighted mean of a real outcome and its linearisation variance with the rows as units,
    ``sum w^2 (y - m)^2 / W^2``, from ``sum w``, ``sum w y``, ``sum w^2 y^2``, ``sum w^2 y``,
    ``sum w^2``."""
    with np.errstate(invalid="ignore", divide="ignore"):
        m = S / W
        return m, np.maximum(Q - 2.0 * m * R + m * m * W2, 0.0) / (W * W)


class Basis:
    """The pseudo-sums and weighted figures of rows against other rows on one estimate part.

    With the rows as units (no clusters, no membership copies) every figure comes from additive
    per-row terms, summed over the smaller side; otherwise from
    :func:`probe.design.effective_counts` with the units."""

    def __init__(self, y, wt: Weighting, binary: bool):
        self.y, self.wt, self.binary = y, wt, binary
        if wt.units is None:
            self.total = self._gathered(slice(None))
        elif not binary:
            self.wy2 = wt.weights * y * y

    def _sums(self, mask):
        """The terms summed over ``mask``: over its rows, or the total less the other rows."""
        k = np.count_nonzero(mask)
        if k == len(mask):
            return self.total
        if k <= len(mask) // 2:
            return self._gathered(np.flatnonzero(mask))
        return self.total - self._gathered(np.flatnonzero(~mask))

    def _gathered(self, idx):
        """Rows, w, w y, w^2, w^2 y (and w y^2, w^2 y^2 for a real outcome) summed over the rows
        ``idx``: the additive terms of :func:`row_effective` and :func:`row_mean_var`."""
        w, y = self.wt.weights[idx], self.y[idx]
        wy, w2 = w * y, w * w
        terms = [w, wy, w2, w2 * y] + ([] if self.binary else [wy * y, w2 * y * y])
        return np.array([float(len(w))] + [float(t.sum()) for t in terms])

    @property
    def additive(self) -> bool:
        """The rows are the units: every figure comes from sums of per-row terms
        (:meth:`sums`, and :meth:`pair` with ``sums``)."""
        return self.wt.units is None

    def sums(self, mask) -> np.ndarray:
        """The per-row terms summed over ``mask`` (rows first; additive bases only)."""
        return self._sums(mask)

    def pair(self, a, b=None, *, sums=None):
        """``(c, fig)`` of the rows ``a`` against the rows ``b`` (default: every other row), or of
        the term ``sums`` of two sets of rows (additive bases): ``c = (n1, s1, sq1, n2, s2, sq2)``
        the pseudo-sums on effective counts, ``fig`` = (weight, events, rows, clusters, other
        weight, other events, n_eff, other n_eff)."""
        if self.wt.units is None:
            if sums is None:
                t1 = self._sums(a)
                sums = (t1, self.total - t1 if b is None else self._sums(b))
            t = np.column_stack(sums)
            rows, W, S, W2, R = t[:5]
            if self.binary:
                x_eff, n_eff = row_effective(rows, W, S, W2, R)
                spread = None
            else:
                mean, v = row_mean_var(W, S, t[6], R, W2)
                with np.errstate(invalid="ignore", divide="ignore"):
                    spread = np.maximum(t[5] / W - mean * mean, 0.0)
                    varies = (spread > 1e-12 * mean * mean + 1e-300) & (v > 0)
                    n_eff = np.where(varies, spread / v, W * W / W2)
                n_eff = np.where(W > 0, np.minimum(np.nan_to_num(n_eff), rows), 0.0)
            clusters = (np.nan, np.nan)
        else:
            key = np.full(len(self.y), -1, dtype=np.int64)
            key[~a if b is None else b] = 1
            key[a] = 0
            with np.errstate(invalid="ignore", divide="ignore"):  # an empty side (overall rate)
                eff = effective_counts(key, 2, self.y, self.wt.weights, self.wt.units,
                                       clustered=self.wt.clustered)
                mean = eff.events / eff.weight
            rows, W, S, n_eff, x_eff = eff.rows, eff.weight, eff.events, eff.n_eff, eff.x_eff
            if not self.binary:
                inside = key >= 0
                with np.errstate(invalid="ignore", divide="ignore"):
                    spread = np.maximum(np.bincount(key[inside], weights=self.wy2[inside],
                                                    minlength=2) / W - mean * mean, 0.0)
            clusters = (np.nan, np.nan) if eff.clusters is None else eff.clusters
        if self.binary:  # the rate rounded above 1 would put x_eff over n_eff
            s = sq = np.minimum(x_eff, n_eff)
        else:
            s, sq = mean * n_eff, mean * mean * n_eff + spread * (n_eff - 1.0)
        c = (n_eff[0], s[0], sq[0], n_eff[1], s[1], sq[1])
        fig = (W[0], S[0], rows[0], clusters[0], W[1], S[1], n_eff[0], n_eff[1])
        return c, fig


def design_pvalue(c, binary: bool, alternative: str) -> np.ndarray:
    """The one-sided p-value of the first rows against the second from the pseudo-sums ``c``
    (:meth:`Basis.pair`): for a 0/1 outcome the pooled score statistic on the effective counts,
    referred to Student's t with the slice's effective rows less one as its degrees of freedom
    (the slice's variance is estimated from its own few, unequally weighted rows: against the
    normal, the weighted search's null runs raised a slice at q <= 0.05 in 6-17 % of runs, with
    the t 3-5 %; ``tests/sim/sim_slices.py``, ``weighted_null``); Welch's t for a real one."""
    if binary:
        x1, n1, x2, n2 = (np.asarray(v, dtype=float) for v in (c[1], c[0], c[4], c[3]))
        with np.errstate(invalid="ignore", divide="ignore"):
            pooled = (x1 + x2) / (n1 + n2)
            se = np.sqrt(pooled * (1 - pooled) * (1 / n1 + 1 / n2))
            z = (x1 / n1 - x2 / n2) / se
            df = np.maximum(n1 - 1.0, 1.0)  # the slice's variance is estimated from its own rows
            p = _sps.t.sf(z if alternative == "greater" else -z, df)
        p = np.where(se > 0, p, 1.0)
        return np.where((n1 <= 0) | (n2 <= 0), np.nan, np.clip(p, 0.0, 1.0))
    return welch_pvalue(*welch(*c[:3], *c[3:]), alternative=alternative)


def counted_sums(carried, codes, n_levels, y, weights):
    """The term sums of :class:`Basis` (rows, w, w y, w^2, w^2 y) of every carried slice of a 0/1
    outcome, counted like the search counts (:class:`~probe.slices.counter.SliceCounter`: a few
    shared passes over the rows) instead of one pass per slice."""
    counter = SliceCounter(codes, n_levels, y.astype(np.uint8), True, weights)
    sets = sorted({entry.cols for entry in carried}, key=lambda cols: (len(cols), cols))
    stats = {}
    for d in sorted({len(cols) for cols in sets}):
        stats.update(counter.count([cols for cols in sets if len(cols) == d]))
    out = []
    for entry in carried:
        key = np.ravel_multi_index(entry.levels, [n_levels[c] for c in entry.cols])
        n, _, W, A, W2, A2 = (float(a[key]) for a in stats[entry.cols])
        out.append(np.array([n, W, A, W2, A2]))
    return out


def effective_basis(masks, basis: Basis, sums=None):
    """Per slice the pseudo-sums ``c = (n1, s1, sq1, n2, s2, sq2)`` on effective counts (slice,
    rest) and the weighted figures of :meth:`Basis.pair`, arrays over slices; ``sums``: the
    slices' term sums when counted already (:func:`counted_sums`)."""
    K = len(masks)
    c, fig = np.empty((6, K)), np.empty((8, K))
    for k, mask in enumerate(masks):
        if sums is None:
            c[:, k], fig[:, k] = basis.pair(mask)
        else:
            c[:, k], fig[:, k] = basis.pair(None, sums=(sums[k], basis.total - sums[k]))
    return tuple(c), fig


def unit_bootstrap(masks, y, wt: Weighting, rng, confidence_level, rate, gap, n_resamples):
    """Percentile intervals of every carried slice's weighted rate and gap from resampled units,
    and per slice the draws that give them at any other level (see the module notes)."""
    units = np.arange(len(y)) if wt.units is None else wt.units
    _, inv = np.unique(units, return_inverse=True)
    inv = inv.reshape(-1)
    U = int(inv.max()) + 1 if len(inv) else 0
    w, wy = wt.weights, wt.weights * y
    # per unit: the totals, then per slice the sums inside it (outside = total - inside)
    cols = [np.bincount(inv, weights=w, minlength=U), np.bincount(inv, weights=wy, minlength=U)]
    for mask in masks:
        cols += [np.bincount(inv[mask], weights=w[mask], minlength=U),
                 np.bincount(inv[mask], weights=wy[mask], minlength=U)]
    A = np.column_stack(cols)
    del cols
    draws = np.empty((n_resamples, A.shape[1]))
    for start in range(0, n_resamples, _BOOT_BATCH):
        b = min(_BOOT_BATCH, n_resamples - start)
        counts = np.stack([np.bincount(rng.integers(0, U, U), minlength=U) for _ in range(b)])
        draws[start: start + b] = counts @ A
    K = len(masks)

    def stats(t):
        W, X = t[..., 0:1], t[..., 1:2]
        Wi, Xi = t[..., 2::2], t[..., 3::2]
        with np.errstate(invalid="ignore", divide="ignore"):
            r_in = Xi / Wi
            return r_in, r_in - (X - Xi) / (W - Wi)

    boot_rate, boot_gap = stats(draws)
    alpha = (1.0 - confidence_level) / 2
    out_rate, out_gap, kept = [], [], []
    for k in range(K):
        draws_k = []
        for dist, prior, out in ((boot_rate[:, k], rate[k], out_rate),
                                 (boot_gap[:, k], gap[k], out_gap)):
            dist = dist[np.isfinite(dist)]
            if len(dist) == 0 or np.ptp(dist) == 0:
                out.append(prior)  # no spread to offer: the closed-form interval stands
                draws_k.append(None)
                continue
            b = (dist.copy(), prior.value, None, None)
            low, high = np.quantile(dist, [alpha, 1 - alpha])
            out.append(Estimate(prior.value, float(low), float(high), "bootstrap-percentile",
                                prior.n_effective))
            draws_k.append(b)
        kept.append(tuple(draws_k))
    return out_rate, out_gap, kept
