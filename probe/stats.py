"""Intervals, tests and multiple-testing control, as pure vectorised functions.

Every rate probe reports travels with its interval as an :class:`Estimate`. The closed forms used:

- a single proportion: the Wilson score interval (Newcombe 1998a, method 3);
- a difference of two independent proportions: Newcombe's hybrid score interval, built from the two
  Wilson intervals (Newcombe 1998b, method 10);
- a ratio of two independent proportions (the impact ratio): the MOVER-R interval of Donner & Zou
  (2012), also built from the two Wilson intervals, so the three agree with each other;
- two independent proportions compared: the pooled two-proportion z test; paired 0/1 outcomes: the
  exact McNemar test;
- many p-values: the Benjamini–Hochberg step-up adjustment (q-values);
- anything else: a seeded, vectorised bootstrap (:mod:`probe.bootstrap`).

Degenerate inputs (an empty group, a zero reference rate) give NaN with a :class:`DegenerateWarning`.

References
----------
Newcombe, R. G. (1998a). Two-sided confidence intervals for the single proportion: comparison of seven
methods. Statistics in Medicine 17, 857-872.
Newcombe, R. G. (1998b). Interval estimation for the difference between independent proportions:
comparison of eleven methods. Statistics in Medicine 17, 873-890.
Donner, A. & Zou, G. Y. (2012). Closed-form confidence intervals for functions of the normal mean and
standard deviation. Statistical Methods in Medical Research 21, 347-359.
Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery rate. JRSS-B 57, 289-300.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
from scipy import special
from scipy import stats as _sps

from .errors import DegenerateWarning
from .values import json_number

__all__ = [
    "Estimate",
    "z_value",
    "wilson_interval",
    "wilson",
    "newcombe_interval",
    "newcombe",
    "ratio_interval",
    "impact_ratio",
    "two_proportion_pvalue",
    "mcnemar_pvalue",
    "bh_adjust",
    "mean_interval",
]


@dataclass(frozen=True)
class Estimate:
    """A point estimate with its confidence interval and the method that made it.

    Attributes
    ----------
    value : float
        The point estimate (NaN when undefined).
    low, high : float
        The interval's ends (NaN when undefined).
    method : str
        How the interval was computed, e.g. ``"wilson"``, ``"newcombe"``, ``"mover-wilson"``,
        ``"bootstrap-percentile"``, ``"bootstrap-bca"``.
    n_effective : float or None
        The effective sample size the interval was computed on, under row weights, clusters or
        membership probabilities (:mod:`probe.design`); None for a plain sample.
    """

    value: float
    low: float
    high: float
    method: str
    n_effective: float | None = None

    def to_dict(self) -> dict:
        """The report's estimate object; NaN becomes ``None`` (JSON null)."""
        return {
            "value": json_number(self.value),
            "low": json_number(self.low),
            "high": json_number(self.high),
            "method": self.method,
            **({} if self.n_effective is None else {"n_effective": json_number(self.n_effective)}),
        }

    def excludes(self, bound: float) -> bool:
        """True when the whole interval lies strictly on one side of ``bound``."""
        return bool(self.low > bound or self.high < bound)


def z_value(confidence_level: float = 0.95) -> float:
    """The two-sided standard normal quantile for ``confidence_level`` (1.959964 for 0.95)."""
    if not 0.0 < confidence_level < 1.0:
        raise ValueError(
            f"`confidence_level` must lie strictly between 0 and 1, got {confidence_level!r}"
        )
    return float(special.ndtri(0.5 + confidence_level / 2.0))


def _as_counts(x, n):
    x = np.asarray(x, dtype=float)
    n = np.asarray(n, dtype=float)
    if np.any(x < 0) or np.any(x > n):
        raise ValueError("counts must satisfy 0 <= x <= n")
    return x, n


def wilson_interval(x, n, *, confidence_level: float = 0.95):
    """Wilson score interval for the proportion ``x / n``, vectorised.

    Parameters
    ----------
    x, n : array_like
        Successes and trials; broadcast together.
    confidence_level : float, default=0.95

    Returns
    -------
    low, high : ndarray
        NaN where ``n == 0``.

    Notes
    -----
    ``(p + z²/2n ± z sqrt(p(1-p)/n + z²/4n²)) / (1 + z²/n)`` (Newcombe 1998a, method 3).
    """
    x, n = _as_counts(x, n)
    z = z_value(confidence_level)
    with np.errstate(invalid="ignore", divide="ignore"):
        p = x / n
        denom = 1.0 + z * z / n
        centre = (p + z * z / (2.0 * n)) / denom
        half = z * np.sqrt(p * (1.0 - p) / n + z * z / (4.0 * n * n)) / denom
        low = np.where(x == 0, 0.0, centre - half)
        high = np.where(x == n, 1.0, centre + half)
    empty = n == 0
    low = np.where(empty, np.nan, low)
    high = np.where(empty, np.nan, high)
    return low, high


