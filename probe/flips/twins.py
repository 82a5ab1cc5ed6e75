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
from dataclasses import replace

import numpy as np
from scipy import stats as _sps

from ..data import is_numeric
from ..encode import encode_columns
from ..errors import DataError
from ..stats import Estimate, wilson_interval
from ..threads import N_JOBS, limited
from .context import FlipContext, outcome_row
from .findings import SCREEN_CAUTION, FlipFindings, spread_interval, twin_sentence

__all__ = ["twin_flips"]

_TWIN_LEVELS = 20      # named levels per categorical in the twins' one-hot design
_TWIN_CHUNK = 20_000   # query rows per nearest-neighbour call
_KD_TREE_MAX_DIM = 8   # above this many encoded dimensions, brute (chunked) search is faster
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
            raw_nb = _kneighbors(Zt, Zs, k)
            raw = _twin_outcomes(fav[idx], fav, base, tgt[raw_nb])
            row = outcome_row(ctx, "twins", src, dst, idx, raw[0], raw[1], raw[2] - base[idx], ())
            notes.append(f"twins {src!r} -> {dst!r}: no own-group control, the {src!r} group has "
                         f"{n_src} rows (k={k} twins need at least {k + 1})")
            rows.append(replace(row, sentence=twin_sentence(row, k, None, ctx.confidence_level)))
            continue
        pair = _Pair(fav, base, idx, tgt, Zs, Zt, k)
        raw, matched, ctrl, subsampled = pair.outcomes(np.arange(n_src), np.arange(n_dst), pgen)
        row = outcome_row(ctx, "twins", src, dst, idx, raw[0], raw[1], raw[2] - base[idx], ())
        if subsampled or n_src - 1 > m:
            which = f"{dst!r} group" if subsampled else f"own {src!r} group"
            notes.append(f"twins {src!r} -> {dst!r}: the excess compares pools of equal size, "
                         f"{m} rows (the {which} subsampled)")
        counts = np.array([(ctrl[0] | ctrl[1]).sum(), (matched[0] | matched[1]).sum()], float)
        lo, hi = wilson_interval(counts, np.full(2, float(n_src)),
                                 confidence_level=ctx.confidence_level)
        rate_c, rate_m = (Estimate(c / n_src, float(a), float(b), "wilson")
                          for c, a, b in zip(counts, lo, hi))
        values = _excesses(matched, ctrl)
        se, df, note = _subsample_se(pair, pgen)
        if note:
            notes.append(f"twins {src!r} -> {dst!r}: {note}")
        excess = [spread_interval(v, s, df, ctx.confidence_level, "half-sample-t")
                  for v, s in zip(values, se)]
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


def _excesses(matched, ctrl) -> np.ndarray:
    """Mean paired differences (matched − own-group): overall, to favourable, to unfavourable,
    twins' mean score."""
    d_fav = matched[0].astype(float) - ctrl[0]
    d_unfav = matched[1].astype(float) - ctrl[1]
    return np.array([(d_fav + d_unfav).mean(), d_fav.mean(), d_unfav.mean(),
                     (matched[2] - ctrl[2]).mean()])  # to_fav and to_unfav are disjoint


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
    reps = np.array([_excesses(*pair.outcomes(np.sort(gen.choice(n_src, r_src, replace=False)),
                                              np.sort(gen.choice(n_dst, r_dst, replace=False)),
                                              gen)[1:3])
                     for _ in range(SUBSAMPLES)])
    f = (r_src + r_dst) / (n_src + n_dst)
    return np.sqrt(f / (1 - f) * reps.var(axis=0, ddof=1)), SUBSAMPLES - 1.0, None


class _Pair:
    """One ``(from, to)`` pair ready for the twin searches, on all its people or a subsample."""

    def __init__(self, fav, base, idx, tgt, Zs, Zt, k):
        self.fav, self.base, self.idx, self.tgt, self.Zs, self.Zt, self.k = (
            fav, base, idx, tgt, Zs, Zt, k)

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
        raw_nb, matched_nb = _cross_twins(Zt, Zs, k, sub)
        own = self.fav[idx]
        raw = _twin_outcomes(own, self.fav, self.base, tgt[raw_nb])
        own_nb = _own_twins(Zs, k, m, gen)
        matched = raw if sub is None else _twin_outcomes(own, self.fav, self.base,
                                                         tgt[sub[matched_nb]])
        ctrl = _twin_outcomes(own, self.fav, self.base, idx[own_nb])
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


