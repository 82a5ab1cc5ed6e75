"""A seeded, vectorised bootstrap of any statistic: percentile, or BCa with the jackknife
acceleration.

References
----------
Efron, B. & Tibshirani, R. (1993). An Introduction to the Bootstrap, ch. 14 (BCa).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np
from scipy import special

from .errors import DegenerateWarning
from .stats import Estimate, z_value

__all__ = ["BootstrapResult", "bootstrap", "jackknife_values"]


@dataclass(frozen=True)
class BootstrapResult:
    """A bootstrap estimate and the raw material behind it.

    Attributes
    ----------
    estimate : Estimate
        The statistic on the data with its interval (method ``bootstrap-bca`` or
        ``bootstrap-percentile``).
    distribution : ndarray
        The statistic on each resample (read-only), so a user can re-derive.
    standard_error : float
        The standard deviation of ``distribution``.
    """

    estimate: Estimate
    distribution: np.ndarray
    standard_error: float


def bootstrap(
    data: Sequence[np.ndarray],
    statistic: Callable[..., np.ndarray],
    *,
    n_resamples: int = 2000,
    method: str = "bca",
    confidence_level: float = 0.95,
    rng=None,
    batch: int | None = None,
) -> BootstrapResult:
    """Seeded, vectorised nonparametric bootstrap of a statistic of paired samples.

    Parameters
    ----------
    data : sequence of 1-d arrays of equal length
        Resampled together (paired): row ``i`` of every array moves as one.
    statistic : callable
        ``statistic(*arrays, axis=-1)`` returning the statistic along the last axis, so a whole batch of
        resamples is evaluated in one call.
    n_resamples : int, default=2000
    method : {"bca", "percentile"}, default="bca"
        BCa falls back to percentile (with a :class:`DegenerateWarning`) when it is not defined: a
        degenerate bootstrap distribution or a jackknife with no spread.
    confidence_level : float, default=0.95
    rng : None, int or numpy.random.Generator
    batch : int, optional
        Resamples evaluated per call, to bound memory (default: all at once up to ~2e7 cells).

    Returns
    -------
    BootstrapResult
    """
    if method not in ("bca", "percentile"):
        raise ValueError(f"`method` must be 'bca' or 'percentile', got {method!r}")
    arrays = [np.asarray(a) for a in data]
    n = len(arrays[0])
    if n == 0 or any(len(a) != n for a in arrays):
        raise ValueError("`data` must be non-empty arrays of equal length")
    rng = np.random.default_rng(rng)
    z = z_value(confidence_level)
    observed = float(statistic(*arrays, axis=-1))
    if batch is None:
        batch = max(1, min(n_resamples, int(2e7 // max(n, 1))))
    dist = np.empty(n_resamples)
    for start in range(0, n_resamples, batch):
        stop = min(start + batch, n_resamples)
        idx = rng.integers(0, n, size=(stop - start, n))
        dist[start:stop] = statistic(*(a[idx] for a in arrays), axis=-1)
    alpha = (1 - confidence_level) / 2
    used = "bootstrap-percentile"
    lo_q, hi_q = alpha, 1 - alpha
    if method == "bca":
        bca = _bca_quantiles(arrays, statistic, observed, dist, z)
        if bca is None:
            warnings.warn(
                "BCa interval is not defined here (degenerate bootstrap or jackknife); "
                "using the percentile interval",
                DegenerateWarning,
                stacklevel=2,
            )
        else:
            lo_q, hi_q = bca
            used = "bootstrap-bca"
    low, high = np.quantile(dist, [lo_q, hi_q])
    dist.setflags(write=False)
    return BootstrapResult(
        Estimate(observed, float(low), float(high), used), dist, float(np.std(dist, ddof=1))
    )


def _bca_quantiles(arrays, statistic, observed, dist, z):
    below = np.mean(dist < observed) + 0.5 * np.mean(dist == observed)
    if not 0.0 < below < 1.0:
        return None
    z0 = special.ndtri(below)
    theta_jack = jackknife_values(arrays, statistic)
    d = theta_jack.mean() - theta_jack
    denom = 6.0 * np.sum(d * d) ** 1.5
    if denom == 0 or not np.isfinite(denom):
        return None
    a = np.sum(d**3) / denom
    out = []
    for zq in (-z, z):
        adj = z0 + (z0 + zq) / (1 - a * (z0 + zq))
        out.append(float(special.ndtr(adj)))
    return tuple(out)


def jackknife_values(arrays: Sequence[np.ndarray], statistic) -> np.ndarray:
    """The statistic with each row left out in turn (vectorised in blocks of rows)."""
    n = len(arrays[0])
    out = np.empty(n)
    block = max(1, int(2e7 // max(n, 1)))
    base = np.arange(n)
    for start in range(0, n, block):
        stop = min(start + block, n)
        rows = np.arange(start, stop)
        # row r of `idx` is 0..n-1 without r: take base[:n-1], shift by one from position r on
        idx = np.broadcast_to(base[: n - 1], (stop - start, n - 1)).copy()
        idx += idx >= rows[:, None]
        out[start:stop] = statistic(*(a[idx] for a in arrays), axis=-1)
    return out
