"""The sampling design: effective counts, weighted group metrics, clusters and membership.

External references: statsmodels' weighted least squares with heteroskedasticity-robust (HC0) and
cluster-robust standard errors give the linearisation variance of a weighted mean (an intercept-only
WLS fit *is* the weighted mean, and its sandwich variance is ``sum w^2 e^2 / (sum w)^2``; with
clusters statsmodels' default correction for one regressor is ``G / (G - 1)``);
``statsmodels.stats.weightstats.DescrStatsW`` gives weighted means.
"""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from statsmodels.stats.weightstats import DescrStatsW

from probe.design import Design, Membership, effective_counts, expand_rows
from probe.design_data import read_design, resolve_design
from probe.errors import DataError, PlanError
from probe.groups import group_metrics
from probe.policy import measure

from generators_design import clustered_sample, membership_sample, stratified_sample


def _rows(m):
    return {(r.attribute, r.group): r for r in m.rows}


def test_plain_design_gives_the_counts_exactly():
    rng = np.random.default_rng(0)
    key = rng.integers(0, 4, 500)
    y = rng.random(500) < 0.3
    w = (rng.random(500) < 0.9).astype(float)  # 0/1 weights: plain
    eff = effective_counts(key, 4, y, w, plain=True)
    assert np.array_equal(eff.n_eff, np.bincount(key, weights=w, minlength=4))
    assert np.array_equal(eff.x_eff, np.bincount(key, weights=w * y, minlength=4))


def test_effective_size_matches_statsmodels_robust_variance_of_the_weighted_mean():
    rng = np.random.default_rng(1)
    n = 800
    y = (rng.random(n) < 0.35).astype(float)
    w = rng.lognormal(0, 0.8, n)
    eff = effective_counts(np.zeros(n, dtype=np.int64), 1, y, w)
    p = eff.events[0] / eff.weight[0]
    ours = p * (1 - p) / eff.n_eff[0]
    # statsmodels: intercept-only WLS, HC0 sandwich variance of the weighted mean
    fit = sm.WLS(y, np.ones(n), weights=w).fit(cov_type="HC0")
    assert fit.params[0] == pytest.approx(p, rel=1e-12)
    assert ours == pytest.approx(fit.bse[0] ** 2, rel=1e-9)


def test_cluster_effective_size_matches_statsmodels_cluster_robust_variance():
    rng = np.random.default_rng(2)
    frame, sel, _ = clustered_sample(rng, 150)
    y = sel.astype(float)
    w = rng.uniform(0.5, 2.0, len(y))
    units = frame["person"].to_numpy()
    eff = effective_counts(np.zeros(len(y), dtype=np.int64), 1, y, w, units, clustered=True)
    p = eff.events[0] / eff.weight[0]
    ours = p * (1 - p) / eff.n_eff[0]
    fit = sm.WLS(y, np.ones(len(y)), weights=w).fit(cov_type="cluster",
                                                      cov_kwds={"groups": units})
    assert ours == pytest.approx(fit.bse[0] ** 2, rel=1e-9)
    assert eff.clusters[0] == 150


def test_correlation_of_groups_sharing_rows_matches_statsmodels_cluster_covariance():
    # rows counted in two groups by their membership probabilities: the two group means are one
    # WLS fit on group dummies over the expanded rows, clustered by the original row; statsmodels'
    # cluster-robust covariance without its small-sample correction is the linearisation one
    rng = np.random.default_rng(9)
    frame, sel, _, _ = membership_sample(rng, 500)
    probs = frame[["p_a", "p_b", "p_c"]].to_numpy()
    m = Membership("r", tuple("abc"), ("p_a", "p_b", "p_c"), probs)
    (codes,), source, w, _ = expand_rows([None], [m], None)
    y = sel[source].astype(float)
    eff = effective_counts(codes, 3, y, w, source)
    rho = eff.correlation(0)
    dummies = np.column_stack([(codes == j).astype(float) for j in range(3)])
    fit = sm.WLS(y, dummies, weights=w).fit(cov_type="cluster",
                                             cov_kwds={"groups": source, "use_correction": False})
    cov = fit.cov_params()
    assert rho[0] == pytest.approx(1.0)
    for j in (1, 2):
        assert rho[j] == pytest.approx(cov[0, j] / np.sqrt(cov[0, 0] * cov[j, j]), rel=1e-9)
        assert rho[j] > 0  # shared rows: the estimates move together


