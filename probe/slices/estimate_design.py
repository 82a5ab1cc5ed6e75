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
weights: the p-value is the pooled two-proportion score z test on the effective counts for a 0/1
outcome, Welch's t on the pseudo-sums for a real one (the {-1, 0, 1} exact test too is replaced).
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

from ..design import effective_counts
from ..stats import Estimate

__all__ = ["Weighting", "effective_basis", "pair_basis", "unit_bootstrap"]

_BOOT_BATCH = 16  # resamples drawn at once (a batch x units matrix of counts)


@dataclass(frozen=True)
class Weighting:
    """The estimate part's design: positive row weights, each row's unit (None: the row) and
    whether the units are clusters."""

    weights: np.ndarray
    units: np.ndarray | None
    clustered: bool


def effective_basis(masks, y, wt: Weighting, binary: bool):
    """Per slice the pseudo-sums ``c = (n1, s1, sq1, n2, s2, sq2)`` on effective counts (slice,
    rest), and the weighted figures: ``(weight, events, rows, clusters, rest weight, rest events,
    n_eff of the slice, n_eff of the rest)``, arrays over slices."""
    K = len(masks)
    c = np.empty((6, K))
    fig = np.empty((8, K))
    wy2 = None if binary else wt.weights * y * y
    for k, mask in enumerate(masks):
        key = (~mask).view(np.int8).astype(np.int64)  # 0: the slice, 1: the rest
        c[:, k], fig[:, k] = pair_basis(key, y, wt, binary, wy2)
    return tuple(c), fig


def pair_basis(key, y, wt: Weighting, binary: bool, wy2=None):
    """The pseudo-sums and weighted figures (as in :func:`effective_basis`) of the rows keyed 0
    against those keyed 1 (rows keyed -1 left out); ``wy2`` is ``w y^2`` for a real outcome."""
    w = wt.weights
    eff = effective_counts(key, 2, y, w, wt.units, clustered=wt.clustered)
    n_eff = eff.n_eff
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = eff.events / eff.weight
    if binary:  # the rate rounded above 1 would put x_eff over n_eff
        s = sq = np.minimum(eff.x_eff, n_eff)
    else:
        wy2 = w * y * y if wy2 is None else wy2
        inside = key >= 0
        with np.errstate(invalid="ignore", divide="ignore"):
            spread = np.maximum(np.bincount(key[inside], weights=wy2[inside], minlength=2)
                                / eff.weight - mean * mean, 0.0)
        s, sq = mean * n_eff, mean * mean * n_eff + spread * (n_eff - 1.0)
    c = (n_eff[0], s[0], sq[0], n_eff[1], s[1], sq[1])
    fig = (eff.weight[0], eff.events[0], eff.rows[0],
           np.nan if eff.clusters is None else eff.clusters[0],
           eff.weight[1], eff.events[1], n_eff[0], n_eff[1])
    return c, fig


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
