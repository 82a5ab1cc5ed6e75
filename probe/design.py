"""The sampling design of a holdout: row weights, clusters and uncertain group membership.

Real holdouts are rarely simple random samples of independent people with known groups. This
module holds what the analyses need to stay honest when they are not:

- :class:`Design`: the row weights (design weights, reweighting to a population), the cluster of
  each row (a person or household seen several times) and the protected attributes known only as
  membership probabilities (:class:`Membership`);
- :func:`expand_rows`: a table in which a row of uncertain membership appears once per group, with
  its probability of belonging there as a weight, so that every count is an ordinary weighted count;
- :func:`effective_counts`: per cell, the weighted rate and the *effective* counts
  ``(x_eff, n_eff)`` that carry its design-based variance, so that every interval probe computes
  from counts (Wilson, Newcombe, MOVER-R) applies unchanged.

Effective counts
----------------
A weighted rate is the ratio ``p = sum(w y) / sum(w)`` over a cell. Its variance is estimated by
linearisation (the Taylor / sandwich variance of a ratio estimator, with the primary sampling units
as the independent units: the clusters when given, else the rows)::

    v = f * sum_u z_u^2 / W^2,   z_u = sum_{i in u} w_i (y_i - p),   f = m / (m - 1) with clusters

(``m`` the clusters in the cell, the usual small-sample factor taken per cell: slightly wider than
with the whole sample's cluster count, and with clusters of one row each it gives ``n_eff = n - 1``
where rows as units give ``n``; ``f = 1`` with rows as units, so that the unit-weight case is the
binomial variance). The effective sample size is ``n_eff = s^2 / v`` with ``s^2`` the weighted
variance of ``y`` in the cell (``p (1 - p)`` for a 0/1 outcome): the number of independent rows
that would give the same precision (Korn & Graubard 1998). Where the rate is 0 or 1 the variance
estimate is 0 and says nothing; Kish's effective size ``W^2 / sum(w^2)`` (over cluster totals with
clusters) is used instead. ``n_eff`` is capped at the cell's rows of positive weight.
``x_eff = p * n_eff``. (A group known by membership probabilities may have ``n_eff`` above the
sum of its probabilities: its probability-weighted rate varies less than a rate over that many
recorded members.) Wilson's interval on ``(x_eff, n_eff)`` is then the design-based Wilson
interval. With every weight 0 or 1, no clusters and memberships of 0 or 1, the effective counts
*are* the counts, exactly, and every estimate equals the unweighted one.

Two groups whose estimates share units (a cluster with rows in both; a row counted in both by its
membership probabilities) are not independent samples. The correlation of their estimates comes
from the same linearisation (:meth:`CellEffective.correlation`) and enters the difference
and ratio intervals (``newcombe_interval(..., rho=...)``, ``ratio_interval(..., rho=...)``);
measured in ``tests/sim/sim_design.py``, the membership gaps cover 95 % with it and 99 % without.

Uncertain membership
--------------------
A row with membership probabilities ``pi_g`` counts in group ``g`` with weight ``w * pi_g``. The
rate of a group is then the probability-weighted rate, and its linearisation variance, with the
*row* (or its cluster) as the unit over all its copies, carries both the sampling of rows and the
spread of their memberships. The estimate targets the group's rate only when the outcome is
independent of membership given what the probabilities were predicted from; otherwise it is
biased, typically toward no disparity (Chen, Kallus, Mao, Svacha & Udell 2019, "Fairness under
unawareness", FAT* '19). The report says so (:data:`MEMBERSHIP_CAUTION`).

References
----------
Kish, L. (1965). Survey Sampling. Wiley (the effective sample size of a weighted mean).
Korn, E. L. & Graubard, B. I. (1998). Confidence intervals for proportions with small expected
numbers of positive counts estimated from survey data. Survey Methodology 24, 193-201.
Wolter, K. M. (2007). Introduction to Variance Estimation, 2nd ed., ch. 6 (Taylor series methods).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np

from .errors import DataError
from .values import read_only


__all__ = ["CellEffective", "Design", "MEMBERSHIP_CAUTION", "MIN_CLUSTERS", "Membership",
           "UNCERTAIN_TOP", "effective_counts", "expand_rows"]

#: Rules judged on fewer clusters than this are inconclusive: a sandwich variance from a few dozen
#: clusters is itself unreliable (common practice; Cameron & Miller 2015 discuss "few clusters").
MIN_CLUSTERS = 30
#: A row whose largest membership probability is below this is counted as of uncertain membership.
UNCERTAIN_TOP = 0.8
#: The caution every report with membership probabilities carries (written once, here).
MEMBERSHIP_CAUTION = (
    "Groups of {attributes} are estimated from membership probabilities, not recorded. "
    "Probability-weighted disparities are biased, typically toward no disparity, when the "
    "probabilities are predicted from features that also relate to the outcome (Chen, Kallus, Mao, "
    "Svacha & Udell 2019, \"Fairness under unawareness\"): a small gap here does not show a small "
    "gap between the true groups."
)


@dataclass(frozen=True)
class Membership:
    """A protected attribute known only as probabilities.

    Attributes
    ----------
    attribute : str
        The attribute's name (used like any protected attribute).
    levels : tuple of str
        The groups, in the order given.
    columns : tuple of str
        The probability column of each group.
    probs : ndarray of shape (n_rows, n_levels)
        Each row's probabilities (rows sum to 1), read-only.
    """

    attribute: str
    levels: tuple
    columns: tuple
    probs: np.ndarray

    def __post_init__(self):
        object.__setattr__(self, "probs", read_only(np.asarray(self.probs, dtype=np.float64)))

    @property
    def uncertain_share(self) -> float:
        """Share of rows whose largest membership probability is below :data:`UNCERTAIN_TOP`."""
        return float(np.mean(self.probs.max(axis=1) < UNCERTAIN_TOP)) if len(self.probs) else 0.0

    def most_likely(self) -> np.ndarray:
        """Each row's most probable group (the first of ties), as an object array of levels."""
        return np.asarray(self.levels, dtype=object)[self.probs.argmax(axis=1)]

    def describe(self) -> dict:
        return {"groups": dict(zip(self.levels, self.columns)),
                "uncertain_share": self.uncertain_share, "uncertain_below": UNCERTAIN_TOP}


