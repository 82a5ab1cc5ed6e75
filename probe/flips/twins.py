"""Twins (situation testing): compare each person with the ``k`` nearest people of the other group,
and with the ``k`` nearest of their own group as a control.

Distances are on the non-protected model features: numerics (:func:`probe.data.is_numeric`, the
encoder's rule) standardised with the pooled mean and standard deviation of the two groups, missing
values set to that mean; categoricals one-hot on the levels of the shared encoder
(:func:`probe.encode.encode_columns` with up to 20 named levels, the rest ``other``, missing a
level) with each indicator scaled by ``1/sqrt(2)`` so that a level mismatch costs the same as one standard
deviation. Neighbours come from scikit-learn's ``NearestNeighbors`` fitted on the other group: a k-d
tree up to 8 encoded dimensions, beyond that its brute-force search, which sklearn runs in chunks
under a working-memory bound (on 20 dimensions it is about 20 times faster than a tree). Queries go
in chunks of 20,000 rows, so memory stays bounded.

Reported: the share of people whose decision differs from that of most of their twins (a tie among
an even ``k`` counts as no difference), split by direction, and the mean of (twins' mean score − own
score). Near the decision boundary neighbours disagree whatever the group, so that share is well
above zero even for a model blind to the group; the *control* repeats the search in the person's own
group (themselves excluded), on a pool of the same size as the cross-group one (the larger is
subsampled, seeded: a k-NN search reaches farther in a smaller pool and finds more disagreement),
and the *excess* — the mean per-person paired difference of the cross-group and own-group flip
indicators (and of the twins' scores) — is the part attributable to the group.

Self-exclusion: the own-group search asks for ``k + 1`` neighbours and drops the person themself;
when exact duplicates crowd the person out of their own ``k + 1`` nearest, the farthest of the
``k + 1`` is dropped instead (deterministic, and every remaining twin is another person at distance
zero).

Intervals: the raw shares and ``control_rate`` are Wilson. Each excess is an average over people
who share twins (one candidate twin serves about ``n_from / pool`` people) and over one random draw of
the pools, so its standard error comes from :data:`SUBSAMPLES` random subsamples of both groups, each
holding a share ``f`` of every group (half, or :data:`SUBSAMPLE_ROWS` rows of the pair when that is
less), drawn without replacement, with the pools re-drawn and the twins searched again: the
delete-d jackknife's ``se² = f/(1 - f) · var(excess over subsamples)`` (Shao & Wu 1989; with
``f = 1/2``, half-sampling), and the interval ``excess ± t · se`` with ``SUBSAMPLES - 1`` degrees of
freedom (method ``"half-sample-t"``). Subsamples, not the bootstrap: a bootstrap resample holds
copies of a person, who would then be their own nearest twin (the bootstrap is not valid for
nearest-neighbour matching; Abadie & Imbens 2008). The cost is ``SUBSAMPLES`` searches on the
subsamples, a few times the full search on small data and bounded by the row cap on large data.

What the control removes is the disagreement found near the decision boundary whatever the group.
It does not remove imperfect matching: when the groups' feature distributions differ, a person's
nearest twins in the other group sit systematically towards that group's bulk, and a model can show
an excess through the features that differ even when it never reads the group.

References
----------
Bendick, M. (2007). Situation testing for employment discrimination in the United States. Horizons
stratégiques 5.
Shao, J. & Wu, C. F. J. (1989). A general theory for jackknife variance estimation. Annals of
Statistics 17, 1176-1197 (the delete-d jackknife).
Abadie, A. & Imbens, G. W. (2008). On the failure of the bootstrap for matching estimators.
Econometrica 76, 1537-1557.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from ..data import is_numeric
from ..encode import encode_columns
from ..errors import DataError
from ..stats import Estimate, wilson_interval
from .context import FlipContext, outcome_row
from .findings import SCREEN_CAUTION, FlipFindings, spread_interval, twin_sentence
from .twins_search import cross_excluding, cross_twins, kneighbors, own_twins, twin_outcomes
from .weighting import spread_n_effective, weighted_shares

__all__ = ["twin_flips"]

_TWIN_LEVELS = 20      # named levels per categorical in the twins' one-hot design
SUBSAMPLES = 20
"""Random subsamples of both groups behind the excess's standard error."""
SUBSAMPLE_ROWS = 4_000
"""The subsamples hold half of each group, or this many rows of the pair when that is less."""


