"""The slice search's tests, listing and interface: exact p-values against scipy, the share cap,
intervals at any level, the no-split flag and the candidates note."""

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps

from probe.slices import find_slices, search_slices
from probe.slices.bounds import lattice_size
from probe.slices.pvalues import exact_pvalue
from probe.stats import newcombe_interval, wilson_interval


@pytest.mark.parametrize("x1, n1, x2, n2", [
    (31, 104, 2969, 19896),  # the small-slice, low-rate case where the pooled z test gives 1.1e-5
    (0, 40, 300, 2000), (40, 40, 10, 100), (5, 30, 5, 30), (1, 2, 0, 3), (120, 900, 800, 9100),
])
@pytest.mark.parametrize("alternative", ["greater", "less"])
def test_exact_pvalue_is_scipys_fisher_exact(x1, n1, x2, n2, alternative):
    ref = sps.fisher_exact([[x1, n1 - x1], [x2, n2 - x2]], alternative=alternative).pvalue
    assert exact_pvalue(x1, n1, x2, n2, alternative=alternative) == pytest.approx(ref, rel=1e-9)


def test_exact_pvalue_of_the_small_low_rate_slice():
    # 31/104 against 2,969/19,896: Fisher's exact one-sided p = 8.9e-5 (scipy), not the z test's
    assert exact_pvalue(31, 104, 2969, 19896) == pytest.approx(8.9e-5, rel=0.01)
    assert np.isnan(exact_pvalue(0, 0, 3, 10))


@pytest.mark.parametrize("alternative", ["greater", "less"])
def test_ternary_pvalue_is_the_exact_permutation_tail(alternative):
    from itertools import combinations

    from probe.slices.pvalues import ternary_pvalue

    y = np.array([1, 1, 1, -1, -1, -1, -1, 0, 0, 0, 0, 0, 0, 0], dtype=float)
    slice_rows = [0, 1, 3, 7, 8]
    s = y[slice_rows].sum()
    sums = np.array([y[list(c)].sum() for c in combinations(range(len(y)), len(slice_rows))])
    ref = np.mean(sums >= s) if alternative == "greater" else np.mean(sums <= s)  # enumeration
    rest = np.delete(y, slice_rows)
    p = ternary_pvalue(s, (y[slice_rows] ** 2).sum(), 5, rest.sum(), (rest ** 2).sum(), 9,
                       alternative=alternative)
    assert p[0] == pytest.approx(ref, rel=1e-9)


def test_lattice_size_counts_every_slice_by_enumeration():
    from itertools import combinations

    levels = [3, 5, 2, 7, 4]
    brute = sum(int(np.prod(c)) for d in (1, 2, 3) for c in combinations(levels, d))
    assert lattice_size(levels, 3) == brute


def _planted(seed=0, n=8000):
    r = np.random.default_rng(seed)
    X = pd.DataFrame({"a": r.choice(list("pqrs"), n, p=[0.5, 0.3, 0.1, 0.1]),
                      "b": r.choice(list("uvw"), n), "c": r.normal(size=n)})
    y = r.random(n) < 0.5
    wrong = r.random(n) < np.where((X.a == "r") & (X.b == "u"), 0.45, 0.12)
    return X, y, y ^ wrong


def test_rate_and_gap_at_any_level_are_the_closed_form_intervals():
    X, y, pred = _planted()
    res = find_slices(X, y, pred, depth=2)
    s = res.found[0]
    assert s.gap_at(0.95) == s.gap and s.rate_at(0.95) == s.rate  # the reported ones
    # the rest's counts on the estimate part: its rows, and its rate from the slice's rate and gap
    rest_rows = res.estimate_rows - s.rows
    x_rest = round((s.rate.value - s.gap.value) * rest_rows)
    for level in (0.9, 0.99, 0.999):
        low, high = newcombe_interval(s.events, s.rows, x_rest, rest_rows, confidence_level=level)
        g = s.gap_at(level)
        assert (g.low, g.high, g.method) == (pytest.approx(low), pytest.approx(high), "newcombe")
        rl, rh = wilson_interval(s.events, s.rows, confidence_level=level)
        r = s.rate_at(level)
        assert (r.low, r.high) == (pytest.approx(rl), pytest.approx(rh))
    assert s.gap_at(0.999).low < s.gap.low < s.gap_at(0.9).low  # wider at a higher level


def test_bootstrap_intervals_at_another_level_widen_with_it():
    X, y, pred = _planted(1)
    s = find_slices(X, y, pred, depth=2, interval="bootstrap").found[0]
    assert s.gap_at(0.95) == s.gap and s.gap.method.startswith("bootstrap")
    g90, g99 = s.gap_at(0.90), s.gap_at(0.99)
    assert g90.method.startswith("bootstrap") and g99.low < s.gap.low < g90.low
    assert g90.high < s.gap.high < g99.high


def test_share_cap_excludes_large_slices_and_no_split_is_flagged():
    r = np.random.default_rng(2)
    n = 4000
    X = pd.DataFrame({"a": r.choice(list("pq"), n, p=[0.7, 0.3])})
    wrong = (r.random(n) < np.where(X.a == "p", 0.3, 0.1)).astype(float)  # the 70 % level is bad
    capped = search_slices(X, wrong, depth=1, split=False)
    assert capped.found == () and capped.selected and capped.family == 1  # only a = q is scored
    full = search_slices(X, wrong, depth=1, split=False, max_share=0.8)
    assert [s.label for s in full.found] == ["a = p"] and full.significant == 1
    assert full.to_dict()["selected"] is True and full.to_dict()["family"] == 2


def test_nothing_significant_labels_the_list_as_candidates():
    r = np.random.default_rng(3)
    n = 3000
    X = pd.DataFrame({"a": r.choice(list("pqrst"), n), "b": r.choice(list("uvw"), n)})
    y = r.random(n) < 0.5
    res = find_slices(X, y, y ^ (r.random(n) < 0.2), depth=2, rng=3)  # null data
    assert res.found and res.significant == 0 and not res.selected
    assert any("candidates" in note for note in res.notes)
    assert all(s.gap.value > 0 for s in res.found)  # listed: worse than the rest
