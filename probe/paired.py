"""Confidence intervals for the difference of two paired proportions (the same rows, two 0/1 outcomes).

The rows fall into a 2x2 table ``[[a, b], [c, d]]``: ``a`` both outcomes, ``b`` only the first, ``c``
only the second, ``d`` neither. The difference of the two rates is ``(b - c) / n``. Two closed forms,
neither of zero width when ``b = c = 0``:

- Tango's asymptotic score interval (Tango 1998): the score statistic for ``delta`` with the
  nuisance parameter at its closed-form restricted maximum-likelihood value, inverted numerically
  (``scipy.optimize.brentq``). It depends only on ``b``, ``c`` and ``n``. This is what probe reports.
- Newcombe's square-and-add interval for paired data (Newcombe 1998, method 10): the two marginal
  Wilson intervals combined with the correlation ``phi`` (corrected as Newcombe prescribes).

References
----------
Tango, T. (1998). Equivalence test and confidence interval for the difference in proportions for the
paired-sample design. Statistics in Medicine 17, 891-908.
Newcombe, R. G. (1998). Improved confidence intervals for the difference between binomial proportions
based on paired data. Statistics in Medicine 17, 2635-2650.
Fagerland, M. W., Lydersen, S. & Laake, P. (2017). Statistical Analysis of Contingency Tables, ch. 8.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import brentq

from .stats import Estimate, wilson_interval, z_value

__all__ = ["tango_interval", "newcombe_paired_interval", "paired_difference"]

# brentq's bracket stops this far inside [-1, 1], where the score's variance can vanish
_EDGE = 1e-12


def _tango_score(delta: float, b: float, c: float, n: float) -> float:
    """Tango's score statistic ``(b - c - n delta) / sqrt(n (2 p21 + delta (1 - delta)))``."""
    A = 2.0 * n
    B = -b - c + (2.0 * n - b + c) * delta
    C = -c * delta * (1.0 - delta)
    p21 = (math.sqrt(max(B * B - 4.0 * A * C, 0.0)) - B) / (2.0 * A)
    var = n * (2.0 * p21 + delta * (1.0 - delta))
    num = b - c - n * delta
    if var <= 0.0:
        return 0.0 if num == 0 else math.copysign(math.inf, num)
    return num / math.sqrt(var)


def _tango_one(b: float, c: float, n: float, z: float) -> tuple[float, float]:
    if n == 0:
        return math.nan, math.nan
    d = (b - c) / n
    out = []
    for target, lo, hi in ((z, -1.0 + _EDGE, d), (-z, d, 1.0 - _EDGE)):
        # the score falls as delta rises; the limit is the endpoint if the score never reaches ±z
        edge = lo if target > 0 else hi
        if lo >= hi or (_tango_score(edge, b, c, n) - target) * (1 if target > 0 else -1) <= 0:
            out.append(-1.0 if target > 0 else 1.0)
            continue
        out.append(brentq(lambda x: _tango_score(x, b, c, n) - target, lo, hi, xtol=1e-12,
                          rtol=1e-12, maxiter=200))
    return out[0], out[1]


