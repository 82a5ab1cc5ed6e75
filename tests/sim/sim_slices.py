"""Simulations of the slice search: its level on null data, its power on planted slices, the
comparison's localisation, and the levels of the exact {-1, 0, 1} test and of Welch's test.

Run: ``python tests/sim/run.py slices [NAME ...] [--runs N] [--seed S]``.

Data: :func:`generators.mixed_frame` (12 mixed columns: uneven levels, correlated numeric columns,
missing values), labels at random (50 % positive), decisions = labels flipped on the rows where an
error is drawn. Every search is :func:`probe.slices.find_slices` at its defaults (95 %, depth 3,
split on unless the figure says off).

**Null**: errors independent of every column (15 % everywhere; for ``selection`` the decision
itself is drawn at 30 % independently); a run is a *false alarm* when any listed slice has
q <= 0.05. Figures per metric (error, fpr, fnr, selection), at 20,000 and 2,000 rows, split on and
off.

**Found** (planted and comparison cells): some slice listed at rank 1, 2 or 3 has q <= 0.05 and
its rows (all rows, the slice's predicates evaluated on the frame) have Jaccard similarity >= 0.8
with the planted rows.

* ``planted_5pt``: error 15 % outside, 20 % inside ``region = r1 and channel = c2`` (about 4.8 %
  of 50,000 rows).
* ``planted_10pt``: error 15 % outside, 25 % inside a 1.5 % slice of 50,000 rows: 2-way
  ``region = r4 and channel = c2`` (about 1.6 %) and 3-way ``region = r0 and channel = c2 and
  kind = k2`` (about 1.5 %).
* ``compare``: baseline errors at 15 %; the candidate disagrees with the baseline on 4 % of the
  rows at random (half each way) and, inside ``region = r1 and channel = c2`` (about 4.8 % of
  50,000 rows), is wrong on another 5 points of the rows (taken from those the baseline gets
  right); :func:`probe.compare.compare_models` on ``error``. Also its null (no planted slice):
  any worse slice listed with q <= 0.05.
* ``ternary_level``: the exact {-1, 0, 1} test the search uses on paired differences, a fixed slice
  (1 % or 5 % of 20,000 rows) against the rest on a null paired difference with rare discordance
  (1 % each way, and 2 % / 0.5 % either way round): share of p-values <= 0.05; Welch's on the same
  draws beside it (it is anti-conservative there, which is why it is not used).
* ``welch_level``: Welch's one-sided test, used for other real-valued outcomes, on skewed continuous
  nulls (Beta(0.5, 5), lognormal), a fixed 1 % or 5 % slice of 20,000 rows.
* ``weighted_level``: the test the estimate part uses under a design that is not plain (the pooled
  score z test on effective counts, :func:`probe.slices.estimate_design.design_pvalue`), a fixed
  slice against the rest on a null 0/1 outcome (15 %), 20,000 rows: (a) log-normal weights
  (sigma 1, Kish design effect about 2.7), rows as units, a 1 % or 5 % slice; (b) clusters of 1 to
  10 rows with intra-cluster correlation 0.3 (cluster rates Beta(0.35, 1.98)), log-normal weights
  (sigma 0.5), the slice whole clusters (about 5 % of the rows), with the clusters as units and,
  beside it, with the rows as units (the naive test, which does not hold its level there).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from generators import mixed_frame, null_outcome, planted_outcome
from harness import proportion

from probe.compare import compare_models
from probe.design import Design
from probe.slices import find_slices
from probe.slices.estimate_design import Basis, Weighting, design_pvalue, effective_basis
from probe.slices.pvalues import ternary_pvalue, welch, welch_pvalue

__all__ = ["SIMS"]

METRICS = ("error", "fpr", "fnr", "selection")
ALPHA = 0.05
MIN_JACCARD = 0.8


def _seeds(seed, runs):
    return f"{seed}-{seed + runs - 1}"


def _null_run(rng, n, split):
    """Per metric: whether a null run raised a false alarm."""
    X = mixed_frame(rng, n, 12)
    y = rng.random(n) < 0.5
    pred = y ^ null_outcome(rng, n, 0.15).astype(bool)
    chosen = null_outcome(rng, n, 0.30).astype(bool)  # a decision independent of everything
    out = {}
    for metric in METRICS:
        decision = chosen if metric == "selection" else pred
        res = find_slices(X, y, decision, metric=metric, depth=3, split=split,
                          rng=int(rng.integers(1 << 31)))
        out[metric] = any(s.q_value <= ALPHA for s in res.found)
    return out


def _weighted_null(runs=300, seed=0, n=20_000, clusters=False):
    """Null data under a design (log-normal weights, Kish deff about 2.7; with ``clusters``,
    people of 1-10 rows sharing their error propensity): runs with a listed slice at q <= 0.05."""
    hits = dict.fromkeys(METRICS, 0)
    for r in range(seed, seed + runs):
        rng = np.random.default_rng(r)
        X = mixed_frame(rng, n, 12)
        w = rng.lognormal(0.0, 1.0, n)
        y = rng.random(n) < 0.5
        cluster = None
        err = null_outcome(rng, n, 0.15).astype(bool)
        if clusters:
            cluster = np.repeat(np.arange(n), rng.integers(1, 11, n))[:n]
            propensity = rng.beta(0.15 * 2.33, 0.85 * 2.33, n)[cluster]  # ICC 0.3 within people
            err = rng.random(n) < propensity
        chosen = null_outcome(rng, n, 0.30).astype(bool)
        design = Design(weights=w, cluster=cluster)
        for metric in METRICS:
            decision = chosen if metric == "selection" else y ^ err
            res = find_slices(X, y, decision, metric=metric, depth=3, design=design,
                              rng=int(rng.integers(1 << 31)))
            hits[metric] += any(s.q_value <= ALPHA for s in res.found)
    what = "clusters of 1-10 rows (ICC 0.3) and weights" if clusters else "weights (deff ~2.7)"
    return [proportion(f"null under {what}, {n:,} rows, {m}: runs with a slice at q <= 0.05",
                       hits[m], runs, "<= 0.05", _seeds(seed, runs)) for m in METRICS]


def _null(n, split):
    def sim(runs=300, seed=0):
        hits = dict.fromkeys(METRICS, 0)
        for r in range(seed, seed + runs):
            for metric, alarm in _null_run(np.random.default_rng(r), n, split).items():
                hits[metric] += alarm
        word = "on" if split else "off"
        return [proportion(f"null, split {word}, {n:,} rows, {m}: runs with a slice at q <= 0.05",
                           hits[m], runs, "<= 0.05", _seeds(seed, runs)) for m in METRICS]
    return sim


def _mask(X, predicates):
    mask = np.ones(len(X), dtype=bool)
    for p in predicates:
        col = X[p["column"]]
        if p["op"] == "==":
            mask &= (col == p["value"]).to_numpy(dtype=bool, na_value=False)
        elif p["op"] == "in" and isinstance(p["value"], list) and len(p["value"]) == 2 and all(
                v is None or isinstance(v, (int, float)) for v in p["value"]):
            lo, hi = p["value"]
            num = pd.to_numeric(col, errors="coerce").to_numpy(dtype=float)
            ok = ~np.isnan(num)
            if lo is not None:
                ok &= num >= lo
            if hi is not None:
                ok &= num < hi
            mask &= ok
        elif p["op"] == "in":
            mask &= col.isin(p["value"]).to_numpy(dtype=bool)
        elif p["op"] == "missing":
            mask &= col.isna().to_numpy()
        elif p["op"] == "not in":
            mask &= (col.notna() & ~col.isin(p["value"])).to_numpy(dtype=bool)
        else:  # a predicate this evaluator does not know: no match
            return np.zeros(len(X), dtype=bool)
    return mask


def _found(slices, X, planted):
    for s in slices[:3]:
        if s.q_value <= ALPHA:
            rows = _mask(X, s.predicates)
            if (rows & planted).sum() / max((rows | planted).sum(), 1) >= MIN_JACCARD:
                return True
    return False


PLANTS = {
    "2-way 4.8 %": {"region": "r1", "channel": "c2"},
    "2-way 1.6 %": {"region": "r4", "channel": "c2"},
    "3-way 1.5 %": {"region": "r0", "channel": "c2", "kind": "k2"},
}


def _plant_mask(X, cells):
    mask = np.ones(len(X), dtype=bool)
    for col, value in cells.items():
        mask &= (X[col] == value).to_numpy(dtype=bool, na_value=False)
    return mask


def _power(plant, lift, n=50_000):
    def sim(runs=500, seed=0):
        hits = 0
        for r in range(seed, seed + runs):
            rng = np.random.default_rng(r)
            X = mixed_frame(rng, n, 12)
            planted = _plant_mask(X, PLANTS[plant])
            y = rng.random(n) < 0.5
            wrong = planted_outcome(rng, planted, 0.15, lift).astype(bool)
            res = find_slices(X, y, y ^ wrong, depth=3, rng=r)
            hits += _found(res.found, X, planted)
        return [proportion(f"planted {plant} slice, +{lift * 100:g} points, {n:,} rows: found",
                           hits, runs, ">= 0.9" if lift >= 0.1 else ">= 0.6", _seeds(seed, runs))]
    return sim


def _compare_run(rng, n, lift):
    X = mixed_frame(rng, n, 12)
    planted = _plant_mask(X, PLANTS["2-way 4.8 %"])
    y = rng.random(n) < 0.5
    base_wrong = null_outcome(rng, n, 0.15).astype(bool)
    cand_wrong = base_wrong ^ (rng.random(n) < 0.04)  # random disagreement, both ways
    extra = planted & ~cand_wrong & (rng.random(n) < lift / 0.85)
    cand_wrong |= extra
    res = compare_models(X, y, y ^ cand_wrong, y ^ base_wrong, metric="error",
                         rng=int(rng.integers(1 << 31)))
    return res.worse_slices.found, X, planted


def _compare(runs=300, seed=0, n=50_000):
    hits = alarms = 0
    for r in range(seed, seed + runs):
        found, X, planted = _compare_run(np.random.default_rng(r), n, 0.05)
        hits += _found(found, X, planted)
        found, _, _ = _compare_run(np.random.default_rng(10**6 + r), n, 0.0)
        alarms += any(s.q_value <= ALPHA for s in found)
    return [proportion(f"compare: candidate 5 points worse on a 4.8 % slice, {n:,} rows: found",
                       hits, runs, ">= 0.6", _seeds(seed, runs)),
            proportion(f"compare, null (random disagreement only), {n:,} rows: runs with a worse "
                       "slice at q <= 0.05", alarms, runs, "<= 0.05",
                       f"{10**6 + seed}-{10**6 + seed + runs - 1}")]


def _ternary_level(runs=20_000, seed=0, n=20_000):
    """The exact {-1, 0, 1} test the search uses on paired differences, on null draws with rare
    discordance, a fixed slice against the rest (Welch's level on the same draws beside it)."""
    figures = []
    for up, down in ((0.01, 0.01), (0.02, 0.005), (0.005, 0.02)):
        for share in (0.01, 0.05):
            rng = np.random.default_rng(seed)
            hits = exact = done = 0
            exact_runs = max(runs // 5, 1)
            k = int(share * n)
            for start in range(0, runs, 1000):
                b = min(1000, runs - start)
                u = rng.random((b, n))
                d = np.where(u < up, 1.0, np.where(u < up + down, -1.0, 0.0))
                s1, q1 = d[:, :k].sum(1), (d[:, :k] ** 2).sum(1)
                s2, q2 = d[:, k:].sum(1), (d[:, k:] ** 2).sum(1)
                p = welch_pvalue(*welch(s1, q1, k, s2, q2, n - k))
                hits += int((p <= ALPHA).sum())
                if exact_runs > done:  # the exact test on the first `exact_runs` draws
                    take = min(b, exact_runs - done)
                    exact += int((ternary_pvalue(s1[:take], q1[:take], k, s2[:take], q2[:take],
                                                 n - k) <= ALPHA).sum())
                    done += take
            what = f"{{-1,0,1}} null ({up:.1%} up, {down:.1%} down), a fixed {share:.0%} slice"
            figures.append(proportion(f"exact {{-1,0,1}} test (used), {what}: p <= 0.05", exact,
                                      done, "<= 0.05", f"{seed} (first {done} draws)"))
            figures.append(proportion(f"  Welch on the same (not used there), {what}: p <= 0.05",
                                      hits, runs, "<= 1", f"{seed} (one stream)"))
    return figures


def _welch_level(runs=20_000, seed=0, n=20_000):
    """Welch's one-sided test (used for other real-valued outcomes) on skewed continuous nulls:
    a score-like Beta(0.5, 5) and a heavy-tailed lognormal, a fixed 1 % or 5 % slice."""
    figures = []
    draws = {"Beta(0.5, 5)": lambda r, size: r.beta(0.5, 5, size),
             "lognormal(0, 1)": lambda r, size: r.lognormal(0, 1, size)}
    for name, draw in draws.items():
        for share in (0.01, 0.05):
            rng = np.random.default_rng(seed)
            k, hits = int(share * n), {"higher": 0, "lower": 0}
            for start in range(0, runs, 500):
                b = min(500, runs - start)
                d = draw(rng, (b, n))
                s1, q1 = d[:, :k].sum(1), (d[:, :k] ** 2).sum(1)
                s2, q2 = d[:, k:].sum(1), (d[:, k:] ** 2).sum(1)
                p = welch_pvalue(*welch(s1, q1, k, s2, q2, n - k))  # slice mean higher
                hits["higher"] += int((p <= ALPHA).sum())
                hits["lower"] += int((1.0 - p <= ALPHA).sum())  # the t tail the other way
            for side, h in hits.items():
                figures.append(proportion(
                    f"Welch one-sided level ({side}), {name} null, a fixed {share:.0%} slice of "
                    f"{n:,} rows: p <= 0.05", h, runs, "<= 0.05", f"{seed} (one stream)"))
    return figures


def _weighted_p(y, mask, w, units):
    """The estimate part's one-sided p-value of ``mask`` against the rest under a design."""
    wt = Weighting(w, units, units is not None)
    c, _ = effective_basis([mask], Basis(y, wt, True))
    return float(design_pvalue(c, True, "greater")[0])


def _weighted_level(runs=2_000, seed=0, n=20_000):
    """The weighted test's level on null data: unequal weights, then clusters (see the notes)."""
    figures = []
    for share in (0.01, 0.05):
        rng = np.random.default_rng(seed)
        k, hits = int(share * n), 0
        mask = np.arange(n) < k
        for _ in range(runs):
            y = (rng.random(n) < 0.15).astype(float)
            w = rng.lognormal(0.0, 1.0, n)
            hits += _weighted_p(y, mask, w, None) <= ALPHA
        figures.append(proportion(
            f"weighted score test, log-normal weights (Kish deff ~2.7), rows as units, a fixed "
            f"{share:.0%} slice of {n:,} rows: p <= 0.05", hits, runs, "<= 0.05",
            f"{seed} (one stream)"))
    rng = np.random.default_rng(seed + 1)
    hits = {"clusters": 0, "rows": 0}
    for _ in range(runs):
        size = rng.integers(1, 11, n)  # more clusters than needed; cut at n rows
        cluster = np.repeat(np.arange(n), size)[:n]
        rate = rng.beta(0.35, 1.98, n)  # mean 0.15, ICC 0.3 = 1 / (a + b + 1)
        y = (rng.random(n) < rate[cluster]).astype(float)
        w = rng.lognormal(0.0, 0.5, n)
        mask = cluster < np.quantile(cluster, 0.05)  # whole clusters, about 5 % of the rows
        hits["clusters"] += _weighted_p(y, mask, w, cluster) <= ALPHA
        hits["rows"] += _weighted_p(y, mask, w, None) <= ALPHA
    figures.append(proportion(
        "weighted score test, clusters of 1-10 rows (ICC 0.3), clusters as units, a 5 % slice of "
        f"whole clusters: p <= 0.05", hits["clusters"], runs, "<= 0.05", f"{seed + 1}"))
    figures.append(proportion(
        "  the same with rows as units (naive, not used with clusters): p <= 0.05", hits["rows"],
        runs, "<= 1", f"{seed + 1}"))
    return figures


SIMS = {
    "null_split_20000": _null(20_000, True),
    "null_split_2000": _null(2_000, True),
    "null_nosplit_20000": _null(20_000, False),
    "null_nosplit_2000": _null(2_000, False),
    "planted_5pt": _power("2-way 4.8 %", 0.05),
    "planted_10pt_2way": _power("2-way 1.6 %", 0.10),
    "planted_10pt_3way": _power("3-way 1.5 %", 0.10),
    "compare": _compare,
    "ternary_level": _ternary_level,
    "welch_level": _welch_level,
    "weighted_level": _weighted_level,
    "weighted_null": _weighted_null,
    "weighted_null_clusters": lambda runs=300, seed=0: _weighted_null(runs, seed, clusters=True),
}