@dataclass(frozen=True)
class Design:
    """Row weights, clusters and membership probabilities of a holdout (all optional).

    Attributes
    ----------
    weights : ndarray of float64 or None
        Non-negative row weights, not all zero; None means every row weighs 1.
    cluster : ndarray of int64 or None
        Each row's cluster: any ids are coded ``0 .. n_clusters - 1`` in sorted order (a missing
        id becomes -1, which the analyses refuse); None means every row is its own.
    membership : mapping of str to Membership
        The attributes known as probabilities.
    weights_column, cluster_column : str or None
        Where they came from, for the report.
    """

    weights: np.ndarray | None = None
    cluster: np.ndarray | None = None
    membership: Mapping[str, Membership] = field(default_factory=dict)
    weights_column: str | None = None
    cluster_column: str | None = None

    def __post_init__(self):
        if self.weights is not None:
            try:
                w = np.asarray(self.weights, dtype=np.float64).reshape(-1)
            except (TypeError, ValueError):
                raise DataError("a Design's weights must be numbers, one per row") from None
            object.__setattr__(self, "weights", read_only(w))
        if self.cluster is not None:  # any ids, coded 0 .. n_clusters - 1 (-1: missing)
            import pandas as pd

            codes = pd.factorize(np.asarray(self.cluster).reshape(-1), sort=True)[0]
            object.__setattr__(self, "cluster", read_only(codes.astype(np.int64)))

    @property
    def n_clusters(self) -> int | None:
        return None if self.cluster is None else int(self.cluster.max(initial=-1)) + 1

    @property
    def given(self) -> bool:
        """Whether any weights, clusters or membership probabilities were given."""
        return self.weights is not None or self.cluster is not None or bool(self.membership)

    @property
    def estimated(self) -> tuple:
        """The attributes whose memberships are fractional (estimated, not recorded)."""
        return tuple(a for a, m in self.membership.items() if not _zero_one(m.probs))

    @property
    def plain(self) -> bool:
        """True when every weight is 0 or 1, there are no clusters and no membership is
        fractional: the counts are then the effective counts and nothing changes."""
        return (self.cluster is None and _zero_one(self.weights)
                and all(_zero_one(m.probs) for m in self.membership.values()))

    def row_weights(self, n: int) -> np.ndarray:
        return np.ones(n) if self.weights is None else self.weights

    def units(self, n: int) -> np.ndarray:
        """The primary sampling unit of each row: its cluster, else the row itself."""
        return np.arange(n, dtype=np.int64) if self.cluster is None else self.cluster

    def describe(self) -> dict:
        """The report's ``provenance.design``."""
        w = self.weights
        return {
            "weights": self.weights_column,
            "kish_effective_rows": None if w is None else float(w.sum() ** 2 / (w * w).sum()),
            "cluster": self.cluster_column,
            "clusters": self.n_clusters,
            "membership": {a: m.describe() for a, m in self.membership.items()},
            "variance": "linearisation (Taylor) with "
                        + ("clusters" if self.cluster is not None else "rows")
                        + " as the units; intervals from effective counts",
        }