def wilson(x: float, n: float, *, confidence_level: float = 0.95) -> Estimate:
    """The proportion ``x / n`` with its Wilson interval; NaN with a warning when ``n == 0``."""
    if n == 0:
        warnings.warn("proportion of an empty group is undefined", DegenerateWarning, stacklevel=2)
        return Estimate(math.nan, math.nan, math.nan, "wilson")
    low, high = wilson_interval(x, n, confidence_level=confidence_level)
    return Estimate(float(x) / float(n), float(low), float(high), "wilson")


def _two_wilson(x1, n1, x2, n2, confidence_level):
    """Counts, rates and Wilson limits of two groups: what the MOVER-type intervals combine."""
    out = []
    for x, n in ((x1, n1), (x2, n2)):
        x, n = _as_counts(x, n)
        low, high = wilson_interval(x, n, confidence_level=confidence_level)
        with np.errstate(invalid="ignore", divide="ignore"):
            out.append((x, n, x / n, low, high))
    return out


def newcombe_interval(x1, n1, x2, n2, *, confidence_level: float = 0.95, rho=0.0):
    """Newcombe's hybrid score interval for ``x1/n1 - x2/n2``, vectorised.

    Returns ``(low, high)``; NaN where either group is empty. ``rho`` is the correlation of the
    two estimates: 0 for independent samples; under a sampling design whose groups share units
    (a cluster in both, a row counted in two groups by its membership probabilities) it comes
    from the design (:meth:`probe.design.CellEffective.correlation`).

    Notes
    -----
    With Wilson limits ``(l1, u1)`` and ``(l2, u2)``:
    ``low = d - sqrt((p1 - l1)² - 2 rho (p1 - l1)(u2 - p2) + (u2 - p2)²)``,
    ``high = d + sqrt((u1 - p1)² - 2 rho (u1 - p1)(p2 - l2) + (p2 - l2)²)``
    (Newcombe 1998b, method 10, for ``rho = 0``; the correlated form is the MOVER of Zou & Donner
    2008, as Newcombe 1998c uses it for paired data; recalled from memory).
    """
    (x1, n1, p1, l1, u1), (x2, n2, p2, l2, u2) = _two_wilson(x1, n1, x2, n2, confidence_level)
    with np.errstate(invalid="ignore", divide="ignore"):
        d = p1 - p2
        low = d - np.sqrt((p1 - l1) ** 2 - 2 * rho * (p1 - l1) * (u2 - p2) + (u2 - p2) ** 2)
        high = d + np.sqrt((u1 - p1) ** 2 - 2 * rho * (u1 - p1) * (p2 - l2) + (p2 - l2) ** 2)
    return low, high


def newcombe(x1, n1, x2, n2, *, confidence_level: float = 0.95) -> Estimate:
    """The difference ``x1/n1 - x2/n2`` with Newcombe's interval; NaN if a group is empty."""
    if n1 == 0 or n2 == 0:
        warnings.warn("difference with an empty group is undefined", DegenerateWarning, stacklevel=2)
        return Estimate(math.nan, math.nan, math.nan, "newcombe")
    low, high = newcombe_interval(x1, n1, x2, n2, confidence_level=confidence_level)
    return Estimate(x1 / n1 - x2 / n2, float(low), float(high), "newcombe")


def ratio_interval(x1, n1, x2, n2, *, confidence_level: float = 0.95, rho=0.0):
    """MOVER-R interval for the ratio of proportions ``(x1/n1) / (x2/n2)``, vectorised.

    Returns ``(low, high)``; NaN where a group is empty or the denominator rate is zero.
    ``high`` is ``inf`` when the denominator's lower Wilson limit is zero. ``rho``: the correlation
    of the two estimates, as in :func:`newcombe_interval`.

    Notes
    -----
    Donner & Zou (2012), eq. for a ratio of two parameters with limits ``(l1, u1)``, ``(l2, u2)``::

        low  = (p1 p2 - sqrt((p1 p2)² - l1 u2 (2 p1 - l1)(2 p2 - u2))) / (u2 (2 p2 - u2))
        high = (p1 p2 + sqrt((p1 p2)² - u1 l2 (2 p1 - u1)(2 p2 - l2))) / (l2 (2 p2 - l2))

    With correlated estimates, the same derivation (the limit ``L`` solves ``p1 - L p2 = 0`` at the
    MOVER limit of the difference ``p1 - L p2``, whose variance carries ``-2 rho L``) replaces the
    ``p1 p2`` outside the square root and inside it by ``p1 p2 - rho (p1 - l1)(u2 - p2)`` for
    ``low`` and ``p1 p2 - rho (u1 - p1)(p2 - l2)`` for ``high`` (derived here; equal to the
    above at ``rho = 0``).
    """
    (x1, n1, p1, l1, u1), (x2, n2, p2, l2, u2) = _two_wilson(x1, n1, x2, n2, confidence_level)
    with np.errstate(invalid="ignore", divide="ignore"):
        pp = p1 * p2
        b_low = pp - rho * (p1 - l1) * (u2 - p2)
        b_high = pp - rho * (u1 - p1) * (p2 - l2)
        low_disc = np.maximum(b_low * b_low - l1 * u2 * (2 * p1 - l1) * (2 * p2 - u2), 0.0)
        high_disc = np.maximum(b_high * b_high - u1 * l2 * (2 * p1 - u1) * (2 * p2 - l2), 0.0)
        low = (b_low - np.sqrt(low_disc)) / (u2 * (2 * p2 - u2))
        high_den = l2 * (2 * p2 - l2)
        high = np.where(high_den > 0, (b_high + np.sqrt(high_disc))
                        / np.where(high_den > 0, high_den, 1), np.inf)
        low = np.maximum(low, 0.0)
    bad = (n1 == 0) | (n2 == 0) | (x2 == 0)
    return np.where(bad, np.nan, low), np.where(bad, np.nan, high)


