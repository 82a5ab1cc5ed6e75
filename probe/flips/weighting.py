"""The flip tests under a sampling design: who is in each group, with what weight, in which unit.

:func:`flip_design` reads the design once (:mod:`probe.design`; :func:`probe.design_data.resolve_design`
resolves ``sample_weight=`` / ``design=``) into a :class:`FlipDesign`: per level of the flipped
attribute its rows, their weights (the row weight, times the membership probability when the
attribute is known only as probabilities: each row then counts in each group with weight
``w * pi``, :func:`probe.design.expand_rows`'s rule) and the units the variance treats as
independent (the clusters, else the rows; a row's copies share its unit). :func:`weighted_shares`
and :func:`weighted_mean` turn per-person outcomes into estimates: weighted rates with Wilson
intervals on the design's effective counts (:func:`probe.design.effective_counts`), and a weighted
mean with a t interval on its linearisation variance, each with its ``n_effective``. A plain design
(:attr:`probe.design.Design.plain`) takes none of this: the modes run their unweighted code, on the
rows of weight 1. The package notes (:mod:`probe.flips`) say what each mode does with a design.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats as _sps

from ..design import Design, Membership, effective_counts
from ..stats import Estimate, wilson_interval

__all__ = ["FlipDesign", "flip_design", "spread_n_effective", "weighted_mean",
           "weighted_shares"]


@dataclass(frozen=True)
class FlipDesign:
    """The design as a flip test uses it.

    Attributes
    ----------
    weighted : bool
        The design is not plain: weights, units and effective counts apply.
    clustered : bool
        Clusters are the units.
    units : ndarray of int64 or None
        Each row's unit (None for a plain design).
    membership : Membership or None
        The flipped attribute's membership probabilities, when it is known only that way.
    weights : dict
        Per level, the weights of its rows (``w`` or ``w * pi``); empty for a plain design.
    """

    weighted: bool
    clustered: bool
    units: np.ndarray | None
    membership: Membership | None
    weights: dict

    def of(self, level, positions=None):
        """The weights of ``level``'s rows (those at ``positions`` among them), or None."""
        if not self.weighted:
            return None
        w = self.weights[level]
        return w if positions is None else w[positions]

    def unit_of(self, rows):
        return None if self.units is None else self.units[rows]


def flip_design(design: Design, group_rows: dict, attribute: str, n_rows: int) -> FlipDesign:
    """The :class:`FlipDesign` of ``attribute`` for the groups ``group_rows`` (every row of a
    level, for a membership attribute every row of positive probability there). Membership
    probabilities of other attributes play no part: a recorded column is flipped as it is."""
    membership = design.membership.get(attribute)
    design = Design(design.weights, design.cluster, {} if membership is None else
                    {attribute: membership})
    if design.plain:
        return FlipDesign(False, False, None, membership, {})
    w = design.row_weights(n_rows)
    weights = {}
    for level, rows in group_rows.items():
        wl = w[rows]
        if membership is not None and level in membership.levels:
            wl = wl * membership.probs[rows, membership.levels.index(level)]
        weights[level] = wl
    return FlipDesign(True, design.cluster is not None, design.units(n_rows), membership, weights)


def weighted_shares(indicators, weights, units, clustered, confidence_level) -> list:
    """Weighted shares of boolean ``indicators`` (each over the same rows) with Wilson intervals on
    effective counts; each :class:`Estimate` records ``n_effective``."""
    out = []
    key = np.zeros(len(weights), dtype=np.int64)
    for y in indicators:
        eff = effective_counts(key, 1, y, weights, units, clustered=clustered)
        W, n_eff = float(eff.weight[0]), float(eff.n_eff[0])
        if W <= 0 or n_eff <= 0:
            out.append(Estimate(math.nan, math.nan, math.nan, "wilson", 0.0))
            continue
        lo, hi = wilson_interval(eff.x_eff[0], n_eff, confidence_level=confidence_level)
        out.append(Estimate(float(eff.events[0]) / W, float(lo), float(hi), "wilson", n_eff))
    return out


def weighted_mean(y, weights, units, clustered, confidence_level, *, bound=1.0) -> Estimate:
    """The weighted mean of ``y`` with ``mean ± t · sqrt(v)``, ``v`` its linearisation variance
    (units as the independent draws; ``t`` on units - 1 degrees of freedom), within
    ``[-bound, bound]``; method ``"t-design"``."""
    y = np.asarray(y, dtype=float)
    key = np.zeros(len(y), dtype=np.int64)
    eff = effective_counts(key, 1, y, weights, units, clustered=clustered)
    W = float(eff.weight[0])
    if W <= 0:
        return Estimate(math.nan, math.nan, math.nan, "t-design", 0.0)
    mean = float(eff.events[0]) / W
    spread = float(np.sum(weights * (y - mean) ** 2) / W)
    n_eff = float(eff.n_eff[0])
    m = float(eff.clusters[0]) if clustered else float(np.count_nonzero(weights > 0))
    if m < 2 or n_eff <= 0:
        return Estimate(mean, math.nan, math.nan, "t-design", n_eff)
    half = float(_sps.t.ppf(0.5 + confidence_level / 2, m - 1)) * math.sqrt(spread / n_eff)
    return Estimate(mean, max(mean - half, -bound), min(mean + half, bound), "t-design", n_eff)


def spread_n_effective(d, weights, se, cap) -> float:
    """The effective count of a mean of ``d`` whose standard error ``se`` came from a resampling
    scheme: ``s^2 / se^2`` with ``s^2`` the weighted variance of ``d``, at most ``cap`` (NaN when
    the standard error is NaN; ``cap`` when it is 0)."""
    d = np.asarray(d, dtype=float)
    mean = np.average(d, weights=weights)
    spread = float(np.average((d - mean) ** 2, weights=weights))
    if not np.isfinite(se):
        return math.nan
    return float(cap) if se <= 0 else float(min(cap, spread / se ** 2))