def twin_flips(ctx: FlipContext, *, k, pair_seeds) -> FlipFindings:
    """The twins mode of :func:`probe.flips.flip_test` on a validated context.

    Each pair's seed draws the subsample that matches the two pools in size, and the subsamples of
    the excess's interval. Rows carry ``control_rate``, ``matched_rate``, ``excess``,
    ``excess_to_favorable``, ``excess_to_unfavorable``, ``excess_score_change`` and ``twin_pool``
    (None when the source group has ``k`` rows or fewer, so no own-group control can be formed; a
    note says so).
    """
    notes = ctx.notes
    design = _TwinDesign(ctx)
    base = ctx.base_scores
    fav = ctx.decisions(base)
    rows = []
    for (src, dst), seed in zip(ctx.pairs, pair_seeds):
        idx, tgt = ctx.group_rows[src], ctx.group_rows[dst]
        if len(tgt) < k:
            notes.append(f"twins {src!r} -> {dst!r} skipped: the {dst!r} group has {len(tgt)} rows, "
                         f"fewer than k={k}")
            continue
        Zs, Zt = design.pair(idx, tgt)
        n_src, n_dst = len(idx), len(tgt)
        m = min(n_dst, n_src - 1)
        pgen = np.random.default_rng(seed)
        if m < k:
            pd_ = _PairDesign.of(ctx, src, dst)
            vote = None if pd_ is None else pd_.vote_dst
            raw_nb = (kneighbors(Zt, Zs, k) if vote is None
                      else cross_excluding(Zt, Zs, k, idx, tgt))
            raw = twin_outcomes(fav[idx], fav, base, tgt[raw_nb], vote)
            row = outcome_row(ctx, "twins", src, dst, idx, raw[0], raw[1], raw[2] - base[idx], ())
            notes.append(f"twins {src!r} -> {dst!r}: no own-group control, the {src!r} group has "
                         f"{n_src} rows (k={k} twins need at least {k + 1})")
            rows.append(replace(row, sentence=twin_sentence(row, k, None, ctx.confidence_level)))
            continue
        pair = _Pair(fav, base, idx, tgt, Zs, Zt, k, _PairDesign.of(ctx, src, dst))
        raw, matched, ctrl, subsampled = pair.outcomes(np.arange(n_src), np.arange(n_dst), pgen)
        row = outcome_row(ctx, "twins", src, dst, idx, raw[0], raw[1], raw[2] - base[idx], ())
        if subsampled or n_src - 1 > m:
            which = f"{dst!r} group" if subsampled else f"own {src!r} group"
            notes.append(f"twins {src!r} -> {dst!r}: the excess compares pools of equal size, "
                         f"{m} rows (the {which} subsampled)")
        rate_c, rate_m = _rates(ctx, pair, ctrl[0] | ctrl[1], matched[0] | matched[1])
        values = _excesses(matched, ctrl, pair.weights)
        se, df, note = _subsample_se(pair, pgen)
        if note:
            notes.append(f"twins {src!r} -> {dst!r}: {note}")
        excess = [spread_interval(v, s, df, ctx.confidence_level, "half-sample-t")
                  for v, s in zip(values, se)]
        if pair.weights is not None:
            diffs = _differences(matched, ctrl)
            excess = [replace(e, n_effective=spread_n_effective(dv, pair.weights, s, n_src))
                      for e, dv, s in zip(excess, diffs, se)]
        row = replace(row, control_rate=rate_c, matched_rate=rate_m, excess=excess[0],
                      excess_to_favorable=excess[1], excess_to_unfavorable=excess[2],
                      excess_score_change=excess[3], twin_pool=int(m), excess_se=float(se[0]),
                      excess_df=df)
        rows.append(replace(row, sentence=twin_sentence(row, k, subsampled,
                                                        ctx.confidence_level)))
    return FlipFindings(ctx.attribute, "twins", tuple(rows), tuple(notes), SCREEN_CAUTION,
                        ctx.threshold, ctx.favorable,
                        {"k": k, "features": design.features,
                         "control": "own-group twins, self excluded, pools matched in size",
                         "excess_interval": "half-sample-t"})


def _rates(ctx, pair, ctrl, matched):
    """The control's and the matched pool's flip rates (Wilson; weighted under a design)."""
    cl, n_src = ctx.confidence_level, len(pair.idx)
    if pair.weights is not None:
        d = ctx.design
        return weighted_shares((ctrl, matched), pair.weights, d.unit_of(pair.idx), d.clustered,
                               cl)
    counts = np.array([ctrl.sum(), matched.sum()], float)
    lo, hi = wilson_interval(counts, np.full(2, float(n_src)), confidence_level=cl)
    return [Estimate(c / n_src, float(a), float(b), "wilson") for c, a, b in zip(counts, lo, hi)]