def impact_ratio(x1, n1, x2, n2, *, confidence_level: float = 0.95) -> Estimate:
    """The ratio of rates ``(x1/n1) / (x2/n2)`` with its MOVER-R (Wilson) interval.

    NaN with a :class:`DegenerateWarning` when a group is empty or the reference rate is zero.
    """
    if n1 == 0 or n2 == 0 or x2 == 0:
        warnings.warn(
            "impact ratio is undefined: empty group or zero reference rate",
            DegenerateWarning,
            stacklevel=2,
        )
        return Estimate(math.nan, math.nan, math.nan, "mover-wilson")
    low, high = ratio_interval(x1, n1, x2, n2, confidence_level=confidence_level)
    return Estimate((x1 / n1) / (x2 / n2), float(low), float(high), "mover-wilson")


def two_proportion_pvalue(x1, n1, x2, n2, *, alternative: str = "two-sided"):
    """Pooled two-proportion z test of ``p1 = p2``, vectorised.

    ``alternative`` is ``"two-sided"``, ``"greater"`` (p1 > p2) or ``"less"``. Where the pooled rate is
    0 or 1 (no variation at all) the p-value is 1.
    """
    if alternative not in ("two-sided", "greater", "less"):
        raise ValueError(
            f"`alternative` must be 'two-sided', 'greater' or 'less', got {alternative!r}"
        )
    x1, n1 = _as_counts(x1, n1)
    x2, n2 = _as_counts(x2, n2)
    with np.errstate(invalid="ignore", divide="ignore"):
        pooled = (x1 + x2) / (n1 + n2)
        se = np.sqrt(pooled * (1 - pooled) * (1 / n1 + 1 / n2))
        z = (x1 / n1 - x2 / n2) / se
    if alternative == "two-sided":
        p = 2 * special.ndtr(-np.abs(z))
    elif alternative == "greater":
        p = special.ndtr(-z)
    else:
        p = special.ndtr(z)
    p = np.where(se > 0, p, 1.0)
    p = np.where((n1 == 0) | (n2 == 0), np.nan, p)
    return np.clip(p, 0.0, 1.0)


def mcnemar_pvalue(b: int, c: int) -> float:
    """Exact (binomial) McNemar test on the discordant counts ``b`` and ``c``; two-sided."""
    b, c = int(b), int(c)
    if b + c == 0:
        return 1.0
    return float(_sps.binomtest(b, b + c, 0.5).pvalue)


def bh_adjust(p_values) -> np.ndarray:
    """Benjamini–Hochberg adjusted p-values (q-values), in the input's order.

    ``q_(i) = min_{j >= i} m p_(j) / j``, capped at 1. NaN p-values are left NaN and do not count
    towards ``m``.
    """
    p = np.asarray(p_values, dtype=float)
    q = np.full(p.shape, np.nan)
    ok = ~np.isnan(p)
    m = int(ok.sum())
    if m == 0:
        return q
    pv = p[ok]
    order = np.argsort(pv, kind="stable")
    ranked = pv[order] * m / np.arange(1, m + 1)
    adjusted = np.minimum.accumulate(ranked[::-1])[::-1]
    out = np.empty(m)
    out[order] = np.minimum(adjusted, 1.0)
    q[ok] = out
    return q


def mean_interval(d, critical: float, method: str, *, low: float = -1.0, high: float = 1.0,
                  what: str = "a mean") -> Estimate:
    """Mean of ``d`` with ``mean ± critical · sd / sqrt(n)``, kept within ``[low, high]``.

    ``critical`` is the caller's quantile (a t quantile with ``n - 1`` degrees of freedom, or z).
    Fewer than two values give NaN bounds and a :class:`DegenerateWarning`.
    """
    d = np.asarray(d, dtype=float)
    n = len(d)
    if n < 2:
        warnings.warn(f"{what} needs at least two rows for an interval", DegenerateWarning,
                      stacklevel=3)
        return Estimate(float(d.mean()) if n else math.nan, math.nan, math.nan, method)
    mean = float(d.mean())
    half = critical * float(d.std(ddof=1)) / math.sqrt(n)
    return Estimate(mean, max(mean - half, low), min(mean + half, high), method)
