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

Under row weights the rates are weighted. A 0/1 outcome's score takes each slice's effective
trials as its rows over the searched table's Kish design effect (``n sum w^2 / (sum w)^2``), not
its own linearisation: that spares the search a weighted sum per pass (measured: the weighted
search at 1.45x the unweighted one with per-slice ``sum w^2``). It only ranks candidates; the
estimate part computes every carried slice's effective counts exactly (:mod:`.estimate_design`),
so the reported intervals, tests and q-values do not rest on it. A real-valued outcome keeps the
per-slice variance.
"""

from __future__ import annotations

import numpy as np

from ..stats import newcombe_interval, wilson_interval, z_value
from .estimate_design import row_mean_var

__all__ = ["Scorer", "lattice_size", "search_level"]

_GRID = 6  # pieces of the refinements' sizes in the weighted bound


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
        The largest share of the rows (of the weight, with weights) a scored slice may hold.
    weights : ndarray, optional
        Row weights, all positive (None: the plain counts).
    """

    def __init__(self, y, binary, min_rows, confidence_level, score_level, max_share,
                 weights=None):
        self.binary = binary
        self.weighted = weights is not None
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
        if self.weighted:
            w = np.asarray(weights, dtype=float)
            w2, wy = w * w, w * y
            # the totals of the counter's weighted sums (its class notes), in its order
            self.totals = ((float(w.sum()), float(wy.sum())) if binary else
                           (float(w.sum()), float(wy.sum()), float((w2 * y * y).sum()),
                            float((w2 * y).sum()), float(w2.sum())))
            self.max_weight = max_share * self.totals[0]
            # a 0/1 outcome is ranked on effective counts n / deff with the table's Kish design
            # effect (n sum w^2 / (sum w)^2), not each slice's: one weighted sum fewer per pass
            self.deff = float(len(w) * w2.sum() / w.sum() ** 2) if len(w) else 1.0
            self.w_min = float(w.min()) if len(w) else 1.0

    def capped(self, st) -> np.ndarray:
        """Per slice: over the share cap (of the rows, or of the weight with weights)."""
        if not self.weighted:
            return st[0] > self.max_rows
        return (st[2] if self.binary else st[1]) > self.max_weight

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
        capped = n > self.max_rows
        if self.weighted:
            cols = [np.concatenate([st[i] for st in stats]) for i in range(len(stats[0]))]
            capped = self.capped(cols)
            if sup.any():
                sub = [c[sup] for c in cols]
                score[sup] = self._weighted_score(sub)
                if need_bound:
                    bound[sup] = self._weighted_bound(sub)
        elif sup.any():
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
        score[np.isnan(score) | capped] = -np.inf
        if need_bound:
            bound[np.isnan(bound)] = -np.inf
        cuts = np.cumsum([len(st[0]) for st in stats])[:-1]
        sups, scores = np.split(sup, cuts), np.split(score, cuts)
        bounds = np.split(bound, cuts) if need_bound else [None] * len(stats)
        return list(zip(sups, scores)), bounds

    def gap(self, st):
        """The point gap of each slice's rate to the rest's (weighted with weights)."""
        if self.weighted:
            W, S = (st[2], st[3]) if self.binary else (st[1], st[2])
            TW, TS = self.totals[0], self.totals[1]
            with np.errstate(invalid="ignore", divide="ignore"):
                return S / W - (TS - S) / (TW - W)
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
            if self.weighted:
                rest = [np.maximum(p[pk] - a, 0.0) for p, a in zip(parent_st, st)]
                low = self._weighted_limit(st, rest, self.confidence_level)
            elif self.binary:
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

    # -- under row weights: effective counts from the additive sums (rows as units) --------------

    def _weighted_limit(self, st, rest, level):
        """Lower limit of (slice rate - rest rate) at ``level``: Newcombe on the effective counts of
        a 0/1 outcome, Wald from the weighted variances otherwise."""
        if self.binary:
            x1, n1 = self._kish_effective(st)
            x2, n2 = self._kish_effective(rest)
            return newcombe_interval(np.minimum(x1, n1), np.maximum(n1, 1e-300),
                                     np.minimum(x2, n2), np.maximum(n2, 1e-300),
                                     confidence_level=level)[0]
        (m1, v1), (m2, v2) = row_mean_var(*st[1:6]), row_mean_var(*rest[1:6])
        return (m1 - m2) - z_value(level) * np.sqrt(v1 + v2)

    def _kish_effective(self, st):
        """``(x_eff, n_eff)`` of a 0/1 outcome from ``(rows, events, sum w, sum w y)``: the
        weighted rate on ``rows / deff`` effective trials."""
        n_eff = st[0] / self.deff
        with np.errstate(invalid="ignore", divide="ignore"):
            p = np.where(st[2] > 0, np.clip(st[3] / st[2], 0.0, 1.0), 0.0)
        return p * n_eff, n_eff

    def _rest(self, st):
        """The rest's sums: the totals minus the slice's (rows first)."""
        t = self.totals
        rest = [self.N - st[0]]
        if self.binary:
            rest += [self.total - st[1], t[0] - st[2], t[1] - st[3]]
        else:
            rest += [t[i] - st[i + 1] for i in range(5)]
        return [np.maximum(r, 0.0) for r in rest]

    def _weighted_score(self, st):
        """The weighted score at the search level (see the module notes)."""
        return self._weighted_limit(st, self._rest(st), self.score_level)

    def _weighted_rate_bound(self, st):
        """At least Wilson's lower limit (search level) of any refinement's weighted rate on its
        effective counts. A refinement with ``n'`` rows has rate at most
        ``P(n') = a / (a + (n' - e)+ w_min)``, falling with ``n'`` (1 up to ``n' = e``), and at most
        ``n'`` effective trials; the limit grows with the rate and the trials, so over
        ``n' in [a_j, a_j+1]`` it is at most ``L(P(a_j), a_j+1)``: the maximum over a geometric
        grid of ``n'`` from ``clip(e, min_rows, n)`` to ``n`` (with ``L(1, min(e, n))`` for the pure
        refinements below ``e``)."""
        n, e, A = st[0], st[1], st[3]
        m, z_level = self.min_rows, self.score_level

        def limit(p, trials):
            return wilson_interval(p * trials, trials, confidence_level=z_level)[0]

        pure = np.minimum(e, n)
        deff = self.deff  # the score's trials are a refinement's rows over the design effect
        best = np.where(e >= m, limit(np.ones_like(n), np.maximum(pure, 1.0) / deff), -np.inf)
        n0 = np.clip(e, m, n)
        with np.errstate(invalid="ignore", divide="ignore"):
            grid = [n0 * (n / n0) ** (j / _GRID) for j in range(_GRID + 1)]
            for lo, hi in zip(grid, grid[1:] or grid):
                short = np.maximum(lo - e, 0.0) * self.w_min
                p = np.where(A + short > 0, A / (A + short), 0.0)
                best = np.maximum(best, limit(np.clip(p, 0.0, 1.0), hi / deff))
        return best

    def _weighted_rest_bound(self, st):
        """At most the rest's weighted rate beside any refinement (see the module notes)."""
        W, A = st[2], st[3]
        TW, TA = self.totals[0], self.totals[1]
        w_least = np.minimum(np.maximum(A, self.min_rows * self.w_min), W)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(TW - w_least > 0, (TA - A) / (TW - w_least), 0.0)

    def _weighted_bound(self, st):
        """An upper bound on the weighted score of any refinement (the module notes argue it)."""
        m, w_min = self.min_rows, self.w_min
        TW, TA = self.totals[0], self.totals[1]
        if self.binary:
            return self._weighted_rate_bound(st) - self._weighted_rest_bound(st)
        W, pos = st[1], st[6]
        with np.errstate(invalid="ignore", divide="ignore"):
            top = np.minimum(self.y_max, pos / (m * w_min))
            num = TA - pos
            rest = np.where(num >= 0, num / np.maximum(TW - m * w_min, 1e-300),
                            num / np.maximum(TW - W, 1e-300))
        return top - rest
