"""Transport flips: move the attribute's proxies (and the attribute itself when it is a model input)
to where they would sit in the ``to`` group (:mod:`.transport_maps`), and re-score.

The proxies moved are the ones given, else the top ``n_proxies`` model inputs of the attribute's
proxy ranking (:func:`probe.proxies.find_proxies`, the same ranking as the report's proxies table)
whose cross-fitted single-feature AUC is at least :data:`MIN_PROXY_AUC`.

**Placebo.** An estimated map moves rows even between two samples of one population, and near the
decision boundary that alone flips decisions. So each pair also maps the source group onto a random
part of itself (seeded), with the same proxies and machinery and the attribute unchanged: the
placebo's flip rate is that noise, and the *excess* (real − placebo) is the figure a policy judges.
The part has ``h = n·n_to / (n + 2·n_to)`` rows (half the group when the target group is much
larger): the empirical distribution of ``h`` of ``n`` rows differs from the whole group's by
sampling noise of variance ``1/h - 1/n = 1/n + 1/n_to``, as much as the real map's two samples,
so under no real shift the placebo and the real rate have the same expectation to first order.
Under a real shift the noise flips and the real ones overlap, so the excess runs low: its interval
covered the population-map rate 86 % of the time (``tests/sim/sim_flips.py``). The excess is a
test that the proxies move decisions beyond noise; read it as a lower estimate of the size.

**Intervals.** The estimand is the flip rate under the population map (:mod:`.transport_boot`);
its variance, the placebo's and the excess's come from a bootstrap over both groups that
re-estimates the maps. The flip rate and the placebo rate are Wilson intervals on the effective
number of rows (``n`` divided by the design effect: the bootstrap variance over the binomial one,
at least 1; method ``"wilson-design-effect"``), the two directions take the flip rate's design
effect; the excess is ``± z·se`` (``"bootstrap-normal"``).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from ..errors import DataError, PlanError
from ..proxies import ProxyFindings, find_proxies
from ..stats import Estimate, wilson_interval
from .context import FlipContext, impossible_row, pair_row, score, set_column
from .findings import (SCREEN_CAUTION, FlipFindings, pair_sentence, placebo_sentence,
                       spread_interval)
from .transport_boot import transport_variances
from .transport_maps import level_order, move_proxy, prepare_proxy
from .weighting import spread_n_effective

__all__ = ["transport_flips", "MIN_PROXY_AUC"]

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
            member = ctx.design.membership
            ranked = X if member is None else X.assign(**{attribute: np.asarray(
                member.levels, dtype=object)[member.probs.argmax(axis=1)]})
            proxy_ranking = find_proxies(ranked, attribute, features=ctx.features,
                                         multivariate=False,
                                         confidence_level=ctx.confidence_level, rng=rng)
        proxies = _ranked_proxies(ctx, proxy_ranking, n_proxies)
    if not proxies and not ctx.is_input:
        ctx.notes.append(f"`{attribute}` is not a model input and no proxies were found to move; "
                         "transport does not apply")
        return _findings(ctx, (), ())
    moved = ((attribute,) if ctx.is_input else ()) + tuple(proxies)
    prepared = {p: prepare_proxy(X[p]) for p in proxies}
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
        # each categorical proxy's coupling priority, shared by the placebo and the bootstrap so
        # that their couplings move the same rows where they can
        orders = {}
        weights = None if not ctx.design.weighted else (ctx.design.of(src),
                                                        ctx.design.of(dst))
        for p in proxies:
            if prepared[p][0] == "categorical":
                orders[p] = level_order(prepared[p][1][idx], pgen)
            cf[p] = move_proxy(X[p], prepared[p], idx, tgt, orders.get(p), weights)
        new = score(ctx.model, cf, f"the {len(idx)} rows of `{attribute}` = {src!r} transported "
                                   f"to {dst!r}")
        row = pair_row(ctx, "transport", src, dst, idx, base[idx], new, moved)
        rows.append(_with_placebo(ctx, row, proxies, prepared, orders, idx, tgt, dst, new, pgen))
    return _findings(ctx, tuple(rows), tuple(proxies))


def placebo_size(n, n_to) -> int:
    """Rows of the source group the placebo maps onto: ``n·n_to / (n + 2·n_to)``, rounded."""
    return int(round(n * n_to / (n + 2 * n_to)))


def _with_placebo(ctx, row, proxies, prepared, orders, idx, tgt, dst, new, gen):
    """The row with its placebo, its bootstrap intervals and its sentence. Unchanged when no proxy
    moves (only the attribute changes: no map, no placebo, the flip rate is judged); no placebo
    when the group is too small to split (fewer than 2 rows in the placebo's part)."""
    n, X = len(idx), ctx.X
    h = placebo_size(n, len(tgt))
    if not proxies:
        return row
    if h < 2:
        ctx.notes.append(f"transport {row.from_!r} -> {dst!r}: the {row.from_!r} group is too "
                         "small to split for a placebo")
        return replace(row, sentence=f"{row.sentence} {placebo_sentence(row, ctx.confidence_level)}")
    d = ctx.design
    src_w, tgt_w = d.of(row.from_), d.of(dst)
    pos = (np.sort(gen.choice(n, h, replace=False)) if src_w is None
           else _unit_part(d.unit_of(idx), h, gen))
    part = idx[pos]
    cf = X.iloc[idx].copy(deep=False)
    for p in proxies:
        cf[p] = move_proxy(X[p], prepared[p], idx, part, orders.get(p),
                           None if src_w is None else (src_w, src_w[pos]))
    old = ctx.decisions(ctx.base_scores[idx])
    flips = ctx.decisions(new) != old
    what = f"the {n} rows of `{ctx.attribute}` = {row.from_!r} mapped onto {h} of themselves"
    placebo = ctx.decisions(score(ctx.model, cf, what)) != old
    design = None if src_w is None else (src_w, tgt_w, pos, d.unit_of(idx), d.unit_of(tgt))
    var_real, var_pl, var_ex = transport_variances(ctx, proxies, prepared, orders, idx, tgt, h, dst,
                                                   flips, placebo, gen, design)
    cl = ctx.confidence_level
    if src_w is None:
        rate, pl_rate = float(flips.mean()), float(placebo.mean())
        events, pl_events = float(flips.sum()), float(placebo.sum())
    else:
        rate, pl_rate = (float(src_w @ flips / src_w.sum()), float(src_w @ placebo / src_w.sum()))
        events, pl_events = rate * n, pl_rate * n
    rates = [_deff_wilson(e.value, n, events, var_real, cl, src_w is not None) for e in
             (row.flip_rate, row.to_favorable, row.to_unfavorable)]
    se = float(np.sqrt(var_ex))
    row = replace(row, flip_rate=rates[0], to_favorable=rates[1], to_unfavorable=rates[2],
                  placebo_rate=_deff_wilson(pl_rate, n, pl_events, var_pl, cl, src_w is not None),
                  excess=spread_interval(rate - pl_rate, se, np.inf, cl, "bootstrap-normal"),
                  excess_se=se, excess_df=np.inf)
    if src_w is not None:
        n_eff = spread_n_effective(flips.astype(float) - placebo, src_w, se, n)
        row = replace(row, excess=replace(row.excess, n_effective=n_eff))
    return replace(row, sentence=_sentence(ctx, row) + " " + placebo_sentence(row, cl))


def _unit_part(units, h, gen) -> np.ndarray:
    """Positions of a random part of about ``h`` rows made of whole units (clusters, or rows):
    units in a random order, taken until they hold ``h`` rows."""
    uniq, code = np.unique(units, return_inverse=True)
    order = gen.permutation(len(uniq))
    size = np.bincount(code, minlength=len(uniq))[order]
    take = order[:int(np.searchsorted(np.cumsum(size), h)) + 1]
    return np.flatnonzero(np.isin(code, take))


def _deff_wilson(value, n, events, var, confidence_level, weighted) -> Estimate:
    """Wilson's interval for ``value`` on ``n`` rows over the design effect of ``events / n``: the
    bootstrap variance over the binomial one (a rate of 0 or 1 taken half a row inside), at least
    1. Weighted, the rate is a weighted one, the bootstrap resampled units with their weights, and
    ``n / deff`` is the effective count (recorded as ``n_effective``)."""
    x = value * n
    p = (events + 0.5) / (n + 1.0)
    deff = max(1.0, var * n / (p * (1 - p)))
    if not weighted:
        lo, hi = wilson_interval(round(x) / deff, n / deff, confidence_level=confidence_level)
        return Estimate(round(x) / n, float(lo), float(hi), "wilson-design-effect")
    lo, hi = wilson_interval(x / deff, n / deff, confidence_level=confidence_level)
    return Estimate(float(value), float(lo), float(hi), "wilson-design-effect", n / deff)


def _sentence(ctx, row):
    return pair_sentence(ctx.attribute, "transport", row.from_, row.to,
                         (row.flip_rate, row.to_favorable, row.to_unfavorable),
                         ctx.confidence_level, row.moved, ctx.is_input)


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
