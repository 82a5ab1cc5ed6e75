"""One-sided tests of "the slice is worse than the rest", and the matching real-valued interval.

* 0/1 outcomes: the conditional exact test (Fisher's exact test, one-sided). Given the slice's rows
  ``n1``, the rest's ``n2`` and the events in all ``x1 + x2``, the slice's events are hypergeometric
  under "same rate inside and outside"; the p-value is its tail beyond the observed ``x1``. It holds
  its level whatever the sizes and rates (it is conservative through discreteness), unlike the
  pooled z test, whose upper tail is too light for small slices with low rates.
* outcomes in {-1, 0, 1} (the comparison's paired difference): the conditional exact test of the
  slice's sum, given the counts of +1 and -1 in all rows (the slice a random draw of its size:
  the +1s in it hypergeometric, and given them the -1s among the other rows too). Welch's t test
  is anti-conservative there when +1 is the rarer value (measured 9.6 % for a nominal 5 % on a
  1 % slice with 0.5 % +1 and 2 % -1: ``tests/sim/sim_slices.py``, ``welch_level``).
* other real-valued outcomes: Welch's t test with the Welch–Satterthwaite degrees of freedom, from
  the additive sums. Its level is measured, not assumed (``sim_slices.py``, ``welch_level``, 20,000
  rows, a 1 % or 5 % slice): on right-skewed outcomes it holds when the finding is a *higher* mean
  (2.4–4.3 % at a nominal 5 %) but not a *lower* one (5.7–9.7 %), the studentised mean's skew. No
  command-line path uses it (the comparison's paired difference is tested exactly); on the API,
  read such q-values for a lower-is-worse skewed outcome as approximate.

References
----------
Fisher, R. A. (1935). The logic of inductive inference. JRSS 98, 39-82.
Welch, B. L. (1947). The generalization of "Student's" problem when several different population
variances are involved. Biometrika 34, 28-35.
"""

from __future__ import annotations

import numpy as np
from scipy import stats as _sps

__all__ = ["exact_pvalue", "is_ternary", "real_pvalue", "ternary_pvalue", "welch",
           "welch_interval", "welch_pvalue"]


def is_ternary(y) -> bool:
    """Whether a real-valued outcome only takes the values -1, 0 and 1."""
    return bool(np.all((y == -1) | (y == 0) | (y == 1)))


def real_pvalue(s1, sq1, n1, s2, sq2, n2, *, ternary: bool, alternative: str) -> np.ndarray:
    """The one-sided p-value of a real-valued outcome: exact for {-1, 0, 1}, else Welch's."""
    if ternary:
        return ternary_pvalue(s1, sq1, n1, s2, sq2, n2, alternative=alternative)
    return welch_pvalue(*welch(s1, sq1, n1, s2, sq2, n2), alternative=alternative)


def exact_pvalue(x1, n1, x2, n2, *, alternative: str = "greater") -> np.ndarray:
    """One-sided conditional exact (Fisher) p-value of ``x1/n1`` against ``x2/n2``, vectorised.

    ``alternative="greater"``: P(X >= x1), ``"less"``: P(X <= x1), X hypergeometric (population
    ``n1 + n2`` holding ``x1 + x2`` events, ``n1`` drawn). The same as
    ``scipy.stats.fisher_exact([[x1, n1 - x1], [x2, n2 - x2]], alternative=...)``. NaN where a
    group is empty.
    """
    x1, n1, x2, n2 = (np.asarray(v, dtype=float) for v in (x1, n1, x2, n2))
    total, events = n1 + n2, x1 + x2
    empty = (n1 <= 0) | (n2 <= 0)
    m, k, draw = (np.where(empty, 1, v).astype(np.int64) for v in (total, events, n1))
    x = np.where(empty, 0, x1).astype(np.int64)
    if alternative == "greater":
        p = _sps.hypergeom.sf(x - 1, m, k, draw)
    elif alternative == "less":
        p = _sps.hypergeom.cdf(x, m, k, draw)
    else:
        raise ValueError(f"`alternative` must be 'greater' or 'less', got {alternative!r}")
    return np.where(empty, np.nan, np.clip(p, 0.0, 1.0))


def ternary_pvalue(s1, sq1, n1, s2, sq2, n2, *, alternative: str = "greater") -> np.ndarray:
    """One-sided conditional exact p-value of a slice's sum of a {-1, 0, 1} outcome, from the sums
    ``s`` and sums of squares ``sq`` (so +1s = (sq + s) / 2, -1s = (sq - s) / 2) of the slice (1)
    and the rest (2); vectorised over slices.

    P(S >= s) = sum over k of P(k +1s drawn) P(-1s drawn <= k - s | k), both hypergeometric.
    """
    out = []
    for a, b, n, c, d, m in zip(*np.broadcast_arrays(
            *(np.atleast_1d(np.asarray(v, dtype=float)) for v in (s1, sq1, n1, s2, sq2, n2)))):
        N, plus, minus = n + m, round((b + a + d + c) / 2), round((b - a + d - c) / 2)
        s, n = round(a), int(n)
        k = np.arange(0, min(n, plus) + 1)
        pk = _sps.hypergeom.pmf(k, int(N), plus, n)
        if alternative == "greater":
            tail = _sps.hypergeom.cdf(k - s, int(N) - plus, minus, n - k)
        else:
            tail = _sps.hypergeom.sf(k - s - 1, int(N) - plus, minus, n - k)
        out.append(min(float(np.sum(pk * tail)), 1.0) if n > 0 and m > 0 else np.nan)
    return np.array(out)


def welch(s1, sq1, n1, s2, sq2, n2):
    """Welch's mean difference, its standard error and Satterthwaite degrees of freedom, from the
    sums ``s``, sums of squares ``sq`` and counts ``n`` of the two groups (vectorised)."""
    s1, sq1, n1, s2, sq2, n2 = (np.asarray(v, dtype=float) for v in (s1, sq1, n1, s2, sq2, n2))
    with np.errstate(invalid="ignore", divide="ignore"):
        a = np.maximum(sq1 - s1 * s1 / n1, 0.0) / (n1 - 1) / n1  # var of the mean, group 1
        b = np.maximum(sq2 - s2 * s2 / n2, 0.0) / (n2 - 1) / n2
        se = np.sqrt(a + b)
        df = (a + b) ** 2 / (a * a / (n1 - 1) + b * b / (n2 - 1))
        return s1 / n1 - s2 / n2, se, df


def welch_pvalue(diff, se, df, *, alternative: str = "greater") -> np.ndarray:
    """One-sided Welch p-value; 1 where there is no spread at all (no evidence either way)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        t = diff / se
    p = _sps.t.sf(t, df) if alternative == "greater" else _sps.t.cdf(t, df)
    return np.where(se > 0, p, 1.0)


def welch_interval(diff, se, df, confidence_level):
    """Two-sided Welch interval of the mean difference (``diff`` where there is no spread)."""
    with np.errstate(invalid="ignore"):
        half = _sps.t.ppf(0.5 + confidence_level / 2, np.where(se > 0, df, 1.0)) * se
    half = np.where(se > 0, half, 0.0)
    return diff - half, diff + half
