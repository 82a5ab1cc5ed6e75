"""Transport flips: move the attribute's proxies (and the attribute itself when it is a model input)
to where they would sit in the ``to`` group, and re-score.

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

The proxies moved are the ones given, else the top ``n_proxies`` model inputs of the attribute's
proxy ranking (:func:`probe.proxies.find_proxies`, the same ranking as the report's proxies table)
whose cross-fitted single-feature AUC is at least :data:`MIN_PROXY_AUC`.

References
----------
Villani, C. (2009). Optimal Transport, Old and New, ch. 2 (monotone rearrangement on the line).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats as _sps

from ..data import is_numeric
from ..errors import DataError, PlanError
from ..proxies import ProxyFindings, find_proxies
from .context import FlipContext, impossible_row, pair_row, score, set_column
from .findings import SCREEN_CAUTION, FlipFindings

__all__ = ["transport_flips", "quantile_map", "transport_categorical", "MIN_PROXY_AUC"]

MIN_PROXY_AUC = 0.55
"""A feature is moved as a proxy (when probe chooses them) only if it alone predicts the attribute
with a cross-fitted AUC of at least this (0.5 is chance)."""


def transport_flips(ctx: FlipContext, *, proxies, n_proxies, proxy_ranking, pair_seeds,
                    rng) -> FlipFindings:
    """The transport mode of :func:`probe.flips.flip_test` on a validated context.

    ``proxy_ranking`` (or, when None, :func:`~probe.proxies.find_proxies` with the proxies section's
    defaults, seeded by ``rng``) chooses the proxies when ``proxies`` is None; ``pair_seeds`` seed
    each pair's categorical transport.
    """
    attribute, X = ctx.attribute, ctx.X
    if proxies is not None:
        proxies = _given_proxies(ctx, proxies)
    else:
        if proxy_ranking is None and ctx.features:
            proxy_ranking = find_proxies(X, attribute, features=ctx.features, multivariate=False,
                                         confidence_level=ctx.confidence_level, rng=rng)
        proxies = _ranked_proxies(ctx, proxy_ranking, n_proxies)
    if not proxies and not ctx.is_input:
        ctx.notes.append(f"`{attribute}` is not a model input and no proxies were found to move; "
                         "transport does not apply")
        return _findings(ctx, (), ())
    moved = ((attribute,) if ctx.is_input else ()) + tuple(proxies)
    prepared = {p: _prepare_proxy(X[p]) for p in proxies}
    base = ctx.base_scores
    rows = []
    for (src, dst), seed in zip(ctx.pairs, pair_seeds):
        idx = ctx.group_rows[src]
        if ctx.is_input and ctx.unknown(dst):
            rows.append(impossible_row(ctx, "transport", src, dst, moved))
            continue
        cf = X.iloc[idx].copy(deep=False)  # a new frame (see direct_flips); X is never touched
        if ctx.is_input:
            cf = set_column(cf, attribute, dst)
        tgt = ctx.group_rows[dst]
        pgen = np.random.default_rng(seed)
        for p in proxies:
            cf[p] = _move_proxy(X[p], prepared[p], idx, tgt, pgen)
        new = score(ctx.model, cf, f"the {len(idx)} rows of `{attribute}` = {src!r} transported "
                                   f"to {dst!r}")
        rows.append(pair_row(ctx, "transport", src, dst, idx, base[idx], new, moved))
    return _findings(ctx, tuple(rows), tuple(proxies))


def _findings(ctx, rows, proxies):
    return FlipFindings(ctx.attribute, "transport", rows, tuple(ctx.notes), SCREEN_CAUTION,
                        ctx.threshold, ctx.favorable, {"proxies": proxies})


def _given_proxies(ctx, proxies) -> list:
    proxies = list(dict.fromkeys(proxies))
    bad = [p for p in proxies if p not in ctx.X.columns]
    if bad:
        raise DataError(f"`proxies` names columns not in the data: {', '.join(map(str, bad))}")
    if ctx.attribute in proxies:
        raise DataError(f"`proxies` must not include the protected attribute `{ctx.attribute}`")
    unused = [p for p in proxies if p not in ctx.inputs]
    if unused:
        ctx.notes.append("proxies that are not model inputs change nothing: "
                         + ", ".join(f"`{p}`" for p in unused))
    ctx.notes.append("proxies moved (given): " + ", ".join(f"`{p}`" for p in proxies))
    return proxies


def _ranked_proxies(ctx, ranking: ProxyFindings | None, n_proxies) -> list:
    """The top ``n_proxies`` model inputs of the ranking that reach :data:`MIN_PROXY_AUC`."""
    if ranking is None:  # no model input besides the attribute
        return []
    if not isinstance(ranking, ProxyFindings) or ranking.attribute != ctx.attribute:
        raise PlanError(f"`proxy_ranking` must be the ProxyFindings of `{ctx.attribute}`, got "
                        f"{getattr(ranking, 'attribute', type(ranking).__name__)!r}")
    features = set(ctx.features)
    top = [r for r in ranking.rows if r.feature in features][:n_proxies]
    # only features that do stand in for the attribute are moved: a feature whose cross-fitted AUC
    # is at chance would be shuffled between two near-identical distributions for nothing
    rows = [r for r in top if np.isfinite(r.auc) and r.auc >= MIN_PROXY_AUC]
    if not rows:
        ctx.notes.append(f"no model input predicts `{ctx.attribute}` with a cross-fitted AUC of at "
                         f"least {MIN_PROXY_AUC}: nothing but the attribute is moved")
        return []
    ctx.notes.append(f"proxies moved (the top {n_proxies} model inputs of the proxy ranking by "
                     f"cross-fitted single-feature AUC, those at or above {MIN_PROXY_AUC}): "
                     + ", ".join(f"`{r.feature}` (AUC {r.auc:.3f})" for r in rows))
    return [r.feature for r in rows]


def quantile_map(source, target, *, integer=False) -> np.ndarray:
    """Map each source value to the target's empirical quantile at its mid-rank plotting position.

    ``q = (r - 1/2) / n`` with ``r`` the mid-rank (ties averaged) among the ``n`` non-missing source
    values; the result is the target's quantile at ``q`` with the same plotting position
    (``numpy.quantile(..., method="hazen")``), or the nearest order statistic when ``integer``.
    Missing source values stay missing.
    """
    source = np.asarray(source, dtype=float)
    target = np.asarray(target, dtype=float)
    target = np.sort(target[~np.isnan(target)])
    out = np.full(len(source), np.nan)
    ok = ~np.isnan(source)
    if not ok.any() or len(target) == 0:
        return out
    q = (_sps.rankdata(source[ok], method="average") - 0.5) / ok.sum()
    if integer:
        pos = np.clip(np.round(q * len(target) - 0.5).astype(np.int64), 0, len(target) - 1)
        out[ok] = target[pos]
    else:
        # numpy's "hazen" quantile (virtual index n q - 1/2, clipped, linear), via one interp call:
        # np.quantile partitions once per q, far too slow for a whole column of q values
        out[ok] = np.interp(q * len(target) - 0.5, np.arange(len(target)), target)
    return out


def transport_categorical(source_codes, target_counts, rng) -> np.ndarray:
    """Reassign levels so their counts match ``target_counts``, changing the fewest rows.

    ``source_codes`` are level codes ``0..L-1`` (``-1`` missing, left as is); ``target_counts`` the
    desired count of each level among the non-missing rows (summing to their number). Each level
    keeps ``min(have, need)`` rows; the surplus rows (picked by a permutation from ``rng``) are dealt
    to the levels in deficit in level order.
    """
    codes = np.asarray(source_codes, dtype=np.int64)
    out = codes.copy()
    need = np.asarray(target_counts, dtype=np.int64)
    ok = np.flatnonzero(codes >= 0)
    have = np.bincount(codes[ok], minlength=len(need))
    perm = ok[rng.permutation(len(ok))]
    perm = perm[np.argsort(codes[perm], kind="stable")]  # by level, permuted within a level
    starts = np.concatenate([[0], np.cumsum(have)])
    surplus = [perm[starts[lv] + need[lv]:starts[lv + 1]]
               for lv in range(len(need)) if have[lv] > need[lv]]
    surplus = np.concatenate(surplus) if surplus else np.empty(0, dtype=np.int64)
    deficit = np.maximum(need - have, 0)
    out[surplus] = np.repeat(np.arange(len(need)), deficit)
    return out


def _largest_remainder(shares, total) -> np.ndarray:
    raw = shares * total
    base = np.floor(raw).astype(np.int64)
    rest = int(total - base.sum())
    if rest > 0:
        order = np.lexsort((np.arange(len(raw)), -(raw - base)))
        base[order[:rest]] += 1
    return base


def _prepare_proxy(col: pd.Series):
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


def _move_proxy(col: pd.Series, prepared, idx, tgt, gen):
    if prepared[0] == "numeric":
        v = prepared[1]
        if not np.isfinite(v[tgt]).any():
            raise DataError(f"proxy `{col.name}` has no known value in the target group, so it "
                            "cannot be moved there; leave it out of `proxies`")
        integer = pd.api.types.is_integer_dtype(col.dtype)
        mapped = quantile_map(v[idx], v[tgt], integer=integer)
        index = col.index[idx]
        if integer and not np.isnan(mapped).any():
            return pd.Series(mapped, index=index).astype(col.dtype)
        return pd.Series(mapped, index=index)
    _, codes, first = prepared
    src, tcodes = codes[idx], codes[tgt]
    tgt_counts = np.bincount(tcodes[tcodes >= 0], minlength=len(first))
    n_ok = int((src >= 0).sum())
    if tgt_counts.sum() == 0 or n_ok == 0:
        return col.iloc[idx]
    need = _largest_remainder(tgt_counts / tgt_counts.sum(), n_ok)
    new_codes = transport_categorical(src, need, gen)
    rows = np.where(new_codes >= 0, first[np.maximum(new_codes, 0)], idx)
    out = col.iloc[rows]
    out.index = col.index[idx]
    return out
