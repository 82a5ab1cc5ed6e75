"""Scores of slices and optimistic bounds on the scores of their refinements.

The **score** of a slice is the lower confidence limit of its gap to the rest of the rows searched,
in the bad direction (the outcome is oriented so that higher is worse before it gets here), at the
*search level*: the confidence level Bonferroni-adjusted for every slice the lattice can hold
(:func:`search_level`), so the score accounts for how many slices are scored. At that level a small
corner needs a far larger observed gap than a large slice to score well, and the lucky corners that
the noise of tens of thousands of slices throws up no longer outrank a real, larger slice. The
interval is Newcombe's hybrid score interval for a 0/1 outcome, a Wald interval from the additive
sums for a real-valued one. Slices holding more than ``max_share`` of the rows are not scored (they
are not sub-groups) but are still expanded. The **bound** of a slice is at least the score of any
refinement of it with ``min_rows`` rows or more, so a slice whose bound misses the current cut need
not be expanded. Every value depends only on its own slice's counts, so all of them are computed
vectorised.
"""

from __future__ import annotations

import numpy as np

from ..stats import newcombe_interval, wilson_interval, z_value

__all__ = ["Scorer", "lattice_size", "search_level"]


def lattice_size(n_levels, depth) -> int:
    """The number of slices the lattice can hold: over every column set of at most ``depth``
    columns, the product of their levels (the elementary symmetric sums of the level counts)."""
    e = [1] + [0] * depth  # e[d]: sum over sets of d columns of the product of their levels
    for k in n_levels:
        for d in range(depth, 0, -1):
            e[d] += e[d - 1] * int(k)
    return max(sum(e[1:]), 1)


def search_level(confidence_level, n_levels, depth) -> float:
    """The scores' confidence level: ``1 - (1 - confidence_level) / lattice_size``, known before
    the search from the levels and the depth alone."""
    return 1.0 - (1.0 - confidence_level) / lattice_size(n_levels, depth)


