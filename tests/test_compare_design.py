"""The comparison under a sampling design: a plain design changes nothing; weighted rates and the
paired difference against brute force and statsmodels; integer weights against duplicated rows;
clusters widen the interval; refusals."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.weightstats import DescrStatsW

from probe.compare import compare_models
from probe.design import Design, Membership
from probe.errors import DataError, PlanError
from probe.paired import tango_interval


def _pair(n=1500, seed=0, clusters=None):
    g = np.random.default_rng(seed)
    X = pd.DataFrame({"a": g.integers(0, 3, n)})
    y = g.uniform(size=n) < 0.4
    base = g.uniform(size=n) < 0.3
    # the candidate departs from the baseline on a random 15 % (whole clusters when given)
    unit = np.arange(n) if clusters is None else clusters
    departs = (g.uniform(size=unit.max() + 1) < 0.15)[unit]
    cand = np.where(departs, ~base if clusters is not None else g.uniform(size=n) < 0.6, base)
    return X, y, cand, base


def test_unit_weights_change_nothing():
    X, y, cand, base = _pair()
    plain = compare_models(X, y, cand, base, rng=0).to_dict()
    assert compare_models(X, y, cand, base, rng=0, sample_weight=np.ones(len(X))).to_dict() == plain
    assert compare_models(X, y, cand, base, rng=0,
                          design=Design(weights=np.ones(len(X)))).to_dict() == plain


def test_zero_one_weights_leave_rows_out():
    X, y, cand, base = _pair(seed=6)
    keep = np.random.default_rng(2).uniform(size=len(X)) < 0.7
    zero_one = compare_models(X, y, cand, base, rng=0, sample_weight=keep.astype(float))
    subset = compare_models(X[keep], y[keep], cand[keep], base[keep], rng=0)
    assert [m.to_dict() for m in zero_one.metrics] == [m.to_dict() for m in subset.metrics]
    assert zero_one.agreement == pytest.approx(subset.agreement, rel=1e-12)
    # selection only (no labels) takes the design too
    sel = compare_models(X, None, cand, base, metric="selection", rng=0, sample_weight=keep * 2.0)
    assert sel.overall.difference.value == pytest.approx(np.mean(cand[keep].astype(float)
                                                                 - base[keep]), rel=1e-12)


def test_weighted_difference_against_brute_force_and_statsmodels():
    X, y, cand, base = _pair(seed=3)
    w = np.random.default_rng(5).gamma(0.8, 1.5, len(X))
    result = compare_models(X, y, cand, base, rng=0, sample_weight=w)
    m = next(r for r in result.metrics if r.metric == "selection")
    d = cand.astype(float) - base
    D = float(np.sum(w * d) / np.sum(w))  # brute force
    assert m.difference.value == pytest.approx(D, rel=1e-12)
    # statsmodels' weighted means, an independent implementation
    assert m.difference.value == pytest.approx(DescrStatsW(d, weights=w).mean, rel=1e-12)
    assert m.candidate.value == pytest.approx(DescrStatsW(cand.astype(float), weights=w).mean)
    assert m.baseline.value == pytest.approx(DescrStatsW(base.astype(float), weights=w).mean)
    # the effective count written out: s^2 / v, v the linearisation variance with rows as units
    s2 = np.sum(w * (d - D) ** 2) / np.sum(w)
    v = np.sum(w ** 2 * (d - D) ** 2) / np.sum(w) ** 2
    n_eff = s2 / v
    assert m.difference.n_effective == pytest.approx(n_eff, rel=1e-9)
    # Tango's interval on the effective table (b, c scaled to n_eff)
    W_b, W_c = np.sum(w * (cand & ~base)), np.sum(w * (~cand & base))
    low, high = tango_interval(n_eff * W_b / w.sum(), n_eff * W_c / w.sum(), n_eff)
    assert (m.difference.low, m.difference.high) == pytest.approx((float(low), float(high)))
    assert m.test == "mcnemar-score-effective" and m.weight == pytest.approx(w.sum())
    assert m.shortfall_at(0.95) == m.shortfall
    assert m.shortfall.n_effective == m.difference.n_effective
    assert result.agreement == pytest.approx(np.average(cand == base, weights=w))
    out = m.to_dict()
    assert out["difference"]["n_effective"] == pytest.approx(n_eff) and "clusters" not in out


def test_integer_weights_equal_duplicated_rows_for_point_estimates():
    X, y, cand, base = _pair(600, seed=8)
    w = np.random.default_rng(1).integers(1, 5, len(X))
    rep = np.repeat(np.arange(len(X)), w)
    weighted = compare_models(X, y, cand, base, rng=0, sample_weight=w)
    dup = compare_models(X.iloc[rep].reset_index(drop=True), y[rep], cand[rep], base[rep], rng=0)
    for a, b in zip(weighted.metrics, dup.metrics):
        for name in ("candidate", "baseline", "difference"):
            assert getattr(a, name).value == pytest.approx(getattr(b, name).value, rel=1e-12)
    assert weighted.agreement == pytest.approx(dup.agreement, rel=1e-12)


def test_clusters_widen_the_difference_interval_when_disagreement_clusters():
    n, size = 2000, 10
    cluster = np.arange(n) // size
    X, y, cand, base = _pair(n, seed=2, clusters=cluster)
    naive = compare_models(X, y, cand, base, rng=0, metric="selection").overall.difference
    robust = compare_models(X, y, cand, base, rng=0, metric="selection",
                            design=Design(cluster=cluster)).overall
    assert robust.difference.value == pytest.approx(naive.value, rel=1e-12)
    assert robust.difference.high - robust.difference.low > 1.5 * (naive.high - naive.low)
    assert robust.clusters == n // size


def test_refusals_are_one_line():
    X, y, cand, base = _pair(100)
    with pytest.raises(PlanError, match="not both"):
        compare_models(X, y, cand, base, sample_weight=np.ones(100), design=Design())
    with pytest.raises(DataError, match="99 values for 100 rows"):
        compare_models(X, y, cand, base, sample_weight=np.ones(99))
    probs = np.full((100, 2), 0.5)
    with pytest.raises(PlanError, match="membership"):
        compare_models(X, y, cand, base, design=Design(membership={
            "g": Membership("g", ("a", "b"), ("p", "q"), probs)}))
