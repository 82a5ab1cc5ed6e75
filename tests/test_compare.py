"""Candidate vs baseline: paired differences against brute force and statsmodels, and a planted regression."""

import numpy as np
import pandas as pd
import pytest
from scipy.stats import binomtest
from statsmodels.stats.contingency_tables import mcnemar

from probe.adapters import load_model
from probe.compare import compare_models
from probe.errors import DataError
from probe.paired import tango_interval


def test_overall_difference_against_brute_force_binomtest_and_tango():
    rng = np.random.default_rng(4)
    n = 3000
    X = pd.DataFrame({"a": rng.integers(0, 3, size=n)})
    y = rng.uniform(size=n) < 0.4
    base = rng.uniform(size=n) < 0.2
    cand = np.where(rng.uniform(size=n) < 0.9, base, rng.uniform(size=n) < 0.5)
    m = next(r for r in compare_models(X, y, cand, base, rng=0).metrics if r.metric == "selection")
    b, c = int(np.sum(cand & ~base)), int(np.sum(~cand & base))  # brute force
    assert m.discordant == (b, c) and m.rows == n
    assert m.difference.value == pytest.approx(cand.mean() - base.mean(), abs=1e-12)
    # exact McNemar = the two-sided binomial test on the discordant rows (scipy), and statsmodels
    assert m.p_value == pytest.approx(binomtest(b, b + c, 0.5).pvalue, rel=1e-12)
    table = [[np.sum(cand & base), b], [c, np.sum(~cand & ~base)]]
    assert m.p_value == pytest.approx(mcnemar(table, exact=True).pvalue, rel=1e-10)
    assert (m.difference.low, m.difference.high) == tuple(map(float, tango_interval(b, c, n)))
    # selection: fewer favourable decisions is worse, so the shortfall is the negated difference
    assert m.shortfall.value == -m.difference.value and m.shortfall.low == -m.difference.high
    assert m.shortfall_at(0.95) == m.shortfall
    wide = m.shortfall_at(0.999)
    assert wide.low < m.shortfall.low and wide.high > m.shortfall.high


def test_models_that_always_agree_get_an_interval_of_positive_width():
    # the bootstrap gave [0, 0] here, which passes any bound; Tango gives ±z²/(n + z²)
    n = 500
    X = pd.DataFrame({"a": np.arange(n) % 3})
    y = np.arange(n) % 2 == 0
    pred = np.arange(n) % 5 == 0
    m = compare_models(X, y, pred, pred, rng=0).overall
    z2 = 1.959963984540054 ** 2
    assert m.difference.value == 0 and m.difference.high == pytest.approx(z2 / (n + z2))
    assert m.shortfall_at(0.99).high > m.difference.high > 0


def test_identical_models_show_no_difference_and_no_worse_slice():
    rng = np.random.default_rng(0)
    X = pd.DataFrame({"a": rng.choice(list("xyz"), 2000), "b": rng.normal(size=2000)})
    y = rng.uniform(size=2000) < 0.5
    pred = rng.uniform(size=2000) < 0.5
    result = compare_models(X, y, pred, pred, rng=0)
    assert all(m.difference.value == 0 and m.p_value == 1.0 for m in result.metrics)
    with pytest.raises(DataError, match="2000 rows but `y_pred` has 1999"):
        compare_models(X, y, pred, pred[:-1])
    with pytest.raises(DataError, match="0/1 or boolean"):  # scores are not decisions
        compare_models(X, y, rng.uniform(size=2000), pred)
    with pytest.raises(DataError, match="0/1 or boolean"):  # text labels must be mapped first
        compare_models(X, np.where(y, "yes", "no"), pred, pred)


def test_independent_disagreements_raise_no_false_alarm():
    # planted null: the candidate differs from the baseline at random, independent of every column
    alarms = 0
    for seed in range(10):
        rng = np.random.default_rng(seed)
        n = 3000
        X = pd.DataFrame({"a": rng.choice(list("xyz"), n), "b": rng.normal(size=n),
                          "c": rng.integers(0, 4, n)})
        y = rng.uniform(size=n) < 0.5
        base = rng.uniform(size=n) < 0.5
        cand = np.where(rng.uniform(size=n) < 0.1, ~base, base)
        found = compare_models(X, y, cand, base, rng=seed).to_dict()["worse_slices"]
        alarms += any(s["q_value"] <= 0.05 for s in found)
    assert alarms <= 1


