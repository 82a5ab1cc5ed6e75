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
        for p in proxies:
            if prepared[p][0] == "categorical":
                orders[p] = level_order(prepared[p][1][idx], pgen)
            cf[p] = move_proxy(X[p], prepared[p], idx, tgt, orders.get(p))
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
    part = idx[np.sort(gen.choice(n, h, replace=False))]
    cf = X.iloc[idx].copy(deep=False)
    for p in proxies:
        cf[p] = move_proxy(X[p], prepared[p], idx, part, orders.get(p))
    old = ctx.decisions(ctx.base_scores[idx])
    flips = ctx.decisions(new) != old
    what = f"the {n} rows of `{ctx.attribute}` = {row.from_!r} mapped onto {h} of themselves"
    placebo = ctx.decisions(score(ctx.model, cf, what)) != old
    var_real, var_pl, var_ex = transport_variances(ctx, proxies, prepared, orders, idx, tgt, h, dst,
                                                   flips, placebo, gen)
    cl = ctx.confidence_level
    deff = _design_effect(flips.sum(), n, var_real)
    rates = [_deff_wilson(e.value * n, n, deff, cl) for e in
             (row.flip_rate, row.to_favorable, row.to_unfavorable)]
    se = float(np.sqrt(var_ex))
    value = float(flips.mean() - placebo.mean())
    row = replace(row, flip_rate=rates[0], to_favorable=rates[1], to_unfavorable=rates[2],
                  placebo_rate=_deff_wilson(placebo.sum(), n, _design_effect(placebo.sum(), n,
                                                                             var_pl), cl),
                  excess=spread_interval(value, se, np.inf, cl, "bootstrap-normal"),
                  excess_se=se, excess_df=np.inf)
    return replace(row, sentence=_sentence(ctx, row) + " " + placebo_sentence(row, cl))


def _design_effect(x, n, var) -> float:
    """The bootstrap variance over the binomial one (a rate of 0 or 1 taken half a row inside),
    at least 1."""
    p = (x + 0.5) / (n + 1.0)
    return max(1.0, var * n / (p * (1 - p)))


def _deff_wilson(x, n, deff, confidence_level) -> Estimate:
    lo, hi = wilson_interval(round(x) / deff, n / deff, confidence_level=confidence_level)
    return Estimate(round(x) / n, float(lo), float(hi), "wilson-design-effect")


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
