"""The transport mode's sampling variance: a bootstrap over both groups that re-estimates the map.

Every row of a transport test is moved by the same estimated map (the source group's empirical
quantiles onto the target group's), so the rows' flip indicators are not independent and a binomial
interval is too narrow. The estimand is the flip rate under the *population* map: the share of the
source population whose decision changes when each proxy is moved by ``F_to^-1 ∘ F_from`` (the
population quantile functions; for a categorical proxy the fewest-changes coupling of the population
level shares). Its estimate's variance is taken from a bootstrap over both groups: resample the
source and the target group (and the placebo's part of the source), re-estimate every map, and
re-score. Model calls dominate the cost, so each replicate re-scores only a fixed random subsample
of ``m`` source rows:

``θ*_b = Σ_i w_i I_i / n + Σ_i w_i D_ib / n``

with ``w`` the bootstrap counts of the source rows, ``I_i`` the row's flip under the estimated map
(known for every row) and ``D_ib`` the change of that indicator under the replicate's map (non-zero
only for rows near the decision boundary). The first sum is exact; the second is estimated from the
subsample, and the subsampling noise it adds, ``(1/m - 1/n)`` times the within-replicate variance of
``w_i D_ib``, is subtracted from the spread of the ``θ*_b``. The same replicates give the placebo's
rate and the excess (real − placebo), whose variance includes their covariance. The replicate maps
are computed from bootstrap counts on the sorted values (no re-sorting), and all replicates' rows
go to the model in one call: ``B · m · (1 - 1/e) · 2`` rows (real and placebo), about
``0.63 · 2 · 50 · 500 = 31,600`` at the defaults.

A categorical proxy's replicate coupling keeps the estimate's priority order, so a row changes
level only when the counts push it across its level's cut. Copies of a row drawn more than once
share its first copy's new level (their indicators are taken as equal), which can only widen the
interval.

Under a non-plain sampling design (:mod:`probe.flips.weighting`) a replicate draws the pair's
units (clusters, or rows) with replacement once for both groups, and each row counts as its unit's
draws times its weight (scaled so the source counts sum to ``n``, the target's to ``nt``): the
exact part is then the replicate's weighted rate and the rest is unchanged.

References
----------
Efron, B. & Tibshirani, R. (1993). An Introduction to the Bootstrap, ch. 6 (the bootstrap
estimate of standard error) and ch. 23 (an exact part plus a simulated correction).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .context import FlipContext, score, set_column
from .transport_maps import (coupled_codes, largest_remainder, proxy_values,
                             weighted_quantile_map)

__all__ = ["transport_variances", "BOOT_REPS", "BOOT_ROWS"]

BOOT_REPS = 50
"""Bootstrap replicates of the transport maps."""
BOOT_ROWS = 500
"""Source rows (a fixed random subsample) re-scored under each replicate's maps."""


def transport_variances(ctx: FlipContext, proxies, prepared, orders, idx, tgt, h, dst, flips,
                        placebo, gen, design=None) -> tuple:
    """Bootstrap variances of the flip rate, the placebo's rate and the excess of one pair.

    ``orders`` holds each categorical proxy's coupling priority (the estimate's, so that a row's
    move changes in a replicate only when the counts push it across its level's cut). ``flips``
    and ``placebo`` are the per-row flip indicators of the ``n`` source rows ``idx`` under
    the estimated real map (onto ``tgt``) and placebo map (onto ``h`` source rows); ``gen`` draws
    the replicates. Returns ``(var_real, var_placebo, var_excess)``, each at least 0.

    ``design`` (a non-plain design) is ``(source weights, target weights, placebo part positions,
    source units, target units)``: each replicate then draws the pair's units (clusters, or rows)
    with replacement, once for both groups (a unit holding rows of both, or a row of uncertain
    membership in both, is drawn for both), and every row's count is its unit's draw count times
    its weight (see the module notes).
    """
    n, nt = len(idx), len(tgt)
    m = min(n, BOOT_ROWS)
    sub = np.sort(gen.choice(n, m, replace=False))
    movers = [_Resampled(ctx.X[p], prepared[p], orders.get(p), idx, tgt) for p in proxies]
    exact = np.empty((BOOT_REPS, 2))
    live, weights, real_cols, pl_cols = [], [], [[] for _ in proxies], [[] for _ in proxies]
    draws = _unit_draws(design, n, nt, h)
    for b in range(BOOT_REPS):
        ws, wt, wh = draws(gen)
        exact[b] = ws @ flips / n, ws @ placebo / n
        rows = sub[ws[sub] > 0]
        live.append(rows)
        weights.append(ws[rows])
        for j, mv in enumerate(movers):
            real_cols[j].append(mv.mapped(ws, wt, rows))
            pl_cols[j].append(mv.mapped(ws, wh, rows, placebo=True))
    rows = np.concatenate(live)
    new = _score_batch(ctx, idx[rows], proxies, prepared, real_cols, pl_cols, dst)
    old = ctx.decisions(ctx.base_scores[idx[rows]])
    d_real = (ctx.decisions(new[:len(rows)]) != old) - flips[rows].astype(float)
    d_pl = (ctx.decisions(new[len(rows):]) != old) - placebo[rows].astype(float)
    bounds = np.cumsum([0] + [len(r) for r in live])
    w = np.concatenate(weights)
    out = []
    for d, base in ((d_real, exact[:, 0]), (d_pl, exact[:, 1]),
                    (d_real - d_pl, exact[:, 0] - exact[:, 1])):
        theta, noise = np.empty(BOOT_REPS), np.empty(BOOT_REPS)
        for b in range(BOOT_REPS):
            full = np.zeros(m)  # rows of the subsample not drawn weigh 0
            part = slice(bounds[b], bounds[b + 1])
            full[:part.stop - part.start] = w[part] * d[part]
            theta[b] = base[b] + full.mean()
            noise[b] = full.var(ddof=1) if m > 1 else 0.0
        var = theta.var(ddof=1) - noise.mean() * (1.0 / m - 1.0 / n)
        out.append(max(float(var), 0.0))
    return tuple(out)