@pytest.mark.slow
def test_compare_finds_the_planted_regression_there_and_only_there(built, slice_mask):
    # Planted truth: the lending candidate was trained with a defect confined to one region
    # (scenarios/lending/README.md, truths["defect"]).
    scenario = built("lending")
    frame = pd.read_parquet(scenario.data_path)
    truths = scenario.truths
    y = (frame[truths["label"]] == truths["positive"]).to_numpy()
    cand = load_model(str(scenario.candidate_path)).scores(frame) >= 0.5
    base = load_model(str(scenario.baseline_path)).scores(frame) >= 0.5
    result = compare_models(frame.drop(columns=[truths["label"]]), y, cand, base, rng=0)
    defect = slice_mask(frame, truths["defect"]["predicates"])
    found = [s for s in result.to_dict()["worse_slices"] if s["q_value"] <= 0.05]
    assert found, "the planted regression was not found"
    for s in found:
        rows = slice_mask(frame, s["predicates"])
        inside = (rows & defect).sum() / rows.sum()
        assert inside >= 0.8, f"{s['label']} is reported worse but lies outside the defect region"
    covered = np.zeros(len(frame), dtype=bool)
    for s in found:
        covered |= slice_mask(frame, s["predicates"])
    assert (covered & defect).sum() / defect.sum() >= 0.5  # most of the defect region is reported
    overall = result.overall
    assert overall.difference.low > 0  # the candidate is worse overall, as planted


@pytest.mark.parametrize("moved, status", [(-0.21, "fail"), (+0.19, "pass")])
def test_max_regression_judges_the_selection_rate_in_its_worse_direction(moved, status):
    # selecting 21 points fewer people is a regression (it passed before); 19 points more is not
    # (it failed before). Planted truth: the candidate moves exactly that share of rows.
    from probe.options import PolicyOptions
    from probe.policy import judge, measure

    n = 4000
    rng = np.random.default_rng(7)
    X = pd.DataFrame({"a": rng.integers(0, 3, size=n)})
    base = np.zeros(n, dtype=bool)
    base[: n // 2] = True
    cand = base.copy()
    k = int(abs(moved) * n)
    if moved < 0:
        cand[:k] = False
    else:
        cand[n // 2: n // 2 + k] = True
    result = compare_models(X, None, cand, base, metric="selection", rng=0)
    assert result.overall.difference.value == pytest.approx(moved, abs=1e-12)
    assert result.overall.shortfall.value == pytest.approx(-moved, abs=1e-12)
    verdict = judge(measure(comparison=result), PolicyOptions(max_regression=0.02))
    assert verdict.rules[0].status == status


def test_worse_slices_are_only_slices_where_the_candidate_is_worse():
    # the candidate is better than the baseline everywhere, least better where a == 0: the search
    # ranks that corner first, but the candidate is not worse there, so nothing is listed
    n = 6000
    rng = np.random.default_rng(3)
    X = pd.DataFrame({"a": rng.integers(0, 3, size=n), "b": rng.integers(0, 4, size=n)})
    y = rng.random(n) < 0.5
    base_err = rng.random(n) < np.where(X["a"] == 0, 0.30, 0.40)
    cand_err = base_err & (rng.random(n) < np.where(X["a"] == 0, 0.95, 0.5))
    base, cand = np.where(base_err, ~y, y), np.where(cand_err, ~y, y)
    result = compare_models(X, y, cand, base, rng=0)
    assert result.overall.difference.high < 0  # better overall, as planted
    ranked = [s for s in result.worse_slices.found]
    assert ranked, "the search itself still ranks slices by relative shortfall"
    assert result.worse == () and result.to_dict()["worse_slices"] == []
    # brute force: in every ranked slice the candidate's error is not above the baseline's
    for s in ranked:
        assert s.rate.value <= 0


def test_a_nan_p_value_is_json_null():
    import json
    import math

    from probe.compare import MetricComparison
    from probe.stats import Estimate

    e = Estimate(0.1, 0.05, 0.2, "wilson")
    m = MetricComparison("error", e, e, Estimate(0.0, -0.1, 0.1, "tango"), math.nan, (0, 0), 10)
    out = json.loads(json.dumps(m.to_dict(), allow_nan=False))
    assert out["p_value"] is None and out["candidate"]["value"] == 0.1
