"""The estimate stage: which slices are carried, and their rates, gaps, ratios, p- and q-values.

Everything here is computed on the estimate part only (all rows without a split): Wilson rates,
Newcombe gaps and MOVER-R ratios for a 0/1 outcome, Wald rates and Welch gaps for a real-valued
outcome, the one-sided p-value (:mod:`.pvalues`: exact for 0/1 and {-1, 0, 1}, Welch otherwise),
Benjamini-Hochberg q-values over the ``family`` of hypotheses, and, on request, a bootstrap of all
carried slices at once. Under a design that is not plain the counts are effective counts, the rates
weighted, the test a score test and the bootstrap one of units (:mod:`.estimate_design`); every
estimate then records its ``n_effective`` (the smaller of the two for a gap or a ratio).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special

from ..stats import Estimate, bh_adjust, newcombe_interval, ratio_interval, wilson_interval, z_value
from .estimate_design import Basis, Weighting, design_pvalue, effective_basis, unit_bootstrap
from .pvalues import exact_pvalue, is_ternary, real_pvalue, welch, welch_interval

__all__ = ["Basis", "N_RESAMPLES", "Weighting", "at_level", "carry", "closed_form", "estimate",
           "overall_estimate", "rate_estimates"]

N_RESAMPLES = 2000  # bootstrap resamples of the carried slices


def _member(codes, cols, levels):
    mask = codes[cols[0]] == levels[0]
    for c, lv in zip(cols[1:], levels[1:]):
        mask &= codes[c] == lv
    return mask


def carry(ranked, codes, similarity, top):
    """The slices carried to the estimate stage, and their rows there.

    Greedy by rank over ``ranked`` (:class:`~probe.slices.lattice.Candidate`): a slice whose rows in
    ``codes`` (the estimate part's) overlap a kept one with Jaccard >= ``similarity`` is dropped
    (``None`` keeps them all); at most ``top`` are kept. The overlaps are counted on the masks
    packed eight rows to a byte."""
    kept, masks, packed, sizes = [], [], [], []
    for entry in ranked:
        if len(kept) >= top:
            break
        mask = _member(codes, entry.cols, entry.levels)
        size = int(np.count_nonzero(mask))
        if similarity is not None:
            bits = np.packbits(mask)
            inter = np.array([int(np.bitwise_count(bits & b).sum()) for b in packed])
            union = size + np.array(sizes) - inter
            if len(inter) and np.any((union > 0) & (inter >= similarity * union)):
                continue
            packed.append(bits)
        kept.append(entry)
        masks.append(mask)
        sizes.append(size)
    return kept, masks


def rate_estimates(s, n, sq, binary, cl, limits=None):
    """Rate estimates: Wilson for 0/1, Wald for real-valued (vectorised), the Wald limits clipped to
    the outcome's range ``limits`` (a mean of values in [-1, 1] cannot exceed 1)."""
    if binary:
        low, high = wilson_interval(s, n, confidence_level=cl)
        method = "wilson"
    else:
        z = z_value(cl)
        with np.errstate(invalid="ignore", divide="ignore"):
            m = s / n
            v = np.maximum(sq - s * m, 0.0) / (n - 1)
            half = z * np.sqrt(v / n)
        low, high, method = m - half, m + half, "wald"
        if limits is not None:
            low, high = np.clip(low, *limits), np.clip(high, *limits)
    with np.errstate(invalid="ignore", divide="ignore"):
        value = s / n
    return [Estimate(float(a), float(b), float(c), method) for a, b, c in zip(value, low, high)]


def overall_estimate(y, binary, cl, design: Basis | None = None) -> Estimate:
    """The rate over all the base rows: on the counts, or weighted on effective counts."""
    limits = (float(y.min()), float(y.max())) if len(y) else None
    if design is None:
        return rate_estimates(np.array([y.sum()]), np.array([float(len(y))]),
                              np.array([(y * y).sum()]), binary, cl, limits)[0]
    c, fig = effective_basis([np.ones(len(y), dtype=bool)], design)
    rate = rate_estimates(c[1], c[0], c[2], binary, cl, limits)[0]
    return Estimate(float(fig[1, 0] / fig[0, 0]), rate.low, rate.high, rate.method,
                    float(fig[6, 0]))


def _designed(rate, gap, ratio, weighted):
    """The estimates with the weighted point values and their ``n_effective`` (unchanged when
    ``weighted`` is None: a plain design)."""
    if weighted is None:
        return rate, gap, ratio
    r1, r2, n1, n2 = weighted
    two = min(n1, n2)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio_value = r1 / r2 if r2 > 0 else math.nan
    return (Estimate(r1, rate.low, rate.high, rate.method, n1),
            Estimate(r1 - r2, gap.low, gap.high, gap.method, two),
            Estimate(ratio_value if ratio.method != "none" else math.nan, ratio.low, ratio.high,
                     ratio.method, two if ratio.method != "none" else None))


def closed_form(c, binary, cl, limits):
    """Rate, gap and ratio estimates at level ``cl`` from the counts ``c = (n1, s1, sq1, n2, s2,
    sq2)`` (arrays over slices): Wilson, Newcombe and MOVER-R for a 0/1 outcome; Wald rate and
    Welch gap (its limits within the outcome's span) for a real-valued one."""
    n1, s1, sq1, n2, s2, sq2 = c
    K = len(n1)
    if binary:
        rate = rate_estimates(s1, n1, sq1, True, cl)
        g_low, g_high = newcombe_interval(s1, n1, s2, n2, confidence_level=cl)
        with np.errstate(invalid="ignore", divide="ignore"):
            gap_val = s1 / n1 - s2 / n2
            r_val = np.where(s2 > 0, (s1 / n1) / (s2 / np.where(n2 > 0, n2, 1)), np.nan)
        gap = [Estimate(float(v), float(a), float(b), "newcombe")
               for v, a, b in zip(gap_val, g_low, g_high)]
        r_low, r_high = ratio_interval(s1, n1, s2, n2, confidence_level=cl)
        ratio = [Estimate(float(v), float(a), float(b), "mover-wilson")
                 for v, a, b in zip(r_val, r_low, r_high)]
        return rate, gap, ratio
    rate = rate_estimates(s1, n1, sq1, False, cl, limits)
    gap_val, se, df = welch(s1, sq1, n1, s2, sq2, n2)
    g_low, g_high = welch_interval(gap_val, se, df, cl)
    span = (limits[1] - limits[0]) if limits else np.inf
    gap = [Estimate(float(v), float(max(a, -span)), float(min(b, span)), "welch")
           for v, a, b in zip(gap_val, g_low, g_high)]
    return rate, gap, [Estimate(math.nan, math.nan, math.nan, "none")] * K


def rank_weights(k: int) -> np.ndarray:
    """Weights of the weighted Benjamini-Hochberg procedure (Genovese, Roeder & Wasserman 2006) for
    hypotheses ranked before their p-values are seen: proportional to ``1 / rank``, averaging 1.

    BH on ``p / w`` controls the FDR at the nominal level for any fixed weights that average 1
    (independence; positive dependence, Blanchard & Roquain 2008). The search part's first slice
    gets ``k / H_k`` (11.1 for 50 carried), so a slice the search ranks first is judged almost as if
    few had been carried, while the 50th still gets a chance (``1 / H_k``, 0.22)."""
    w = 1.0 / np.arange(1, k + 1)
    return w * (k / w.sum())


def estimate(carried, masks, y, *, binary, direction, confidence_level, interval, family, rng,
             ranked=False, design: Basis | None = None, sums=None):
    """Per carried slice: rates, gap, ratio, p-value, q-value and evidence on the estimate part.

    ``masks`` are the carried slices' rows of ``y`` (the outcome as given, not oriented);
    ``family`` is the number of hypotheses of the q-values; ``rng`` seeds the bootstrap;
    ``ranked``: the carried slices are in the search part's order, fixed before these rows are
    looked at, and the q-values weight them by it (:func:`rank_weights`). The
    *evidence* orders the list: the lower limit of the gap in the bad direction at the report's
    level, on these rows the search did not see (the search's own level, far stricter, would favour
    broad slices with small gaps there). Each dict also holds what :func:`at_level` needs to
    give the estimates at any other level. ``design``: the estimate part's
    :class:`~.estimate_design.Basis` when the design is not plain (``sums``: the slices' term
    sums when counted already, :func:`~.estimate_design.counted_sums`)."""
    K = len(carried)
    if K == 0:
        return []
    if design is not None:
        return _weighted(carried, masks, y, binary=binary, direction=direction,
                         confidence_level=confidence_level, interval=interval, family=family,
                         rng=rng, ranked=ranked, design=design, sums=sums)
    cl = confidence_level
    # per slice, with no K x rows float matrix: counts for a 0/1 outcome, else one float row buffer
    n1 = np.array([np.count_nonzero(m) for m in masks], dtype=float)
    if binary:
        events = y == 1
        s1 = np.array([np.count_nonzero(m & events) for m in masks], dtype=float)
        sq1 = s1.copy()  # y * y = y
        del events
    else:
        s1, sq1 = np.empty(K), np.empty(K)
        y_sq = y * y
        buf = np.empty(len(y))
        for k, mask in enumerate(masks):
            np.copyto(buf, mask)
            s1[k] = buf @ y
            sq1[k] = buf @ y_sq
        del buf, y_sq
    N, S, SQ = float(len(y)), float(y.sum()), float((y * y).sum())
    c = (n1, s1, sq1, N - n1, S - s1, SQ - sq1)
    limits = (float(y.min()), float(y.max())) if len(y) and not binary else None
    alt = "greater" if direction == "higher" else "less"
    rate, gap, ratio = closed_form(c, binary, cl, limits)
    sign = 1.0 if alt == "greater" else -1.0
    if binary:
        p = exact_pvalue(s1, n1, c[4], c[3], alternative=alt)
        bad1, bad2 = (s1, c[4]) if sign > 0 else (n1 - s1, c[3] - c[4])
        evidence = newcombe_interval(bad1, n1, bad2, c[3], confidence_level=cl)[0]
    else:
        diff, se, _ = welch(s1, sq1, n1, c[4], c[5], c[3])
        p = real_pvalue(s1, sq1, n1, c[4], c[5], c[3], ternary=is_ternary(y), alternative=alt)
        evidence = sign * diff - z_value(cl) * se
    evidence = np.where(np.isnan(evidence), -np.inf, evidence)
    boot = [None] * K
    if interval == "bootstrap":
        rate, gap, boot = _bootstrap_estimates(masks, y, rng, cl, rate, gap)
    p, q = _q_values(p, family, ranked)
    return [
        {"rows": int(n1[k]), "share": n1[k] / N if N else math.nan, "events": float(s1[k]),
         "rate": rate[k], "gap": gap[k], "ratio": ratio[k], "p": float(p[k]), "q": float(q[k]),
         "rest_rate": c[4][k] / c[3][k] if c[3][k] else math.nan, "evidence": float(evidence[k]),
         "basis": (tuple(float(v[k]) for v in c), limits, boot[k], None)}
        for k in range(K)
    ]


def _q_values(p, family, ranked):
    """The p-values (NaN as 1) and their q-values: BH over ``family`` hypotheses, those not
    carried set aside with p = 1 (conservative: the adjusted values only grow with any p-value),
    weighted by the search part's rank when ``ranked``."""
    K = len(p)
    p = np.where(np.isnan(p), 1.0, p)
    padded = np.concatenate([p, np.ones(max(int(family) - K, 0))])
    if ranked:
        padded = np.minimum(padded / rank_weights(len(padded)), 1.0)
    return p, np.minimum(bh_adjust(padded)[:K], 1.0)


def _weighted(carried, masks, y, *, binary, direction, confidence_level, interval, family, rng,
              ranked, design, sums):
    """:func:`estimate` on effective counts (:mod:`.estimate_design`)."""
    K, cl = len(carried), confidence_level
    c, fig = effective_basis(masks, design, sums)
    limits = (float(y.min()), float(y.max())) if len(y) and not binary else None
    alt = "greater" if direction == "higher" else "less"
    sign = 1.0 if alt == "greater" else -1.0
    with np.errstate(invalid="ignore", divide="ignore"):
        r1, r2 = fig[1] / fig[0], fig[5] / fig[4]
    weighted = [(float(r1[k]), float(r2[k]), float(fig[6, k]), float(fig[7, k]))
                for k in range(K)]
    rate, gap, ratio = closed_form(c, binary, cl, limits)
    rate, gap, ratio = (list(t) for t in zip(*(_designed(*e, wk) for e, wk in
                                               zip(zip(rate, gap, ratio), weighted))))
    p = design_pvalue(c, binary, alt)
    if binary:
        bad1, bad2 = (c[1], c[4]) if sign > 0 else (c[0] - c[1], c[3] - c[4])
        evidence = newcombe_interval(bad1, c[0], bad2, c[3], confidence_level=cl)[0]
    else:
        diff, se, _ = welch(*c[:3], *c[3:])
        evidence = sign * diff - z_value(cl) * se
    evidence = np.where(np.isnan(evidence), -np.inf, evidence)
    boot = [None] * K
    if interval == "bootstrap":
        rate, gap, boot = unit_bootstrap(masks, y, design.wt, rng, cl, rate, gap, N_RESAMPLES)
    p, q = _q_values(p, family, ranked)
    total = float(fig[0, 0] + fig[4, 0])
    return [
        {"rows": int(fig[2, k]), "share": fig[0, k] / total, "events": float(fig[1, k]),
         "weight": float(fig[0, k]),
         "clusters": None if np.isnan(fig[3, k]) else int(fig[3, k]),
         "rate": rate[k], "gap": gap[k], "ratio": ratio[k], "p": float(p[k]), "q": float(q[k]),
         "rest_rate": float(r2[k]), "evidence": float(evidence[k]),
         "basis": (tuple(float(v[k]) for v in c), limits, boot[k], weighted[k])}
        for k in range(K)
    ]


def at_level(basis, binary, level):
    """The rate and gap of one slice at confidence ``level`` from its ``basis`` (counts, the
    outcome's limits, and its bootstrap draws or None), by the method used at the report's level."""
    counts, limits, boot, weighted = basis
    rate, gap, ratio = closed_form(tuple(np.array([v]) for v in counts), binary, level, limits)
    rate, gap, _ = _designed(rate[0], gap[0], ratio[0], weighted)
    if boot is not None:
        alpha = (1 - level) / 2
        rate, gap = (prior if b is None else Estimate(prior.value, *_boot_interval(*b, alpha),
                                                      prior.n_effective)
                     for prior, b in zip((rate, gap), boot))
    return rate, gap


def _bootstrap_estimates(masks, y, rng, confidence_level, rate, gap):
    """Bootstrap rate and gap intervals for every carried slice at once, and per slice the draws
    (distribution, observed value, jackknife values, cell weights; None without spread) that give
    them at any other level.

    A slice's rate and gap depend on the rows only through the counts in the cells (inside, outside)
    x (distinct outcome value), so resampling the N rows with replacement is drawing the cell counts
    from a multinomial(N, cell shares): one call for all slices and resamples. The BCa acceleration
    comes from the jackknife, which is also cell-wise (leaving out any row of a cell gives the same
    value), weighted by the cell counts.
    """
    values, inv = np.unique(y, return_inverse=True)
    J = len(values)
    N = len(y)
    K = len(masks)
    cells = np.empty((K, 2 * J))
    for k, mask in enumerate(masks):
        cells[k, :J] = np.bincount(inv[mask], minlength=J)
        cells[k, J:] = np.bincount(inv[~mask], minlength=J)
    probs = cells / N
    draws = rng.multinomial(N, probs, size=(N_RESAMPLES, K)).astype(float)  # (B, K, 2J)

    def stats(c):
        n_in = c[..., :J].sum(axis=-1)
        n_out = c[..., J:].sum(axis=-1)
        with np.errstate(invalid="ignore", divide="ignore"):
            r_in = (c[..., :J] @ values) / n_in
            r_out = (c[..., J:] @ values) / n_out
        return r_in, r_in - r_out

    boot_rate, boot_gap = stats(draws)  # (B, K)
    obs_rate, obs_gap = stats(cells)  # (K,)
    # jackknife: drop one row from cell j -> counts - e_j; shape (K, 2J)
    jack = cells[:, None, :] - np.eye(2 * J)[None, :, :]
    jack_rate, jack_gap = stats(jack)
    alpha = (1 - confidence_level) / 2
    out_rate, out_gap, kept = [], [], []
    for k in range(K):
        draws_k = []
        for dist, obs, jv, prior, out in (
            (boot_rate[:, k], obs_rate[k], jack_rate[k], rate[k], out_rate),
            (boot_gap[:, k], obs_gap[k], jack_gap[k], gap[k], out_gap),
        ):
            if np.ptp(dist) == 0:
                # every resample gives the same value (e.g. a slice with no events): the bootstrap
                # has no spread to offer, so the closed-form interval stands
                out.append(prior)
                draws_k.append(None)
                continue
            b = (dist.copy(), obs, jv, cells[k])
            out.append(Estimate(prior.value, *_boot_interval(*b, alpha)))
            draws_k.append(b)
        kept.append(tuple(draws_k))
    return out_rate, out_gap, kept


def _boot_interval(dist, obs, jack_values, weights, alpha):
    """Percentile or BCa interval; BCa when z0 and the acceleration are finite (Efron & Tibshirani
    1993, ch. 14), with the jackknife values given per cell and weighted by the cell counts."""
    dist = dist[np.isfinite(dist)]
    if len(dist) == 0 or not np.isfinite(obs):
        return math.nan, math.nan, "bootstrap-percentile"
    lo_q, hi_q, method = alpha, 1 - alpha, "bootstrap-percentile"
    if jack_values is None:  # resampled units (estimate_design): percentile only
        low, high = np.quantile(dist, [lo_q, hi_q])
        return float(low), float(high), method
    below = np.mean(dist < obs) + 0.5 * np.mean(dist == obs)
    w = np.where(weights > 0, weights, 0.0)
    jv = np.where(w > 0, jack_values, 0.0)
    if 0.0 < below < 1.0 and np.all(np.isfinite(jv)):
        z0 = special.ndtri(below)
        mean_j = np.sum(w * jv) / np.sum(w)
        dj = np.where(w > 0, mean_j - jv, 0.0)
        denom = 6.0 * np.sum(w * dj * dj) ** 1.5
        if denom > 0 and np.isfinite(denom):
            a = np.sum(w * dj**3) / denom
            qs = []
            for zq in (special.ndtri(alpha), special.ndtri(1 - alpha)):
                qs.append(float(special.ndtr(z0 + (z0 + zq) / (1 - a * (z0 + zq)))))
            lo_q, hi_q, method = qs[0], qs[1], "bootstrap-bca"
    low, high = np.quantile(dist, [lo_q, hi_q])
    return float(low), float(high), method