@pytest.mark.parametrize("rho", [-0.6, 0.0, 0.4, 0.9])
def test_correlated_ratio_limits_solve_the_mover_equation(rho):
    # the defining equation (Donner & Zou 2012's derivation with a covariance term): the lower
    # limit L makes p1 - L p2 equal its MOVER lower limit, i.e.
    # (p1 - L p2)^2 = (p1 - l1)^2 + L^2 (u2 - p2)^2 - 2 rho L (p1 - l1)(u2 - p2), with L < p1/p2
    from probe.stats import ratio_interval, wilson_interval

    x1, n1, x2, n2 = 30.0, 100.0, 55.0, 120.0
    (l1, u1), (l2, u2) = (wilson_interval(x, n) for x, n in ((x1, n1), (x2, n2)))
    p1, p2 = x1 / n1, x2 / n2
    low, high = ratio_interval(x1, n1, x2, n2, rho=rho)
    lhs = (p1 - low * p2) ** 2
    rhs = (p1 - l1) ** 2 + low ** 2 * (u2 - p2) ** 2 - 2 * rho * low * (p1 - l1) * (u2 - p2)
    assert lhs == pytest.approx(rhs, rel=1e-9) and low < p1 / p2 < high
    lhs = (p1 - high * p2) ** 2
    rhs = (u1 - p1) ** 2 + high ** 2 * (p2 - l2) ** 2 - 2 * rho * high * (u1 - p1) * (p2 - l2)
    assert lhs == pytest.approx(rhs, rel=1e-9)


def test_a_rate_of_zero_falls_back_to_kish():
    w = np.array([1.0, 2.0, 3.0, 4.0])
    eff = effective_counts(np.zeros(4, dtype=np.int64), 1, np.zeros(4), w)
    assert eff.n_eff[0] == pytest.approx(w.sum() ** 2 / (w * w).sum())  # Kish (1965)
    assert eff.x_eff[0] == 0


def test_weighted_group_rates_equal_descrstatsw_means():
    rng = np.random.default_rng(3)
    frame, sel, w, _ = stratified_sample(rng, 2000)
    y = rng.random(2000) < 0.4
    m = group_metrics(frame, y, sel, attributes=["group"], sample_weight=w)
    for r in m.rows:
        rows = (frame["group"] == r.group).to_numpy()
        assert r.selection_rate.value == pytest.approx(DescrStatsW(sel[rows], weights=w[rows]).mean)
        pos = rows & y
        assert r.tpr.value == pytest.approx(DescrStatsW(sel[pos], weights=w[pos]).mean)
        assert r.selection_rate.n_effective < r.rows  # unequal weights cost precision
        assert r.weight == pytest.approx(w[rows].sum())


def test_integer_weights_equal_duplicated_rows_for_point_estimates():
    rng = np.random.default_rng(4)
    n = 600
    frame = pd.DataFrame({"g": rng.choice(["a", "b"], n)})
    y, d = rng.random(n) < 0.5, rng.random(n) < 0.4
    k = rng.integers(1, 4, n)
    weighted = group_metrics(frame, y, d, attributes=["g"], sample_weight=k.astype(float))
    idx = np.repeat(np.arange(n), k)
    copied = group_metrics(frame.iloc[idx].reset_index(drop=True), y[idx], d[idx],
                           attributes=["g"])
    for a, b in zip(weighted.rows, copied.rows):
        for name in ("selection_rate", "error_rate", "fpr", "fnr", "impact_ratio", "spd"):
            assert getattr(a, name).value == pytest.approx(getattr(b, name).value, rel=1e-12)
        assert a.share == pytest.approx(b.share)
        # the copies are not independent: the weighted interval is wider than the copied one
        assert a.selection_rate.high - a.selection_rate.low > (
            b.selection_rate.high - b.selection_rate.low)


def test_unit_weights_and_zero_one_membership_change_nothing():
    rng = np.random.default_rng(5)
    n = 900
    g = rng.choice(["a", "b", "c"], n, p=[0.5, 0.3, 0.2])
    frame = pd.DataFrame({"race": g, "sex": rng.choice(["F", "M"], n)})
    y, d = rng.random(n) < 0.4, rng.random(n) < np.where(g == "a", 0.5, 0.3)
    plain = group_metrics(frame, y, d, attributes=["race", "sex"], intersections=[["race", "sex"]])
    ones = group_metrics(frame, y, d, attributes=["race", "sex"], intersections=[["race", "sex"]],
                         sample_weight=np.ones(n))
    assert ones.to_dict() == plain.to_dict()
    probs = np.column_stack([(g == k).astype(float) for k in "abc"])
    design = Design(membership={"group": Membership("group", ("a", "b", "c"),
                                                    ("pa", "pb", "pc"), probs)})
    known = group_metrics(frame, y, d, attributes=["group", "sex"],
                          intersections=[["group", "sex"]], design=design)
    renamed = [{**row, "attribute": row["attribute"].replace("race", "group")}
               for row in plain.to_dict()]
    assert known.to_dict() == renamed