class Scorer:
    """Scores, refinement bounds and within-parent limits against one searched population.

    Parameters
    ----------
    y : ndarray
        The oriented outcome over the rows searched (higher is worse).
    binary : bool
    min_rows : int
        The least rows a slice (and so any refinement) must have.
    confidence_level : float
        The nominal level, for the within-parent limits.
    score_level : float
        The scores' level (:func:`search_level`).
    max_share : float
        The largest share of the rows a scored slice may hold.
    """

    def __init__(self, y, binary, min_rows, confidence_level, score_level, max_share):
        self.binary = binary
        self.min_rows = min_rows
        self.confidence_level = confidence_level
        self.score_level = score_level
        self.z = z_value(confidence_level)
        self.z_score = z_value(score_level)
        self.N = len(y)
        self.max_rows = max_share * self.N
        self.total = float(y.sum())
        if not binary:
            self.total_sq = float((y * y).sum())
            self.y_max = float(y.max()) if self.N else 0.0

    def window(self, stats, need_bound):
        """Scores (and refinement bounds) of the supported slices of many column sets in one call.

        Parameters
        ----------
        stats : list of tuple
            Per column set, its counts from :class:`~probe.slices.counter.SliceCounter`.
        need_bound : bool
            Whether refinements will follow (the last depth needs no bound).

        Returns
        -------
        scored : list of (supported, score)
            Per set; ``supported``: the slice has ``min_rows`` rows and is not all of them (it may be
            expanded); ``score`` is ``-inf`` for unsupported slices, those over the share cap, or
            undefined scores.
        bounds : list of ndarray or None
        """
        n = np.concatenate([st[0] for st in stats])
        sup = (n >= self.min_rows) & (n < self.N)
        score = np.full(len(n), -np.inf)
        bound = np.full(len(n), -np.inf) if need_bound else None
        if sup.any():
            ns = n[sup]
            xs = np.concatenate([st[1] for st in stats])[sup]
            if self.binary:
                score[sup] = self._binary_score(xs, ns)
                if need_bound:
                    bound[sup] = self._binary_bound(xs, ns)
            else:
                sq = np.concatenate([st[2] for st in stats])[sup]
                score[sup] = self._wald_score(xs, sq, ns)
                if need_bound:
                    pos = np.concatenate([st[3] for st in stats])[sup]
                    bound[sup] = self._real_bound(pos, ns)
        score[np.isnan(score) | (n > self.max_rows)] = -np.inf
        if need_bound:
            bound[np.isnan(bound)] = -np.inf
        cuts = np.cumsum([len(st[0]) for st in stats])[:-1]
        sups, scores = np.split(sup, cuts), np.split(score, cuts)
        bounds = np.split(bound, cuts) if need_bound else [None] * len(stats)
        return list(zip(sups, scores)), bounds

    def gap(self, st):
        """The point gap of each slice's rate to the rest's."""
        n, x = st[0], st[1]
        with np.errstate(invalid="ignore", divide="ignore"):
            return x / n - (self.total - x) / (self.N - n)

    def within_parent(self, st, parent_st, pk):
        """Lower limit of (slice rate - rate of the parent's other rows), per slice: Newcombe for
        0/1 outcomes, Wald from the sums otherwise; -inf where the parent has no other rows.

        ``pk`` maps each slice to its parent's key."""
        n, x = st[0].astype(float), st[1].astype(float)
        rn, rx = parent_st[0][pk] - n, parent_st[1][pk] - x
        empty = (n < 2) | (rn < 2)
        with np.errstate(invalid="ignore", divide="ignore"):
            if self.binary:
                low, _ = newcombe_interval(x, np.maximum(n, 1), np.clip(rx, 0, None),
                                           np.maximum(rn, 1),
                                           confidence_level=self.confidence_level)
            else:
                sq, rsq = st[2], parent_st[2][pk] - st[2]
                m1, m2 = x / n, rx / rn
                v1 = np.maximum(sq - x * m1, 0.0) / (n - 1)
                v2 = np.maximum(rsq - rx * m2, 0.0) / (rn - 1)
                low = (m1 - m2) - self.z * np.sqrt(v1 / n + v2 / rn)
        return np.where(empty | np.isnan(low), -np.inf, low)

    def _binary_score(self, x, n):
        """Newcombe's lower limit of (slice rate - rest rate), at the search level."""
        return newcombe_interval(x, n, self.total - x, self.N - n,
                                 confidence_level=self.score_level)[0]

    def _binary_bound(self, x, n):
        """An upper bound on the score of any refinement (>= ``min_rows`` rows) of a slice (n, x).

        The argument holds at any level, so at the search level too (both the score and the Wilson
        limit below are taken at it); the share cap only removes refinements, so it cannot break
        the bound either.
        Newcombe's lower limit ``d - sqrt((p1 - l1)² + (u2 - p2)²)`` is at most ``l1 - p2``. Over
        the refinements (n' in [min_rows, n], x' <= min(x, n')), the Wilson limit ``l1(x', n')``
        grows with ``x'`` and, for fixed ``x'``, falls with ``n'``; for a pure slice (x' = n') it
        grows with ``n'``. The rest's rate ``(X - x') / (N - n')`` behaves the opposite way in each
        case, so both terms are best at ``n' = clip(x, min_rows, n)``, ``x' = min(x, n')``.
        """
        n_star = np.clip(x, self.min_rows, n)
        x_star = np.minimum(x, n_star)
        low, _ = wilson_interval(x_star, n_star, confidence_level=self.score_level)
        N = self.N
        with np.errstate(invalid="ignore", divide="ignore"):
            rest = np.where(N - n_star > 0, (self.total - x_star) / (N - n_star), 0.0)
        return low - rest

    def _wald_score(self, s, sq, n):
        """Lower Wald limit (search level) of (slice mean - rest mean), variances from the sums
        (ddof 1)."""
        nr = self.N - n
        sr = self.total - s
        sqr = self.total_sq - sq
        with np.errstate(invalid="ignore", divide="ignore"):
            m1, m2 = s / n, sr / nr
            v1 = np.maximum(sq - s * m1, 0.0) / (n - 1)
            v2 = np.maximum(sqr - sr * m2, 0.0) / (nr - 1)
            return (m1 - m2) - self.z_score * np.sqrt(v1 / n + v2 / nr)

    def _real_bound(self, pos, n):
        """Upper bound on the Wald score of any refinement: mean' - rest_mean' with the sum of a
        refinement at most ``pos`` (the slice's sum of positive parts), so
        mean' <= min(y_max, pos / min_rows) and rest_mean' >= (total - pos) / (N - min_rows) (or
        / (N - n) when that numerator is negative). The Wald limit is below ``mean' - rest_mean'``
        at any level."""
        top = np.minimum(self.y_max, pos / self.min_rows)
        num = self.total - pos
        rest = np.where(num >= 0, num / np.maximum(self.N - self.min_rows, 1),
                        num / np.maximum(self.N - n, 1))
        return top - rest