def _differences(matched, ctrl) -> list:
    """Per person (matched − own-group): overall, to favourable, to unfavourable, twins' mean
    score (to_fav and to_unfav are disjoint)."""
    d_fav = matched[0].astype(float) - ctrl[0]
    d_unfav = matched[1].astype(float) - ctrl[1]
    return [d_fav + d_unfav, d_fav, d_unfav, matched[2] - ctrl[2]]


def _excesses(matched, ctrl, weights=None) -> np.ndarray:
    """Mean paired differences (:func:`_differences`), weighted by the people's weights."""
    if weights is None:
        return np.array([d.mean() for d in _differences(matched, ctrl)])
    return np.array([np.average(d, weights=weights) for d in _differences(matched, ctrl)])


def _subsample_se(pair, gen):
    """Standard errors of the four excesses from :data:`SUBSAMPLES` random subsamples of both
    groups (people drawn without replacement, pools re-drawn, twins searched again), and the t
    quantile's degrees of freedom; a note when the groups are too small for it (NaN)."""
    n_src, n_dst = len(pair.idx), len(pair.tgt)
    f = min(0.5, SUBSAMPLE_ROWS / (n_src + n_dst))
    r_src, r_dst = int(round(f * n_src)), int(round(f * n_dst))
    if min(r_dst, r_src - 1) < pair.k:
        return (np.full(4, math.nan), SUBSAMPLES - 1.0,
                "too few rows for the excess's interval (half of each group must hold a pool of "
                f"k={pair.k} twins)")
    if pair.design is not None:
        return _unit_subsample_se(pair, f, gen)
    reps = np.array([_excesses(*pair.outcomes(np.sort(gen.choice(n_src, r_src, replace=False)),
                                              np.sort(gen.choice(n_dst, r_dst, replace=False)),
                                              gen)[1:3])
                     for _ in range(SUBSAMPLES)])
    f = (r_src + r_dst) / (n_src + n_dst)
    return np.sqrt(f / (1 - f) * reps.var(axis=0, ddof=1)), SUBSAMPLES - 1.0, None


def _unit_subsample_se(pair, f, gen):
    """:func:`_subsample_se` under a design: a share ``f`` of the pair's units (clusters, or
    rows; a row of uncertain membership is one unit in both groups) is drawn without
    replacement, with all their rows in both groups, and the excess is weighted; the delete-d
    factor is on the units' share. Subsamples too small for ``k`` twins are drawn again."""
    d = pair.design
    uniq, code = np.unique(np.concatenate([d.u_src, d.u_tgt]), return_inverse=True)
    c_src, c_tgt = code[:len(pair.idx)], code[len(pair.idx):]
    r = max(1, int(round(f * len(uniq))))
    reps = []
    for _ in range(4 * SUBSAMPLES):
        keep = np.zeros(len(uniq), dtype=bool)
        keep[gen.choice(len(uniq), r, replace=False)] = True
        s, t = np.flatnonzero(keep[c_src]), np.flatnonzero(keep[c_tgt])
        if min(len(t), len(s) - 1) < pair.k:
            continue
        out = pair.outcomes(s, t, gen)
        reps.append(_excesses(out[1], out[2], pair.weights[s]))
        if len(reps) == SUBSAMPLES:
            break
    if len(reps) < 2:
        return np.full(4, math.nan), SUBSAMPLES - 1.0, "too few units for the excess's interval"
    f = r / len(uniq)
    reps = np.array(reps)
    return np.sqrt(f / (1 - f) * reps.var(axis=0, ddof=1)), len(reps) - 1.0, None


@dataclass(frozen=True)
class _PairDesign:
    """A pair's design: the source people's weights, both groups' units, and for an attribute
    known as membership probabilities each row's probability of each group (the twins' votes)."""

    weights: np.ndarray
    u_src: np.ndarray
    u_tgt: np.ndarray
    vote_src: np.ndarray | None
    vote_dst: np.ndarray | None

    @staticmethod
    def of(ctx, src, dst):
        d = ctx.design
        if not d.weighted:
            return None
        idx, tgt = ctx.group_rows[src], ctx.group_rows[dst]
        units = d.units if d.units is not None else np.arange(len(ctx.X))
        votes = (None, None)
        if d.membership is not None:
            lv = d.membership.levels
            votes = (d.membership.probs[:, lv.index(src)], d.membership.probs[:, lv.index(dst)])
        return _PairDesign(d.of(src), units[idx], units[tgt], *votes)


