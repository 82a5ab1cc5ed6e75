"""Flip tests under a sampling design: plain designs change nothing, weighted rates against brute
force and statsmodels, integer weights against duplicated rows, clusters widen, membership."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.stats.weightstats import DescrStatsW

from probe.design import Design, Membership
from probe.errors import DataError, PlanError
from probe.flips import flip_test


class Linear:
    """A model reading ``x`` and, when asked, ``group``: score 0.5 + (x - 0.5) + lift·[group=M]."""

    def __init__(self, names=("group", "x"), lift=0.15):
        self.feature_names, self.lift = tuple(names), lift

    def scores(self, f):
        s = 0.5 + (f["x"].to_numpy(float) - 0.5) * 0.5
        if "group" in self.feature_names:
            s = s + self.lift * (f["group"].to_numpy() == "M")
        return np.clip(s, 0, 1)


def _data(n=400, seed=0):
    g = np.random.default_rng(seed)
    group = np.where(np.arange(n) % 2 == 0, "F", "M")
    return pd.DataFrame({"group": group, "x": g.normal(0.5 + 0.4 * (group == "M"), 0.5, n),
                         "z": g.normal(size=n)})


def _brute_direct(model, X, src, dst):
    """Per row of ``src``: did the decision change when `group` alone is set to ``dst``?"""
    rows = X[X.group == src]
    old = model.scores(rows) >= 0.5
    new = model.scores(rows.assign(group=dst)) >= 0.5
    return rows.index.to_numpy(), old != new


@pytest.mark.parametrize("mode", ["direct", "transport", "twins"])
def test_unit_weights_change_nothing(mode):
    X = _data()
    model = Linear(("group", "x", "z"))
    kw = dict(mode=mode, reference="M", proxies=["x"]) if mode == "transport" else dict(
        mode=mode, reference="M")
    plain = flip_test(model, X, "group", **kw).to_dict()
    assert flip_test(model, X, "group", sample_weight=np.ones(len(X)), **kw).to_dict() == plain
    assert flip_test(model, X, "group", design=Design(weights=np.ones(len(X))),
                     **kw).to_dict() == plain


@pytest.mark.parametrize("mode", ["transport", "twins"])
def test_zero_one_membership_equals_the_recorded_column(mode):
    X = _data()
    probs = np.column_stack([X.group == "F", X.group == "M"]).astype(float)
    design = Design(membership={"group": Membership("group", ("F", "M"), ("p_f", "p_m"), probs)})
    model = Linear(("x", "z"))
    kw = dict(mode=mode, reference="M", proxies=["x"]) if mode == "transport" else dict(
        mode=mode, reference="M")
    recorded = flip_test(model, X, "group", **kw).to_dict()
    assert flip_test(model, X.drop(columns="group"), "group", design=design,
                     **kw).to_dict() == recorded


def test_a_recorded_column_ignores_other_attributes_membership():
    X = _data()
    other = Design(membership={"race": Membership("race", ("a", "b"), ("p_a", "p_b"),
                                                  np.full((len(X), 2), 0.5))})
    model = Linear()
    for mode in ("direct", "twins"):
        assert (flip_test(model, X, "group", mode=mode, reference="M", design=other).to_dict()
                == flip_test(model, X, "group", mode=mode, reference="M").to_dict())


def test_weighted_flip_rate_equals_brute_force_and_statsmodels():
    X = _data(600, seed=3)
    w = np.random.default_rng(1).gamma(0.7, 2.0, len(X))
    model = Linear()
    (row,) = flip_test(model, X, "group", mode="direct", reference="M", sample_weight=w).rows
    pos, flip = _brute_direct(model, X, "F", "M")
    wf = w[pos]
    brute = float(np.sum(wf * flip) / np.sum(wf))
    assert row.flip_rate.value == pytest.approx(brute, rel=1e-12)
    # statsmodels' weighted mean, an independent implementation
    assert row.flip_rate.value == pytest.approx(DescrStatsW(flip.astype(float), weights=wf).mean,
                                                rel=1e-12)
    # effective count: s^2 / v, v the linearisation variance with rows as units (written out)
    v = np.sum(wf ** 2 * (flip - brute) ** 2) / np.sum(wf) ** 2
    assert row.flip_rate.n_effective == pytest.approx(brute * (1 - brute) / v, rel=1e-9)
    assert row.weight == pytest.approx(wf.sum()) and row.clusters is None
    assert row.to_dict()["flip_rate"]["n_effective"] == pytest.approx(row.flip_rate.n_effective)
    assert row.judged_at(0.95) == row.flip_rate


def _satisfies(frame, pred):
    """A level or a numeric bin, evaluated by its stated meaning (not by the encoder)."""
    col = frame[pred["column"]]
    if pred["op"] == "==":
        return (col == pred["value"]).to_numpy()
    lo, hi = pred["value"]
    v = col.to_numpy(dtype=float)
    return (v >= (-np.inf if lo is None else lo)) & (v < (np.inf if hi is None else hi))


def test_weighted_breakdown_equals_brute_force_weighted_rates():
    X = _data(2000, seed=6).assign(band=lambda f: np.where(f.z > 0, "hi", "lo"))
    w = np.random.default_rng(3).gamma(0.7, 2.0, len(X))
    model = Linear()
    (row,) = flip_test(model, X, "group", mode="direct", reference="M", sample_weight=w).rows
    pos, flip = _brute_direct(model, X, "F", "M")
    source = np.zeros(len(X), dtype=bool)
    source[pos] = True
    allflip = np.zeros(len(X), dtype=bool)
    allflip[pos] = flip
    assert row.by_slice
    rates = []
    for s in row.by_slice:
        inside = source.copy()
        for p in s.predicates:
            inside &= _satisfies(X, p)
        assert s.rows == inside.sum()
        brute = np.sum(w[inside] * allflip[inside]) / np.sum(w[inside])
        assert s.flip_rate.value == pytest.approx(brute, rel=1e-12)
        assert 0 < s.flip_rate.n_effective <= s.rows
        rates.append(s.flip_rate.value)
    assert rates == sorted(rates, reverse=True)  # ranked by the weighted rate


def test_integer_weights_equal_duplicated_rows_for_point_estimates():
    X = _data(300, seed=4)
    w = np.random.default_rng(2).integers(1, 4, len(X))
    model = Linear()
    weighted = flip_test(model, X, "group", mode="direct", reference="M", sample_weight=w).rows[0]
    dup = flip_test(model, X.loc[X.index.repeat(w)].reset_index(drop=True), "group",
                    mode="direct", reference="M").rows[0]
    for name in ("flip_rate", "to_favorable", "to_unfavorable", "mean_score_change"):
        assert getattr(weighted, name).value == pytest.approx(getattr(dup, name).value, rel=1e-12)


def test_clusters_widen_the_interval_when_flips_cluster():
    # clusters of 10 rows share x, so a cluster flips together: the naive interval is too narrow
    g = np.random.default_rng(7)
    k, size = 80, 10
    x = np.repeat(g.normal(0.6, 0.5, k), size)
    X = pd.DataFrame({"group": "F", "x": x}).assign(group=lambda f: np.where(
        np.arange(len(f)) % 2, "M", "F"))
    cluster = np.repeat(np.arange(k), size)
    model = Linear()
    naive = flip_test(model, X, "group", mode="direct", reference="M").rows[0].flip_rate
    robust = flip_test(model, X, "group", mode="direct", reference="M",
                       design=Design(cluster=cluster)).rows[0]
    assert robust.flip_rate.value == pytest.approx(naive.value, rel=1e-12)
    assert robust.flip_rate.high - robust.flip_rate.low > 1.5 * (naive.high - naive.low)
    assert robust.clusters == k and robust.flip_rate.n_effective < robust.rows


def test_transport_recovers_a_planted_effect_in_a_probability_defined_group():
    # planted: x ~ N(1, 1) in true group b, N(0, 1) in a, half each; a row of b has p_b = 0.8, a
    # row of a 0.2. Weighted by membership, b's x is 0.8 N(1,1) + 0.2 N(0,1) and a's the mirror.
    # Mapped monotonely onto a's and decided at x >= 0.5, the flip rate is M_a(0.5) - M_b(0.5):
    # 0.6 (Phi(0.5) - Phi(-0.5)) = 0.2298, against 0.3829 with the true labels (the attenuation
    # the membership caution states).
    g = np.random.default_rng(11)
    n = 6000
    true_b = np.arange(n) < n // 2
    X = pd.DataFrame({"x": np.where(true_b, g.normal(1, 1, n), g.normal(0, 1, n))})
    p_b = np.where(true_b, 0.8, 0.2)
    design = Design(membership={"grp": Membership("grp", ("a", "b"), ("p_a", "p_b"),
                                                  np.column_stack([1 - p_b, p_b]))})
    model = Linear(("x",))
    res = flip_test(model, X, "grp", mode="transport", reference="a", proxies=["x"], design=design)
    (row,) = res.rows
    truth = 0.6 * (stats.norm.cdf(0.5) - stats.norm.cdf(-0.5))
    assert row.from_ == "b" and row.rows == n // 2
    # the estimate's standard deviation over samples is 0.0073 (sum over rows of
    # (w_a/W_a - w_b/W_b)^2 p(1 - p)); 0.03 is four of them
    assert row.to_unfavorable.value == pytest.approx(truth, abs=0.03)
    assert row.to_favorable.value == 0 and row.flip_rate.n_effective <= n
    assert row.excess.n_effective is not None and row.weight == pytest.approx(n / 2)
    # direct does not apply: the attribute is not a model input
    with pytest.warns(Warning, match="not a model input"):
        assert flip_test(model, X, "grp", mode="direct", design=design).rows == ()
    # twins run with each row in both groups, weighted: the excess is estimated with n_effective
    twins = flip_test(model, X.iloc[:1200], "grp", mode="twins", reference="a", design=Design(
        membership={"grp": Membership("grp", ("a", "b"), ("p_a", "p_b"),
                                      np.column_stack([1 - p_b, p_b])[:1200])}))
    assert twins.rows[0].excess is not None and twins.rows[0].excess.n_effective > 0


def test_design_refusals_are_one_line():
    X = _data(50)
    model = Linear()
    with pytest.raises(PlanError, match="not both"):
        flip_test(model, X, "group", sample_weight=np.ones(50), design=Design())
    with pytest.raises(DataError, match="49 values for 50 rows"):
        flip_test(model, X, "group", sample_weight=np.ones(49))
    with pytest.raises(DataError, match="negative values"):
        flip_test(model, X, "group", sample_weight=-np.ones(50))
    with pytest.raises(DataError, match="hold numbers"):
        flip_test(model, X, "group", sample_weight=["a"] * 50)
    probs = np.full((50, 2), 0.5)
    both = Design(membership={"group": Membership("group", ("F", "M"), ("p", "q"), probs)})
    with pytest.raises(DataError, match="both a column"):
        flip_test(model, X, "group", design=both)
    with pytest.raises(PlanError, match="probe.Design"):
        flip_test(model, X, "group", design={"weights": 1})