def test_membership_rows_count_in_every_group_by_their_probability():
    probs = np.array([[0.5, 0.5], [1.0, 0.0], [0.2, 0.8]])
    codes, source, w, prob = expand_rows([None], [Membership("r", ("a", "b"), ("pa", "pb"),
                                                             probs)], np.array([2.0, 1.0, 1.0]))
    assert source.tolist() == [0, 0, 1, 2, 2]
    assert codes[0].tolist() == [0, 1, 0, 0, 1]
    assert w.tolist() == pytest.approx([1.0, 1.0, 1.0, 0.2, 0.8])
    assert prob.tolist() == pytest.approx([0.5, 0.5, 1.0, 0.2, 0.8])


def test_membership_gap_is_attenuated_toward_zero_against_the_true_labels():
    # planted truth: group b's selection rate is 0.15 above the others', within every area; the
    # probabilities come from the area alone, so the probability-weighted gap shrinks toward 0
    rng = np.random.default_rng(6)
    frame, sel, truth, limit = membership_sample(rng, 200_000, group_effect=0.15,
                                                 concentration=2.0)
    probs = frame[["p_a", "p_b", "p_c"]].to_numpy()
    design = Design(membership={"race": Membership("race", tuple("abc"), ("p_a", "p_b", "p_c"),
                                                   probs)})
    est = _rows(group_metrics(frame, sel, sel, attributes=["race"], reference={"race": "a"},
                              design=design))
    true = _rows(group_metrics(frame, sel, sel, attributes=["true_group"],
                               reference={"true_group": "a"}))
    true_gap = true[("true_group", "b")].spd.value
    weighted_gap = est[("race", "b")].spd.value
    assert true_gap == pytest.approx(truth["b"] - truth["a"], abs=0.01)
    # the weighted gap converges to the generator's exact limit, a fraction of the true gap
    assert weighted_gap == pytest.approx(limit["b"] - limit["a"], abs=0.01)
    assert 0 < weighted_gap < 0.6 * true_gap


def test_few_clusters_make_group_rules_inconclusive():
    rng = np.random.default_rng(7)
    frame, sel, _ = clustered_sample(rng, 40, group_shares=(0.5, 0.5, 0.0))
    design = Design(cluster=pd.factorize(frame["person"])[0])
    m = group_metrics(frame, sel, sel, attributes=["group"], design=design)
    counts = {r.group: r.clusters for r in m.rows}
    assert sum(counts.values()) == 40
    family = measure(groups=m)["max_error_gap"]
    (subject,) = family.measures
    assert subject.unjudged and "fewer than 30" in subject.unjudged
    many = clustered_sample(np.random.default_rng(8), 200, group_shares=(0.5, 0.5, 0.0))
    m2 = group_metrics(many[0], many[1], many[1], attributes=["group"],
                       design=Design(cluster=pd.factorize(many[0]["person"])[0]))
    assert all(x.unjudged is None for x in measure(groups=m2)["max_error_gap"].measures)


@pytest.mark.parametrize("column, values, words", [
    ("w", [1.0, -1.0, 2.0], "negative"),
    ("w", [1.0, np.nan, 2.0], "missing or infinite"),
    ("w", [0.0, 0.0, 0.0], "zero on every row"),
    ("w", ["a", "b", "c"], "not numeric"),
])
def test_bad_weights_are_refused_in_one_line(column, values, words):
    frame = pd.DataFrame({column: values})
    with pytest.raises(DataError, match=words) as err:
        read_design(frame, weights=column, where="`h.csv`")
    assert "\n" not in str(err.value) and "`w`" in str(err.value)


def test_bad_membership_is_refused_in_one_line():
    frame = pd.DataFrame({"pa": [0.5, 0.7, 0.2], "pb": [0.5, 0.2, 0.8]})
    with pytest.raises(DataError, match=r"do not sum to 1 on 1 rows \(data row 2;"):
        read_design(frame, membership={"race": {"a": "pa", "b": "pb"}})
    frame["race"] = "x"
    with pytest.raises(DataError, match="also a column"):
        read_design(frame, membership={"race": {"a": "pa", "b": "pb"}})
    bad = pd.DataFrame({"pa": [1.5, 0.0], "pb": [-0.5, 1.0]})
    with pytest.raises(DataError, match="outside"):
        read_design(bad, membership={"r": {"a": "pa", "b": "pb"}})
    with pytest.raises(DataError, match="missing"):
        read_design(pd.DataFrame({"c": [1, None]}), cluster="c")