def _kneighbors(pool, queries, n_neighbors) -> np.ndarray:
    """Positions in ``pool`` of each query row's ``n_neighbors`` nearest, nearest first; queried in
    chunks so memory stays bounded (never a queries x pool matrix)."""
    from sklearn.neighbors import NearestNeighbors

    # a k-d tree wins in few dimensions; beyond that sklearn's brute search (computed in chunks
    # under its working-memory bound, never an n x n matrix) is several times faster
    algorithm = "kd_tree" if pool.shape[1] <= _KD_TREE_MAX_DIM else "brute"
    out = np.empty((len(queries), n_neighbors), dtype=np.int64)
    with limited():
        nn = NearestNeighbors(n_neighbors=n_neighbors, algorithm=algorithm,
                              n_jobs=N_JOBS).fit(pool)
        for start in range(0, len(queries), _TWIN_CHUNK):
            stop = min(start + _TWIN_CHUNK, len(queries))
            out[start:stop] = nn.kneighbors(queries[start:stop], return_distance=False)
    return out


def _query_depth(k, p, n) -> int:
    """How many neighbours in the full pool to ask for so that, with probability at least 0.999,
    ``k`` of them fall in a random subsample holding a share ``p`` of it."""
    depth = k
    while depth < n and _sps.binom.sf(k - 1, depth, p) < 0.999:
        depth += 1
    return depth


def _cross_twins(Zt, Zs, k, sub):
    """The ``k`` nearest other-group twins of each source row: in the whole group (positions in
    ``Zt``) and in the subsample ``sub`` (positions in ``sub``; the same array when ``sub`` is
    None)."""
    if sub is None:
        nb = _kneighbors(Zt, Zs, k)
        return nb, nb
    p = len(sub) / len(Zt)
    if p < 0.5:  # a small subsample: its own search is cheap
        return _kneighbors(Zt, Zs, k), _kneighbors(Zt[sub], Zs, k)
    # most of the group is kept: one deeper search in the whole group serves both; the nearest k
    # of it that lie in the subsample are its nearest k there (rows short of k are searched again)
    full = _kneighbors(Zt, Zs, _query_depth(k, p, len(Zt)))
    pos = np.full(len(Zt), -1, dtype=np.int64)
    pos[sub] = np.arange(len(sub))
    in_sub = pos[full]
    hit = in_sub >= 0
    order = np.argsort(~hit, axis=1, kind="stable")[:, :k]
    matched = np.take_along_axis(in_sub, order, axis=1)
    short = np.flatnonzero(hit.sum(axis=1) < k)
    if len(short):
        matched[short] = _kneighbors(Zt[sub], Zs[short], k)
    return full[:, :k], matched


def _own_twins(Zs, k, m, gen) -> np.ndarray:
    """Each source row's ``k`` nearest other members of its own group (positions in ``Zs``), drawn
    from a pool of ``m`` others: all of the group when it has ``m + 1`` rows, else a random
    ``m + 1`` of them (a row outside that subsample draws from all ``m + 1``, one more; immaterial).

    Asks for ``k + 1`` and drops the row itself; when exact duplicates crowd it out of its own
    ``k + 1`` nearest, the farthest is dropped instead."""
    n = len(Zs)
    pool = np.sort(gen.choice(n, m + 1, replace=False)) if n - 1 > m else np.arange(n)
    pos = np.full(n, -1, dtype=np.int64)
    pos[pool] = np.arange(len(pool))
    nb = _kneighbors(Zs[pool] if len(pool) < n else Zs, Zs, k + 1)
    is_self = nb == pos[:, None]
    drop = np.where(is_self.any(axis=1), is_self.argmax(axis=1), k)
    keep = np.ones(nb.shape, dtype=bool)
    keep[np.arange(n), drop] = False
    return pool[nb[keep].reshape(n, k)]


def _twin_outcomes(own_fav, fav, base, twin_rows):
    """Per person: (twins favourable by majority and the person not, the reverse, twins' mean
    score); a tie among an even number of twins counts as no difference."""
    share = fav[twin_rows].mean(axis=1)
    return ~own_fav & (share > 0.5), own_fav & (share < 0.5), base[twin_rows].mean(axis=1)