def tango_interval(b, c, n, *, confidence_level: float = 0.95):
    """Tango's score interval for the paired difference ``(b - c) / n``, elementwise.

    Parameters
    ----------
    b, c : array_like of float
        Discordant counts: rows with only the first outcome, rows with only the second (whole
        numbers, or effective counts under a sampling design: :mod:`probe.compare`).
    n : array_like of float
        All rows (``b + c <= n``).
    confidence_level : float, default=0.95

    Returns
    -------
    low, high : ndarray
        NaN where ``n == 0``.

    Notes
    -----
    For a trial value ``delta`` the restricted MLE of the second discordant cell's probability is
    ``p21 = (sqrt(B² - 4AC) - B) / (2A)`` with ``A = 2n``, ``B = -b - c + (2n - b + c) delta`` and
    ``C = -c delta (1 - delta)``; the limits are the ``delta`` where the score equals ``±z`` (Tango 1998;
    Fagerland et al. 2017, sec. 8.5).

    Examples
    --------
    >>> low, high = tango_interval(6, 16, 161)   # Cavo et al., Fagerland et al. (2017) ch. 8
    >>> round(float(low), 4), round(float(high), 4)
    (-0.124, -0.0054)
    """
    z = z_value(confidence_level)
    b, c, n = np.broadcast_arrays(*(np.asarray(v, dtype=np.float64) for v in (b, c, n)))
    if np.any(b < 0) or np.any(c < 0) or np.any(b + c > n * (1 + 1e-12)):
        raise ValueError("counts must satisfy 0 <= b, c and b + c <= n")
    low, high = np.empty(b.shape), np.empty(b.shape)
    for i in np.ndindex(b.shape):
        low[i], high[i] = _tango_one(float(b[i]), float(c[i]), float(n[i]), z)
    return low, high


def newcombe_paired_interval(a, b, c, d, *, confidence_level: float = 0.95):
    """Newcombe's square-and-add interval for the paired difference ``(b - c) / n``, vectorised.

    Parameters
    ----------
    a, b, c, d : array_like of int
        The 2x2 table ``[[a, b], [c, d]]``: the first outcome's rate is ``(a + b) / n`` and the
        second's ``(a + c) / n``.
    confidence_level : float, default=0.95

    Returns
    -------
    low, high : ndarray
        NaN where the table is empty.

    Notes
    -----
    With Wilson limits ``(l1, u1)``, ``(l2, u2)`` of the two marginal rates and
    ``phi = C / sqrt((a+b)(c+d)(a+c)(b+d))``, where ``C = ad - bc - n/2`` if ``ad - bc > n/2``,
    ``0`` if ``0 <= ad - bc <= n/2`` and ``ad - bc`` otherwise (``phi = 0`` when a margin is empty)::

        low  = D - sqrt((p1-l1)² - 2 phi (p1-l1)(u2-p2) + (u2-p2)²)
        high = D + sqrt((u1-p1)² - 2 phi (u1-p1)(p2-l2) + (p2-l2)²)

    (Newcombe 1998, method 10.)
    """
    a, b, c, d = (np.asarray(v, dtype=float) for v in (a, b, c, d))
    n = a + b + c + d
    x1, x2 = a + b, a + c
    l1, u1 = wilson_interval(x1, n, confidence_level=confidence_level)
    l2, u2 = wilson_interval(x2, n, confidence_level=confidence_level)
    with np.errstate(invalid="ignore", divide="ignore"):
        p1, p2 = x1 / n, x2 / n
        cross = a * d - b * c
        corrected = np.where(cross > n / 2, cross - n / 2, np.where(cross >= 0, 0.0, cross))
        margins = (a + b) * (c + d) * (a + c) * (b + d)
        phi = np.where(margins > 0, corrected / np.sqrt(np.where(margins > 0, margins, 1.0)), 0.0)
        e1, f2 = p1 - l1, u2 - p2
        f1, e2 = u1 - p1, p2 - l2
        diff = p1 - p2
        low = diff - np.sqrt(np.maximum(e1 * e1 - 2 * phi * e1 * f2 + f2 * f2, 0.0))
        high = diff + np.sqrt(np.maximum(f1 * f1 - 2 * phi * f1 * e2 + e2 * e2, 0.0))
    return low, high


def paired_difference(b: float, c: float, n: float, *, confidence_level: float = 0.95) -> Estimate:
    """The paired difference ``(b - c) / n`` with Tango's score interval (method ``"tango-score"``);
    effective counts (floats) are taken as they are."""
    low, high = tango_interval(b, c, n, confidence_level=confidence_level)
    value = (b - c) / n if n else math.nan
    return Estimate(value, float(low), float(high), "tango-score")