def _zero_one(a) -> bool:
    return a is None or bool(np.all((a == 0) | (a == 1)))


@dataclass(frozen=True)
class CellEffective:
    """Per cell: the weighted total and rate, and the effective counts (see the module notes).

    Attributes
    ----------
    weight, events : ndarray
        ``sum(w)`` and ``sum(w y)``.
    rows : ndarray
        Rows of positive weight.
    clusters : ndarray or None
        Clusters with a row of positive weight (None without clusters).
    n_eff, x_eff : ndarray
        Effective trials and events (the counts themselves for a plain design).
    """

    weight: np.ndarray
    events: np.ndarray
    rows: np.ndarray
    clusters: np.ndarray | None
    n_eff: np.ndarray
    x_eff: np.ndarray
    _scores: tuple | None = None  # (cell, unit, z) per (cell, unit) pair, and sum z^2 per cell

    def correlation(self, ref: int) -> np.ndarray:
        """Per cell, the correlation of its rate's estimate with cell ``ref``'s, from the units
        they share: ``sum_u z_iu z_ru / sqrt(sum_u z_iu^2 sum_u z_ru^2)`` (0 where they share none,
        always for a plain design; 1 for ``ref`` itself)."""
        if self._scores is None:
            return np.zeros(len(self.weight))
        cell, unit, z, sq = self._scores
        mine = cell == ref
        z_ref = np.zeros(int(unit.max()) + 1 if len(unit) else 0)
        z_ref[unit[mine]] = z[mine]
        cov = np.bincount(cell, weights=z * z_ref[unit], minlength=len(self.weight))
        with np.errstate(invalid="ignore", divide="ignore"):
            rho = cov / np.sqrt(sq * sq[ref])
        return np.clip(np.nan_to_num(rho), -1.0, 1.0)


