"""Properties that must hold for every input (hypothesis), checked against independent computations."""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats as sps

from probe.groups import group_metrics
from probe.stats import bh_adjust, newcombe_interval, ratio_interval, wilson_interval

PROFILE = settings(max_examples=200, deadline=None, derandomize=True)
counts = st.integers(1, 400).flatmap(lambda n: st.tuples(st.integers(0, n), st.just(n)))


@PROFILE
@given(counts, st.sampled_from([0.8, 0.9, 0.95, 0.99]))
def test_wilson_contains_the_rate_and_matches_scipy(xn, level):
    x, n = xn
    low, high = wilson_interval(x, n, confidence_level=level)
    assert 0.0 <= low <= x / n <= high <= 1.0
    ci = sps.binomtest(x, n).proportion_ci(confidence_level=level, method="wilson")  # reference
    assert abs(low - ci.low) < 1e-9 and abs(high - ci.high) < 1e-9


@PROFILE
@given(counts, counts)
def test_newcombe_and_ratio_intervals_contain_their_estimates(a, b):
    (x1, n1), (x2, n2) = a, b
    d_low, d_high = newcombe_interval(x1, n1, x2, n2)
    d = x1 / n1 - x2 / n2
    assert -1.0 - 1e-12 <= d_low <= d + 1e-12 and d - 1e-12 <= d_high <= 1.0 + 1e-12
    if x2 > 0:
        r_low, r_high = ratio_interval(x1, n1, x2, n2)
        r = (x1 / n1) / (x2 / n2)
        assert 0.0 <= r_low <= r * (1 + 1e-9) + 1e-12 and r * (1 - 1e-9) - 1e-12 <= r_high


@PROFILE
@given(st.lists(st.floats(0.0, 1.0), min_size=1, max_size=60))
def test_bh_q_values_equal_scipy_and_keep_the_order_of_p(p):
    q = bh_adjust(p)
    np.testing.assert_allclose(q, sps.false_discovery_control(p), atol=1e-12)  # reference
    order = np.argsort(p, kind="stable")
    assert np.all(np.diff(q[order]) >= -1e-12) and np.all(q >= np.asarray(p) - 1e-12)


@pytest.mark.filterwarnings("ignore::probe.errors.DegenerateWarning")  # nobody selected: NaN ratios
@PROFILE
@given(st.lists(st.tuples(st.sampled_from("abc"), st.booleans(), st.booleans()), min_size=2,
                max_size=120))
def test_group_rates_equal_direct_counts_and_the_best_group_is_the_reference(rows):
    frame = pd.DataFrame({"g": [r[0] for r in rows]})
    y_true = np.array([r[1] for r in rows])
    y_pred = np.array([r[2] for r in rows])
    m = group_metrics(frame, y_true, y_pred, attributes=["g"], min_share=0.0)
    for row in m.rows:
        mask = frame["g"].to_numpy() == row.group
        assert row.rows == mask.sum()
        assert row.selection_rate.value == y_pred[mask].mean()
        assert row.error_rate.value == (y_pred[mask] != y_true[mask]).mean()
    best = max(r.selection_rate.value for r in m.rows)
    if best > 0:
        ref = next(r for r in m.rows if r.group == r.reference_group)
        assert ref.selection_rate.value == best and ref.impact_ratio.value == 1.0
        assert all(r.four_fifths_flag == (r.selection_rate.value / best < 0.8) for r in m.rows)
