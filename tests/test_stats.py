"""Intervals, tests, BH and bootstrap checked against published values and reference libraries."""

import numpy as np
import pytest
from scipy import stats as sps
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.proportion import (
    confint_proportions_2indep,
    proportion_confint,
    proportions_ztest,
)

from probe.bootstrap import bootstrap, jackknife_values
from probe.errors import DegenerateWarning
from probe.stats import (
    Estimate,
    bh_adjust,
    impact_ratio,
    mcnemar_pvalue,
    newcombe,
    newcombe_interval,
    ratio_interval,
    two_proportion_pvalue,
    wilson,
    wilson_interval,
)

# Newcombe (1998a), Stat Med 17:857-872, Table II, method 3 (Wilson score), 95 %.
# check-values.md §3: [M, matches C] (recalled table, every cell recomputed with statsmodels).
NEWCOMBE_WILSON = [
    (81, 263, 0.2553, 0.3662),
    (15, 148, 0.0624, 0.1605),
    (0, 20, 0.0000, 0.1611),
    (1, 29, 0.0061, 0.1718),
]


@pytest.mark.parametrize("x, n, low, high", NEWCOMBE_WILSON)
def test_wilson_matches_newcombe_table_ii(x, n, low, high):
    est = wilson(x, n)
    assert est.low == pytest.approx(low, abs=5e-5)
    assert est.high == pytest.approx(high, abs=5e-5)
    assert est.method == "wilson"


def test_wilson_matches_statsmodels_and_scipy_on_a_grid():
    # Reference libraries: statsmodels proportion_confint(method="wilson") and scipy binomtest.
    rng = np.random.default_rng(1)
    n = rng.integers(1, 500, size=200)
    x = rng.integers(0, n + 1)
    low, high = wilson_interval(x, n, confidence_level=0.9)
    ref_low, ref_high = proportion_confint(x, n, alpha=0.1, method="wilson")
    np.testing.assert_allclose(low, ref_low, atol=1e-12)
    np.testing.assert_allclose(high, ref_high, atol=1e-12)
    ci = sps.binomtest(7, 31).proportion_ci(confidence_level=0.95, method="wilson")
    assert wilson(7, 31).low == pytest.approx(ci.low, abs=1e-12)
    assert wilson(7, 31).high == pytest.approx(ci.high, abs=1e-12)


# Newcombe (1998b), Stat Med 17:873-890, method 10; check-values.md §3: [M, matches C]; the first row is
# also confirmed by an independent public test file citing Newcombe.
NEWCOMBE_DIFF = [
    (56, 70, 48, 80, 0.0524, 0.3339),
    (9, 10, 3, 10, 0.1705, 0.8090),
    (6, 7, 2, 7, 0.0582, 0.8062),
    (5, 56, 0, 29, -0.0381, 0.1926),
    (0, 10, 0, 20, -0.1611, 0.2775),
    (10, 10, 0, 20, 0.6791, 1.0000),
]


@pytest.mark.parametrize("x1, n1, x2, n2, low, high", NEWCOMBE_DIFF)
def test_newcombe_difference_matches_published_and_statsmodels(x1, n1, x2, n2, low, high):
    est = newcombe(x1, n1, x2, n2)
    assert est.low == pytest.approx(low, abs=5e-5)
    assert est.high == pytest.approx(high, abs=5e-5)
    ref = confint_proportions_2indep(x1, n1, x2, n2, method="newcomb", compare="diff")
    assert est.low == pytest.approx(ref[0], abs=1e-10)
    assert est.high == pytest.approx(ref[1], abs=1e-10)


def test_empty_group_is_nan_with_a_warning():
    with pytest.warns(DegenerateWarning):
        est = wilson(0, 0)
    assert np.isnan(est.value) and np.isnan(est.low)
    assert est.to_dict() == {"value": None, "low": None, "high": None, "method": "wilson"}
    with pytest.warns(DegenerateWarning):
        assert np.isnan(impact_ratio(3, 10, 0, 10).value)


def test_impact_ratio_uniform_guidelines_example():
    # 29 CFR 1607 Q&A 12 / EEOC technical assistance (2023), check-values.md §1.2-1.3 [V]:
    # 48/80 White vs 12/40 Black: rates 0.60 and 0.30, impact ratio 0.50.
    est = impact_ratio(12, 40, 48, 80)
    assert est.value == pytest.approx(0.50, abs=1e-12)
    assert est.low < 0.5 < est.high
    assert est.high < 0.8  # confidently below four-fifths at these counts


def test_ratio_interval_reduces_to_wilson_over_a_known_reference():
    # With a reference measured without error (huge n), MOVER-R reduces to Wilson(x1, n1) / p2.
    low, high = ratio_interval(30, 100, 5 * 10**8, 10**9)
    w_low, w_high = wilson_interval(30, 100)
    assert low == pytest.approx(w_low / 0.5, rel=1e-3)
    assert high == pytest.approx(w_high / 0.5, rel=1e-3)


def test_ratio_interval_close_to_statsmodels_score_for_large_counts():
    # Reference library: statsmodels' score interval for a ratio; different constructions agree to
    # a couple of decimals when counts are large.
    low, high = ratio_interval(420, 1000, 600, 1000)
    ref = confint_proportions_2indep(420, 1000, 600, 1000, method="score", compare="ratio")
    assert low == pytest.approx(ref[0], abs=0.01)
    assert high == pytest.approx(ref[1], abs=0.01)


