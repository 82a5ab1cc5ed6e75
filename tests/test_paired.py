"""Paired-proportion difference intervals against published values, a numeric MLE and a closed form."""

import math

import numpy as np
import pytest
from scipy import optimize
from scipy.stats import norm

from probe.paired import newcombe_paired_interval, paired_difference, tango_interval

# Cavo et al. (2012), table rbind(c(59,6), c(16,80)), N = 161: Fagerland, Lydersen & Laake,
# Statistical Analysis of Contingency Tables (2017), ch. 8; the limits are those the book's R package
# `contingencytables` 3.0.0 checks in tests/testthat/test-ch8.R [V, seen in the source].
CAVO = (59, 6, 16, 80)
CAVO_NEWCOMBE = (-0.1186, -0.0046)
CAVO_TANGO = (-0.1240, -0.0054)
TOL = 6e-5  # the published limits carry 4 decimals

# Computed values [C], not published: Bentur et al. (2009) rbind(c(1,1), c(7,12)) and Altman et al.,
# Statistics with Confidence (2000), Table 6.2, rbind(c(14,5), c(0,22)), computed with an independent
# numpy/scipy script for check-values-2.md section 2 (4 decimals).
COMPUTED = [
    ((1, 1, 7, 12), (-0.5069, -0.0256), (-0.5172, -0.0260)),
    ((14, 5, 0, 22), (0.0115, 0.2265), (0.0258, 0.2554)),
]


def test_cavo_matches_the_published_limits():
    a, b, c, d = CAVO
    assert np.allclose(newcombe_paired_interval(a, b, c, d), CAVO_NEWCOMBE, atol=TOL)
    assert np.allclose(tango_interval(b, c, a + b + c + d), CAVO_TANGO, atol=TOL)
    est = paired_difference(b, c, 161)
    assert est.value == pytest.approx(-10 / 161) and est.method == "tango-score"
    assert (est.low, est.high) == pytest.approx(CAVO_TANGO, abs=TOL)


@pytest.mark.parametrize("table, newcombe, tango", COMPUTED)
def test_computed_examples(table, newcombe, tango):
    a, b, c, d = table
    assert np.allclose(newcombe_paired_interval(a, b, c, d), newcombe, atol=TOL)
    assert np.allclose(tango_interval(b, c, sum(table)), tango, atol=TOL)


def _restricted_score(delta, b, c, n):
    """Tango's score with the nuisance parameter maximised numerically (no closed form)."""
    m = n - b - c

    def nll(p21):
        return -(b * math.log(p21 + delta) + c * math.log(p21) + m * math.log(1 - 2 * p21 - delta)
                 if m else b * math.log(p21 + delta) + c * math.log(p21))

    lo, hi = max(0.0, -delta) + 1e-13, (1 - delta) / 2 - 1e-13
    p21 = optimize.minimize_scalar(nll, bounds=(lo, hi), method="bounded",
                                   options={"xatol": 1e-13}).x
    return (b - c - n * delta) / math.sqrt(n * (2 * p21 + delta - delta * delta))


@pytest.mark.parametrize("b, c, n, level", [(6, 16, 161, 0.95), (3, 11, 500, 0.9),
                                            (40, 20, 160, 0.99), (2, 1, 30, 0.95)])
def test_tango_limits_are_where_the_numerically_maximised_score_reaches_z(b, c, n, level):
    z = norm.ppf(0.5 + level / 2)
    low, high = tango_interval(b, c, n, confidence_level=level)
    assert _restricted_score(float(low), b, c, n) == pytest.approx(z, abs=1e-5)
    assert _restricted_score(float(high), b, c, n) == pytest.approx(-z, abs=1e-5)


@pytest.mark.parametrize("n", [1, 5, 40, 1000, 100_000])
def test_all_agree_gives_positive_width_from_the_closed_form(n):
    # b = c = 0: the score is sqrt(n |d| / (1 - |d|)), so the limits are ±z²/(n + z²) (by hand)
    z = norm.ppf(0.975)
    low, high = tango_interval(0, 0, n)
    assert high == pytest.approx(z * z / (n + z * z), rel=1e-9)
    assert low == pytest.approx(-high, rel=1e-12) and high > 0
    lo2, hi2 = newcombe_paired_interval(n, 0, 0, 0)  # all rows concordant, both rates 1
    assert lo2 < 0 < hi2


def test_one_sided_extremes_reach_the_bound_and_small_tables_stay_inside():
    assert tango_interval(5, 0, 5)[1] == 1.0 and tango_interval(0, 5, 5)[0] == -1.0
    for b in range(6):
        for c in range(6 - b):
            low, high = tango_interval(b, c, 6)
            assert -1 <= low < (b - c) / 6 < high <= 1 or (b - c) in (-6, 6)


def test_vectorised_equals_scalar_and_empty_is_nan():
    b, c, n = np.array([0, 3, 9]), np.array([0, 1, 2]), np.array([10, 50, 200])
    low, high = tango_interval(b, c, n)
    for i in range(3):
        assert (low[i], high[i]) == tuple(map(float, tango_interval(b[i], c[i], n[i])))
    assert all(math.isnan(v) for v in tango_interval(0, 0, 0))
    with pytest.raises(ValueError, match="b \\+ c <= n"):
        tango_interval(5, 6, 10)