def test_sample_weight_and_design_are_one_or_the_other():
    with pytest.raises(PlanError, match="not both"):
        resolve_design(np.ones(3), Design(), 3)
    with pytest.raises(DataError, match="3 values for 4 rows"):
        resolve_design(np.ones(3), None, 4)
    with pytest.raises(DataError, match="cluster"):
        resolve_design(None, Design(cluster=np.zeros(2)), 3)
    with pytest.raises(DataError, match="must be numbers"):
        Design(weights=["heavy", "light"])


def _judged(m, estimated, **rules):
    from probe.options import PolicyOptions
    from probe.policy import judge

    return judge(measure(groups=m, estimated=estimated), PolicyOptions(**rules))


def test_groups_known_as_probabilities_can_fail_but_not_pass():
    rng = np.random.default_rng(10)
    n = 20_000
    pa = rng.uniform(0.1, 0.9, n)
    probs = np.column_stack([pa, 1 - pa])
    design = Design(membership={"r": Membership("r", ("a", "b"), ("pa", "pb"), probs)})
    frame = pd.DataFrame(index=range(n))
    y = rng.random(n) < 0.5
    for rate_b, status in ((0.5, "inconclusive"), (0.1, "fail")):
        sel = rng.random(n) < np.where(rng.random(n) < pa, 0.5, rate_b)  # b's rate planted
        m = group_metrics(frame, y, sel, attributes=["r"], reference={"r": "a"}, design=design)
        verdict = _judged(m, design.estimated, min_impact_ratio=0.8)
        (rule,) = verdict.rules
        assert rule.status == status, rule
        if status == "inconclusive":  # the interval is inside the bound: a pass withheld
            assert rule.value["low"] > 0.8 and "membership probabilities" in rule.message
        else:  # attenuated (the true ratio is 0.2) but still below the bound: the fail stands
            assert 0.2 < rule.value["high"] < 0.8
    # recorded groups (0/1 probabilities) pass as before
    assert Design(membership={"r": Membership("r", ("a", "b"), ("pa", "pb"),
                                              np.eye(2)[rng.integers(0, 2, n)])}).estimated == ()


def test_few_clusters_are_counted_in_the_rate_s_own_base():
    # 40 people per group, but the label-negatives sit in 4 people per group: FPR rests on 4
    rng = np.random.default_rng(11)
    person = np.repeat(np.arange(80), 10)
    group = np.where(person < 40, "a", "b")
    y = ~np.isin(person % 40, [0, 1, 2, 3])
    d = rng.random(len(person)) < 0.5
    m = group_metrics(pd.DataFrame({"g": group}), y, d, attributes=["g"],
                      design=Design(cluster=person))
    fams = measure(groups=m)
    (fpr,) = fams["max_fpr_gap"].measures
    (err,) = fams["max_error_gap"].measures
    assert fpr.unjudged and "rests on 4 clusters" in fpr.unjudged
    assert err.unjudged is None  # 40 clusters per group in the base of all rows


def test_api_cluster_ids_of_any_kind_and_weight_zero_levels():
    d = resolve_design(None, Design(cluster=np.array(["h9", "h1", "h9", "h4"])), 4)
    assert d.n_clusters == 3 and d.cluster.tolist() == [2, 0, 2, 1]
    assert resolve_design(None, Design(cluster=np.arange(4) * 10**11), 4).n_clusters == 4
    # a level whose rows all weigh 0 is in no group, so it cannot become the reference
    f = pd.DataFrame({"g": ["a"] * 50 + ["b"] * 50 + ["c"] * 10})
    sel = np.r_[np.ones(30), np.zeros(20), np.ones(15), np.zeros(35), np.ones(10)].astype(bool)
    m = group_metrics(f, sel, sel, attributes=["g"], min_share=0.0,
                      sample_weight=np.r_[np.ones(100), np.zeros(10)])
    assert [r.group for r in m.rows] == ["a", "b"] and m.rows[1].four_fifths_flag


def test_unknown_rows_are_counted_once_in_an_intersection_with_membership():
    probs = np.full((6, 3), 1 / 3)
    design = Design(membership={"m": Membership("m", tuple("xyz"), ("p", "q", "s"), probs)})
    frame = pd.DataFrame({"r": ["u", None, "v", "u", None, "v"]})
    flags = np.array([True, False, True, False, True, False])
    m = group_metrics(frame, flags, flags, attributes=["r"], intersections=[["r", "m"]],
                      design=design)
    assert m.unknown == {"r": 2, "r & m": 2}