def test_ratio_interval_coverage_in_simulation():
    # Planted truth: true ratio 0.3/0.5 = 0.6; coverage of the nominal 95 % within 2 points.
    rng = np.random.default_rng(7)
    x1 = rng.binomial(80, 0.3, size=4000)
    x2 = rng.binomial(120, 0.5, size=4000)
    low, high = ratio_interval(x1, 80, x2, 120)
    coverage = np.mean((low <= 0.6) & (0.6 <= high))
    assert abs(coverage - 0.95) < 0.02


def test_two_proportion_pvalue_matches_statsmodels_ztest():
    for alt, sm_alt in (("two-sided", "two-sided"), ("greater", "larger"), ("less", "smaller")):
        p = two_proportion_pvalue(45, 120, 30, 130, alternative=alt)
        _, ref = proportions_ztest([45, 30], [120, 130], alternative=sm_alt)
        assert float(p) == pytest.approx(ref, rel=1e-10)
    assert float(two_proportion_pvalue(0, 10, 0, 10)) == 1.0


def test_mcnemar_matches_statsmodels_exact():
    from statsmodels.stats.contingency_tables import mcnemar

    ref = mcnemar([[50, 9], [21, 40]], exact=True).pvalue
    assert mcnemar_pvalue(9, 21) == pytest.approx(ref, rel=1e-12)


# Benjamini & Hochberg (1995), JRSS-B 57:289-300, section 4: 15 p-values; check-values.md §4
# ([M, widely reproduced] p-values; the rejection count 4 and the adjusted values are [C]).
BH_P = [0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240,
        0.4262, 0.5719, 0.6528, 0.7590, 1.000]


def test_bh_rejects_four_of_the_published_fifteen():
    q = bh_adjust(BH_P)
    assert int(np.sum(q <= 0.05)) == 4
    np.testing.assert_allclose(q, sps.false_discovery_control(BH_P, method="bh"), atol=1e-12)
    np.testing.assert_allclose(
        q[:10],
        [0.0015, 0.0030, 0.0095, 0.035625, 0.0603, 0.063857, 0.063857, 0.0645, 0.0765, 0.4860],
        atol=5e-7,
    )
    assert multipletests(BH_P, alpha=0.05, method="fdr_bh")[0].sum() == 4


def test_bh_keeps_input_order_and_nan():
    rng = np.random.default_rng(3)
    p = rng.uniform(size=50)
    p[[3, 17]] = np.nan
    q = bh_adjust(p)
    assert np.isnan(q[3]) and np.isnan(q[17])
    ok = ~np.isnan(p)
    np.testing.assert_allclose(q[ok], sps.false_discovery_control(p[ok]), atol=1e-12)


# Efron & Tibshirani (1993), Table 3.1, law school data; check-values.md §5 [V] data, [C] values.
LSAT = np.array([576, 635, 558, 578, 666, 580, 555, 661, 651, 605, 653, 575, 545, 572, 594], float)
GPA = np.array([3.39, 3.30, 2.81, 3.03, 3.44, 3.07, 3.00, 3.43, 3.36, 3.13, 3.12, 2.74, 2.76,
                2.88, 2.96])


def _corr(x, y, axis=-1):
    xm = x - x.mean(axis=axis, keepdims=True)
    ym = y - y.mean(axis=axis, keepdims=True)
    return (xm * ym).sum(axis) / np.sqrt((xm**2).sum(axis) * (ym**2).sum(axis))


def test_bootstrap_law_school_against_published_and_scipy():

    theta = jackknife_values([LSAT, GPA], _corr)
    d = theta.mean() - theta
    a_hat = np.sum(d**3) / (6 * np.sum(d**2) ** 1.5)
    assert a_hat == pytest.approx(-0.07567, abs=5e-6)  # check-values §5 [C]
    jack_se = np.sqrt((len(theta) - 1) / len(theta) * np.sum((theta - theta.mean()) ** 2))
    assert jack_se == pytest.approx(0.142519, abs=5e-6)  # [C]; E&T quote .142 [M]

    ours = bootstrap([LSAT, GPA], _corr, n_resamples=20000, confidence_level=0.90, rng=0)
    assert ours.estimate.value == pytest.approx(0.776374, abs=1e-6)
    assert ours.estimate.method == "bootstrap-bca"
    assert ours.standard_error == pytest.approx(0.1337, abs=0.005)  # [C] 0.1337-0.1343 at large B
    ref = sps.bootstrap((LSAT, GPA), _corr, paired=True, vectorized=True, n_resamples=20000,
                        confidence_level=0.90, method="BCa", rng=np.random.default_rng(1))
    assert ours.estimate.low == pytest.approx(ref.confidence_interval.low, abs=0.02)
    assert ours.estimate.high == pytest.approx(ref.confidence_interval.high, abs=0.02)
    pct = bootstrap([LSAT, GPA], _corr, n_resamples=20000, method="percentile",
                    confidence_level=0.90, rng=0)
    assert pct.estimate.low == pytest.approx(0.523, abs=0.02)  # [C] 0.521-0.525
    assert pct.estimate.high == pytest.approx(0.948, abs=0.02)  # [C] 0.946-0.950


def test_bootstrap_is_seeded_and_falls_back_when_bca_is_undefined():
    x = np.arange(30.0)
    a = bootstrap([x], np.mean, n_resamples=500, rng=5)
    b = bootstrap([x], np.mean, n_resamples=500, rng=5)
    assert a.estimate == b.estimate
    with pytest.warns(DegenerateWarning):
        res = bootstrap([np.ones(20)], np.mean, n_resamples=200, rng=0)
    assert res.estimate.method == "bootstrap-percentile"
    assert res.estimate.low == res.estimate.high == 1.0


def test_estimate_excludes():
    e = Estimate(0.5, 0.4, 0.6, "wilson")
    assert e.excludes(0.3) and e.excludes(0.7) and not e.excludes(0.5)