def effective_counts(key: np.ndarray, n_cells: int, y: np.ndarray, weights=None, units=None, *,
                     clustered: bool = False, plain: bool = False) -> CellEffective:
    """Weighted totals, events and effective counts of ``y`` in every cell of ``key``.

    Parameters
    ----------
    key : ndarray of int
        Each row's cell ``0 .. n_cells - 1``; a negative key leaves the row out.
    y : ndarray
        The per-row outcome (0/1 for a rate; any real for a mean).
    weights : ndarray, optional
        Row weights (default 1).
    units : ndarray of int, optional
        Each row's sampling unit (default: the row). Copies of one row (:func:`expand_rows`) share
        their unit.
    clustered : bool
        The units are clusters: the variance gets the ``m / (m - 1)`` factor and the result the
        number of clusters per cell.
    plain : bool
        The design is plain (:attr:`Design.plain`): effective counts are the counts.
    """
    key = np.asarray(key, dtype=np.int64)
    y = np.asarray(y, dtype=np.float64)
    ok = key >= 0
    if not ok.all():
        key, y = key[ok], y[ok]
        weights = None if weights is None else np.asarray(weights)[ok]
        units = None if units is None else np.asarray(units)[ok]
    w = np.ones(len(key)) if weights is None else np.asarray(weights, dtype=np.float64)
    W = np.bincount(key, weights=w, minlength=n_cells)
    X = np.bincount(key, weights=w * y, minlength=n_cells)
    rows = np.bincount(key[w > 0], minlength=n_cells).astype(np.float64)
    if plain and units is None:
        return CellEffective(W, X, rows, None, W.copy(), X.copy())
    with np.errstate(invalid="ignore", divide="ignore"):
        p = np.where(W > 0, X / np.where(W > 0, W, 1.0), np.nan)
        spread = np.bincount(key, weights=w * (y - p[key]) ** 2, minlength=n_cells) / W
    u = np.arange(len(key)) if units is None else np.asarray(units, dtype=np.int64)
    pair, cell_of = _pairs(key, u)
    T = np.bincount(pair, weights=w * y)
    U = np.bincount(pair, weights=w)
    z = T - p[cell_of] * U
    S_units = np.bincount(cell_of, weights=z * z, minlength=n_cells)  # also for correlations
    S = S_units
    live = U > 0
    m = np.bincount(cell_of[live], minlength=n_cells).astype(np.float64)
    if clustered:
        S = S * np.where(m > 1, m / np.maximum(m - 1, 1), np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        kish = W ** 2 / np.bincount(cell_of, weights=U * U, minlength=n_cells)
        v = S / W ** 2
        varies = spread > 1e-12 * p * p + 1e-300  # not a constant outcome (a rate of 0 or 1)
        n_eff = np.where(varies & (v > 0), spread / v, kish)
    n_eff = np.where(W > 0, np.minimum(n_eff, rows), 0.0)
    n_eff = np.where(np.isnan(n_eff), 0.0, n_eff)
    x_eff = np.where(W > 0, np.nan_to_num(p) * n_eff, 0.0)
    unit_of = np.zeros(len(U), dtype=np.int64)
    unit_of[pair] = u  # every row of a pair has the pair's unit
    return CellEffective(W, X, rows, m if clustered else None, n_eff, x_eff,
                         (cell_of, unit_of, z, S_units))


def _pairs(key, units):
    """A code per (cell, unit) pair that occurs, and each pair's cell."""
    if len(key) == 0:
        return key, key
    span = int(units.max()) + 1
    joint = key * span + units
    uniq, pair = np.unique(joint, return_inverse=True)
    return pair.reshape(-1), (uniq // span).astype(np.int64)


def expand_rows(codes: Sequence[np.ndarray], membership: Sequence[Membership | None],
                weights: np.ndarray | None):
    """Rows of uncertain membership, once per group of positive probability.

    Parameters
    ----------
    codes : sequence of ndarray
        Per column, the rows' codes; for a column with a :class:`Membership` the entry is ignored.
    membership : sequence of Membership or None
        Per column, its membership (None for a recorded column).

    Returns
    -------
    codes : list of ndarray
        The codes of the expanded rows (a membership column coded by its group's position).
    source : ndarray of int64 or None
        The original row of each expanded row (None when nothing was expanded).
    weights : ndarray or None
        The expanded rows' weights: the row's weight times its probabilities.
    prob : ndarray or None
        The expanded rows' membership probability (the product over the membership columns).
    """
    if all(m is None for m in membership):
        return list(codes), None, weights, None
    n = len(next(m for m in membership if m is not None).probs)
    source = np.arange(n, dtype=np.int64)
    w = np.ones(n) if weights is None else np.asarray(weights, dtype=np.float64)
    prob = np.ones(n)
    out = [np.asarray(c) if m is None else None for c, m in zip(codes, membership)]
    for j, m in enumerate(membership):
        if m is None:
            continue
        probs = m.probs[source]
        k = probs.shape[1]
        rep_w = (w[:, None] * probs).reshape(-1)
        rep_p = (prob[:, None] * probs).reshape(-1)
        keep = rep_p > 0
        rep_src = np.repeat(source, k)[keep]
        rep_code = np.tile(np.arange(k, dtype=np.int64), len(source))[keep]
        idx = np.repeat(np.arange(len(source)), k)[keep]
        out = [c if c is None else c[idx] for c in out]
        out[j] = rep_code
        source, w, prob = rep_src, rep_w[keep], rep_p[keep]
    return out, source, w, prob