def _unit_draws(design, n, nt, h):
    """A function of ``gen`` giving one replicate's counts of the source rows, the target rows and
    the placebo's part. Plain: rows drawn with replacement in each group (the placebo's part ``h``
    of the resampled rows). Under a design: units drawn once for the pair, each row counted as its
    unit's draws times its weight, the source counts scaled to sum to ``n`` (so ``ws @ x / n`` is
    the replicate's weighted rate), the target's to ``nt`` and the part's to its rows (the maps'
    scale, :mod:`.transport_maps`)."""
    if design is None:
        def plain(gen):
            draw = gen.integers(0, n, n)
            return (np.bincount(draw, minlength=n), np.bincount(gen.integers(0, nt, nt),
                                                                minlength=nt),
                    np.bincount(draw[:h], minlength=n))  # the placebo's part: h resampled rows
        return plain
    w_src, w_tgt, pos, u_src, u_tgt = design
    uniq, code = np.unique(np.concatenate([u_src, u_tgt]), return_inverse=True)
    c_src, c_tgt = code[:n], code[n:]
    in_part = np.zeros(n)
    in_part[pos] = 1.0

    def scaled(a, size):
        total = a.sum()
        return a * (size / total) if total > 0 else a

    def weighted(gen):
        units = np.bincount(gen.integers(0, len(uniq), len(uniq)), minlength=len(uniq))
        ws = units[c_src] * w_src
        return (scaled(ws, n), scaled(units[c_tgt] * w_tgt, nt),
                scaled(ws * in_part, len(pos)))
    return weighted


def _score_batch(ctx, positions, proxies, prepared, real_cols, pl_cols, dst):
    """One model call for every replicate's rows: the real moves, then the placebo's."""
    base = ctx.X.iloc[positions].reset_index(drop=True)
    real, pl = base.copy(deep=False), base.copy(deep=False)
    if ctx.is_input:
        real = set_column(real, ctx.attribute, dst)
    for j, p in enumerate(proxies):
        for frame, cols in ((real, real_cols), (pl, pl_cols)):
            frame[p] = proxy_values(ctx.X[p], prepared[p], np.concatenate(cols[j]), frame.index)
    frame = pd.concat([real, pl], ignore_index=True)
    return score(ctx.model, frame, f"{len(frame)} rows of `{ctx.attribute}` under "
                                   f"{BOOT_REPS} re-estimated transport maps")


class _Resampled:
    """One proxy of one pair, ready to be re-mapped under bootstrap counts of both groups."""

    def __init__(self, col, prepared, order, idx, tgt):
        self.kind = prepared[0]
        if self.kind == "numeric":
            v = prepared[1]
            self.integer = pd.api.types.is_integer_dtype(col.dtype)
            self.src = v[idx]
            src_ok = np.flatnonzero(~np.isnan(self.src))
            self.src_order = src_ok[np.argsort(self.src[src_ok], kind="stable")]
            self.src_sorted = self.src[self.src_order]
            t = v[tgt]
            t_ok = np.flatnonzero(~np.isnan(t))
            self.tgt_order = t_ok[np.argsort(t[t_ok], kind="stable")]
            self.tgt_sorted = t[self.tgt_order]
        else:
            _, codes, self.first = prepared
            self.src, self.tgt, self.idx, self.order = codes[idx], codes[tgt], idx, order

    def mapped(self, ws, wt, rows, *, placebo=False):
        """The moved values of the source ``rows`` (drawn at least once) under the source counts
        ``ws`` and the target counts ``wt`` (over the target rows; over the source rows when
        ``placebo``): floats (numeric) or the rows of the column holding each new level (the
        first copy's, for a row drawn more than once)."""
        if self.kind == "numeric":
            t_sorted, t_order = ((self.src_sorted, self.src_order) if placebo
                                 else (self.tgt_sorted, self.tgt_order))
            return weighted_quantile_map(self.src[rows], self.src_sorted, ws[self.src_order],
                                         t_sorted, wt[t_order], integer=self.integer)
        tcodes = self.src if placebo else self.tgt
        ok_t = tcodes >= 0
        tcounts = np.bincount(tcodes[ok_t], weights=wt[ok_t], minlength=len(self.first))
        n_ok = ws[self.src >= 0].sum()
        if tcounts.sum() == 0 or n_ok == 0:
            return self.idx[rows]
        shares = tcounts / tcounts.sum()  # counts: whole rows; weights: shares of the weight
        need = (largest_remainder(shares, int(n_ok)) if np.issubdtype(ws.dtype, np.integer)
                else shares * n_ok)
        new = coupled_codes(self.src, ws, need, self.order)[rows]
        return np.where(new >= 0, self.first[np.maximum(new, 0)], self.idx[rows])
