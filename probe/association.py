"""Association between a column of level codes and a protected attribute, from counts alone.

The single-feature measures of :func:`probe.proxies.find_proxies`, on codes ``0 .. n_codes - 1``
of a feature (the shared encoder's levels) and ``0 .. n_levels - 1`` of the attribute:

- :func:`uncertainty_coefficient`: ``I(A; F) / H(A)`` (Theil 1970), in [0, 1];
- :func:`crossfit_auc`: the attribute rate of the feature's level, estimated on the other folds
  (with one pseudo-row of the overall rate as a prior), used as a score for the attribute; macro
  one-vs-rest for more than two levels;
- :func:`auc`: the Mann-Whitney AUC (ties count one half) from counts per distinct score.

References
----------
Theil, H. (1970). On the estimation of relationships involving qualitative variables. American
Journal of Sociology 76, 103-154.
Mann, H. B. & Whitney, D. R. (1947). On a test of whether one of two random variables is
stochastically larger than the other. Annals of Mathematical Statistics 18, 50-60.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["uncertainty_coefficient", "crossfit_auc", "auc", "fold_ids"]



def _entropy(counts) -> float:
    p = counts[counts > 0] / counts.sum()
    return float(-(p * np.log(p)).sum())


def uncertainty_coefficient(y, codes, n_levels, n_codes) -> float:
    """``I(A; F) / H(A)`` of the attribute codes ``y`` and the feature codes ``codes`` (in-sample);
    NaN when the attribute has no entropy."""
    table = np.bincount(codes * n_levels + y, minlength=n_codes * n_levels).reshape(n_codes, n_levels)
    n = table.sum()
    h_a = _entropy(table.sum(axis=0))
    h_f = _entropy(table.sum(axis=1))
    h_af = _entropy(table.ravel())
    mi = max(h_a + h_f - h_af, 0.0)
    return mi / h_a if h_a > 0 and n > 0 else math.nan


def fold_ids(n, cv, seed) -> np.ndarray:
    """A seeded assignment of ``n`` rows to ``cv`` folds of (nearly) equal size."""
    perm = np.random.default_rng(seed).permutation(n)
    fold = np.empty(n, dtype=np.int64)
    fold[perm] = np.arange(n) % cv
    return fold


def auc(target: np.ndarray, score: np.ndarray) -> float:
    """ROC AUC with ties counted as one half (the Mann-Whitney form), from counts per distinct score:
    the same number as ``sklearn.metrics.roc_auc_score`` without its per-call validation cost."""
    values, inv = np.unique(score, return_inverse=True)
    pos = np.bincount(inv, weights=target, minlength=len(values))
    neg = np.bincount(inv, minlength=len(values)) - pos
    n_pos, n_neg = pos.sum(), neg.sum()
    if n_pos == 0 or n_neg == 0:
        return float("nan")
    below = np.cumsum(neg) - neg
    return float(np.sum(pos * (below + 0.5 * neg)) / (n_pos * n_neg))


def crossfit_auc(y, codes, n_levels, n_codes, fold, cv) -> float:
    """AUC of the out-of-fold level rate of the attribute as a score (macro one-vs-rest)."""
    cells = (fold * n_codes + codes) * n_levels + y
    c = np.bincount(cells, minlength=cv * n_codes * n_levels).reshape(cv, n_codes, n_levels)
    total = c.sum(axis=0)
    train = total[None, :, :] - c  # (cv, n_codes, n_levels): counts outside each fold
    prior = np.bincount(y, minlength=n_levels) / len(y)
    rates = (train + prior) / (train.sum(axis=2, keepdims=True) + 1.0)
    score = rates[fold, codes, :]  # (n, n_levels)
    targets = [n_levels - 1] if n_levels == 2 else range(n_levels)
    aucs = [auc((y == lv).astype(float), score[:, lv]) for lv in targets]
    return float(np.mean(aucs))