class _Pair:
    """One ``(from, to)`` pair ready for the twin searches, on all its people or a subsample."""

    def __init__(self, fav, base, idx, tgt, Zs, Zt, k, design=None):
        self.fav, self.base, self.idx, self.tgt, self.Zs, self.Zt, self.k = (
            fav, base, idx, tgt, Zs, Zt, k)
        self.design = design

    @property
    def weights(self):
        return None if self.design is None else self.design.weights

    def outcomes(self, s, t, gen):
        """Per person of the source rows ``s`` (positions in the pair's source group), with the
        target rows ``t``: the cross-group outcomes on the whole of ``t``, on the size-matched pool,
        the own-group control's, and whether ``t`` was subsampled for the pool."""
        k, idx, tgt = self.k, self.idx[s], self.tgt[t]
        Zs, Zt = self.Zs[s], self.Zt[t]
        n_src, n_dst = len(idx), len(tgt)
        m = min(n_dst, n_src - 1)
        # the other group's pool for the excess: all of it, or m of its rows
        sub = np.sort(gen.choice(n_dst, m, replace=False)) if n_dst > m else None
        d = self.design
        shared = d is not None and d.vote_dst is not None  # a row can be in both groups
        if shared:
            raw_nb = cross_excluding(Zt, Zs, k, idx, tgt)
            matched_nb = raw_nb if sub is None else cross_excluding(Zt[sub], Zs, k, idx, tgt[sub])
        else:
            raw_nb, matched_nb = cross_twins(Zt, Zs, k, sub)
        v_src, v_dst = (d.vote_src, d.vote_dst) if shared else (None, None)
        own = self.fav[idx]
        raw = twin_outcomes(own, self.fav, self.base, tgt[raw_nb], v_dst)
        own_nb = own_twins(Zs, k, m, gen)
        matched = raw if sub is None else twin_outcomes(own, self.fav, self.base,
                                                         tgt[sub[matched_nb]], v_dst)
        ctrl = twin_outcomes(own, self.fav, self.base, idx[own_nb], v_src)
        return raw, matched, ctrl, sub is not None


class _TwinDesign:
    """The features twins are matched on, read once per flip test; :meth:`pair` standardises them
    for one pair of groups."""

    def __init__(self, ctx: FlipContext):
        X = ctx.X
        features = ctx.features
        if not features:
            raise DataError(f"twins need model features besides `{ctx.attribute}`; none are in "
                            "the data")
        numeric = [c for c in features if is_numeric(X[c])]
        enc = encode_columns(X, columns=[c for c in features if c not in numeric],
                             max_levels=_TWIN_LEVELS, min_level_share=0.0)
        self.numeric = {c: X[c].to_numpy(dtype=float, na_value=np.nan) for c in numeric}
        self.categorical = {c.name: c for c in enc.columns}
        self.features = tuple(c for c in features if c in self.numeric or c in self.categorical)
        if not self.features:
            raise DataError(f"twins need model features besides `{ctx.attribute}`; "
                            + "; ".join(enc.notes))
        ctx.notes.extend(f"twins: {note}" for note in enc.notes)
        ctx.notes.append("twins matched on " + ", ".join(f"`{c}`" for c in self.features)
                         + " (numerics standardised, categoricals one-hot)")

    def pair(self, idx, tgt):
        """The design rows of the source group ``idx`` and the target group ``tgt``."""
        both = np.concatenate([idx, tgt])
        blocks_s, blocks_t = [], []
        for c in self.features:
            if c in self.numeric:
                v = self.numeric[c]
                mu, sd = _centre_scale(v[both])
                if not (np.isfinite(mu) and np.isfinite(sd)):
                    # values near the float limit (1e308) overflow the mean or the variance:
                    # divided by the largest magnitude first, they standardise to the same values
                    v = v / np.nanmax(np.abs(v[both]))
                    mu, sd = _centre_scale(v[both])
                sd = sd if sd > 0 and np.isfinite(sd) else 1.0
                blocks_s.append(np.where(np.isnan(v[idx]), 0.0, (v[idx] - mu) / sd)[:, None])
                blocks_t.append(np.where(np.isnan(v[tgt]), 0.0, (v[tgt] - mu) / sd)[:, None])
            else:
                col = self.categorical[c]
                eye = np.eye(col.n_levels) / math.sqrt(2.0)
                blocks_s.append(eye[col.codes[idx]])
                blocks_t.append(eye[col.codes[tgt]])
        return np.hstack(blocks_s), np.hstack(blocks_t)


def _centre_scale(pooled):
    """The mean and standard deviation of the present values (both 0 when there are none)."""
    if np.isnan(pooled).all():
        return 0.0, 0.0
    with np.errstate(over="ignore", invalid="ignore"):
        return np.nanmean(pooled), np.nanstd(pooled)
