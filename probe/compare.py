"""Candidate against baseline on the same rows: paired differences, and where the candidate is worse.

For each metric (error, FPR, FNR, selection) both models' rates get Wilson intervals and their paired
difference (candidate minus baseline) Tango's score interval for paired proportions
(:func:`probe.paired.tango_interval`): it holds its level when the two models rarely disagree and is
never of zero width, even when they agree on every row. The p-value is the exact McNemar test on the
discordant cells. Then the slice search runs on the per-row paired
difference, oriented so that larger is worse for the candidate (``worse_slices``).

**Under a sampling design** (``sample_weight=`` or ``design=``, :mod:`probe.design`; not a plain
one) every rate is the weighted rate with Wilson's interval on its effective counts. The
difference is the weighted mean of the per-row paired difference ``d`` in {-1, 0, 1},
``(W_b - W_c) / W`` (``W_b`` the weight of the rows where only the candidate has the outcome).
Its interval is Tango's, unchanged, on *effective* counts: ``n_eff = s² / v`` with ``s²`` the
weighted variance of ``d`` and ``v`` the design-based (linearisation) variance of its mean,
clusters or rows as the units (:func:`probe.design.effective_counts`; Kish's size when ``d`` is
constant), and ``b_eff = n_eff · W_b / W``, ``c_eff = n_eff · W_c / W``. Tango's variance at the
estimate is then ``s² / n_eff = v``, the design's, while the interval keeps what made Tango the
choice: it holds its level when the models rarely disagree and never has zero width, where a Wald
interval ``D ± z·sqrt(v)`` collapses to a point when no row is discordant. The exact McNemar test
is not exact under weights; its score form on the effective counts,
``z = (b_eff - c_eff) / sqrt(b_eff + c_eff)`` (``"mcnemar-score-effective"``), is reported
instead. Every estimate records ``n_effective`` (the difference: that of ``d``), and each metric
its weighted total (``weight``) and, with clusters, their number (``clusters``). The worse-slice
search runs under the same design (:func:`probe.slices.search_slices`). Membership
probabilities are refused: the comparison pairs rows, it has no groups to weigh.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import special

from .design import Design, effective_counts
from .design_data import resolve_design
from .errors import DataError, PlanError
from .metrics import METRIC_NAMES, get_metric, metric_outcome
from .options import SliceOptions
from .paired import paired_difference
from .slices import search_slices
from .stats import Estimate, mcnemar_pvalue, wilson
from .values import json_number

__all__ = ["MetricComparison", "Comparison", "compare_models"]


@dataclass(frozen=True)
class MetricComparison:
    """One metric, candidate against baseline.

    Attributes
    ----------
    metric : str
    candidate, baseline : Estimate
        Wilson intervals.
    difference : Estimate
        Candidate minus baseline, Tango's score interval for paired proportions.
    p_value : float
        Exact McNemar test on the discordant rows.
    discordant : tuple of int
        (rows where only the candidate has the outcome, rows where only the baseline has it).
    rows : int
        Rows in the metric's base (all rows; label-negatives for the FPR; label-positives for the
        FNR).
    test : str
        ``"mcnemar-exact"``, or ``"mcnemar-score-effective"`` under a sampling design.
    weight : float or None
        Under a non-plain design, the base's weighted total; else None.
    clusters : int or None
        With clusters, the clusters holding the base's rows; else None.
    """

    metric: str
    candidate: Estimate
    baseline: Estimate
    difference: Estimate
    p_value: float
    discordant: tuple[int, int]
    rows: int
    test: str = "mcnemar-exact"
    weight: float | None = None
    clusters: int | None = None
    _effective: tuple | None = field(default=None, repr=False, compare=False)

    @property
    def shortfall(self) -> Estimate:
        """The difference oriented so that larger is worse for the candidate (``Metric.sign``).

        For the error, FPR and FNR it is the difference itself; for the selection rate, where
        fewer favourable decisions is worse, it is the baseline minus the candidate.
        """
        return self._oriented(self.difference)

    def shortfall_at(self, confidence_level: float) -> Estimate:
        """:attr:`shortfall` with its Tango interval at ``confidence_level`` (two-sided).

        At the comparison's own level it is exactly :attr:`shortfall`.
        """
        b, c = self.discordant
        n = self.rows
        if self._effective is not None:  # a sampling design: Tango on the effective counts
            b, c, n = self._effective
        d = paired_difference(b, c, n, confidence_level=confidence_level)
        return self._oriented(Estimate(self.difference.value, d.low, d.high, d.method,
                                       self.difference.n_effective))

    def _oriented(self, d: Estimate) -> Estimate:
        if get_metric(self.metric).sign > 0:
            return d
        return Estimate(-d.value, -d.high, -d.low, d.method, d.n_effective)

    def to_dict(self) -> dict:
        return {"metric": self.metric, "rows": self.rows, "candidate": self.candidate.to_dict(),
                "baseline": self.baseline.to_dict(), "difference": self.difference.to_dict(),
                "shortfall": self.shortfall.to_dict(),
                "p_value": json_number(self.p_value), "test": self.test,
                "discordant": list(self.discordant),
                "worse_if": get_metric(self.metric).worse,
                **({} if self.weight is None else {"weight": json_number(self.weight)}),
                **({} if self.clusters is None else {"clusters": self.clusters})}


@dataclass(frozen=True)
class Comparison:
    """Candidate vs baseline.

    Attributes
    ----------
    metric : str
        The metric the slice search ran on.
    metrics : tuple of MetricComparison
        All four metrics; ``overall`` is the one for ``metric``.
    worse_slices : SliceFindings
        Slices where the candidate is worse (the paired difference oriented so larger is worse).
    agreement : float
        Share of rows where the two models' decisions agree.
    """

    metric: str
    metrics: tuple[MetricComparison, ...]
    worse_slices: object
    agreement: float
    confidence_level: float = 0.95

    @property
    def overall(self) -> MetricComparison:
        return next(m for m in self.metrics if m.metric == self.metric)

    @property
    def worse(self) -> tuple:
        """The found slices where the candidate is worse (its oriented difference there above zero).

        The search ranks slices by how much worse the candidate does there than on the other rows;
        a slice where it is merely less better than elsewhere is not a place where it is worse.
        """
        return tuple(s for s in self.worse_slices.found
                     if s.rate.value is not None and s.rate.value > 0)

    @staticmethod
    def slice_shortfall_at(found_slice, confidence_level: float) -> Estimate:
        """A worse slice's mean paired shortfall with Tango's interval at ``confidence_level``.

        The shortfall per row is +1, 0 or -1, so on the slice's (held-out) rows it is a paired
        difference of proportions, ``(b - c) / n`` with ``b - c`` its sum and ``b + c`` its sum of
        squares: the policy judges it like the overall shortfall. Tango's score interval holds its
        level far into the tails, where the slice table's Wilson or Welch intervals are too narrow
        for a Bonferroni-adjusted judgement (``tests/sim/sim_policy.py``)."""
        n, s, sq = (float(v) for v in found_slice.basis[0][:3])
        return paired_difference(round((sq + s) / 2), round((sq - s) / 2), round(n),
                                 confidence_level=confidence_level)

    def to_dict(self) -> dict:
        found = self.worse_slices.to_dict()
        keep = {s.rank for s in self.worse}
        worse = [{**s, "sentence": _worse_sentence(s, self.metric, self.confidence_level)}
                 for s in found["found"] if s["rank"] in keep]
        return {"metric": self.metric, "agreement": json_number(self.agreement),
                "overall": self.overall.to_dict(),
                "metrics": [m.to_dict() for m in self.metrics],
                "worse_search": {k: v for k, v in found.items() if k != "found"},
                "worse_slices": worse}

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame.from_records([
            {"metric": m.metric, "candidate": m.candidate.value, "baseline": m.baseline.value,
             "difference": m.difference.value, "difference_low": m.difference.low,
             "difference_high": m.difference.high, "p_value": m.p_value}
            for m in self.metrics
        ])


def _worse_sentence(found: dict, metric: str, confidence_level: float) -> str:
    """One line for a worse slice: how far the candidate is behind the baseline there and elsewhere."""
    rate, gap = found["rate"], found["gap"]
    if rate["value"] is None or gap["value"] is None:
        return f"Rows with {found['label']}: the difference is undefined."
    m = get_metric(metric)
    # the figures are oriented so that positive = candidate worse; say which way the rate moved
    change = "lower" if m.worse == "lower" else "higher"
    if rate["low"] is None or rate["high"] is None:
        interval = "no interval: too few rows"
    else:
        interval = (f"{100 * confidence_level:g} % interval of the shortfall "
                    f"{100 * rate['low']:.1f} to {100 * rate['high']:.1f}")
    rest = rate["value"] - gap["value"]
    return (f"Rows with {found['label']}: the candidate's {m.words} is {100 * rate['value']:.1f} "
            f"points {change} than the baseline's on the same rows ({interval}), "
            f"against {100 * rest:.1f} points on the other rows.")


def compare_models(
    X: pd.DataFrame,
    y_true,
    y_pred,
    y_pred_baseline,
    *,
    metric: str = "error",
    favorable: bool = True,
    options: SliceOptions | None = None,
    confidence_level: float = 0.95,
    rng=0,
    encoding=None,
    sample_weight=None,
    design: Design | None = None,
) -> Comparison:
    """Compare a candidate's decisions with a baseline's on the same labelled rows.

    Parameters
    ----------
    X : pandas.DataFrame
        The rows (slice columns for the worse-slice search).
    y_true : array_like of bool
        Label-positive indicator.
    y_pred, y_pred_baseline : array_like of bool
        Positive decisions of the candidate and of the baseline (production) model.
    metric : {"error", "fpr", "fnr", "selection"}, default="error"
        The metric the worse-slice search runs on (all four are compared overall).
    favorable : bool, default=True
    options : SliceOptions, optional
        The worse-slice search's options (its ``metric`` is not used: the search runs on ``metric``'s
        paired difference).
    confidence_level : float, default=0.95
    rng : None, int or numpy.random.Generator
        Seeds the worse-slice search (its split).
    encoding : Encoding, optional
        The slice columns already encoded (the run's evidence); default: encode ``X``.
    sample_weight : array_like, optional
        Row weights (non-negative, not all zero); the same as ``design=Design(weights=...)``.
    design : probe.design.Design, optional
        Row weights and clusters (not with ``sample_weight``): weighted rates and differences with
        design-based intervals (the module notes). A plain design changes nothing; rows of weight
        0 are then left out.

    Returns
    -------
    Comparison
    """
    if not 0.0 < confidence_level < 1.0:
        raise PlanError(
            f"`confidence_level` must lie strictly between 0 and 1, got {confidence_level!r}")
    # metric_outcome checks that labels and decisions are 0/1 (scores or text are refused there)
    outcomes = {}
    for name in METRIC_NAMES if y_true is not None else ("selection",):
        c_out, mask = metric_outcome(y_true, y_pred, name, favorable=favorable)
        b_out, _ = metric_outcome(y_true, y_pred_baseline, name, favorable=favorable)
        outcomes[name] = (c_out, b_out, mask)
    if metric not in outcomes:
        raise DataError(f"the `{metric}` comparison needs the labels (`y_true`)")
    if not len(X) == len(outcomes[metric][0]) == len(outcomes[metric][1]):
        raise DataError(
            f"candidate and baseline must be scored on the same rows: got "
            f"{len(outcomes[metric][0])} and {len(outcomes[metric][1])} decisions for {len(X)} rows"
        )
    design = resolve_design(sample_weight, design, len(X))
    if design.membership:
        raise PlanError("the comparison takes row weights and clusters; membership "
                        "probabilities have no use in it (leave them out of its `design`)")
    live = None if design.weights is None else design.weights > 0
    if live is not None:  # rows of weight 0 are in no base
        outcomes = {k: (c, b, m & live) for k, (c, b, m) in outcomes.items()}
    results = []
    for name, (c_out, b_out, mask) in outcomes.items():
        c_in, b_in = c_out[mask].astype(bool), b_out[mask].astype(bool)
        b, c, m = int(np.sum(c_in & ~b_in)), int(np.sum(~c_in & b_in)), int(mask.sum())
        if not design.plain:
            results.append(_weighted(name, c_in, b_in, mask, design, (b, c), confidence_level))
            continue
        results.append(MetricComparison(
            name,
            wilson(int(c_in.sum()), m, confidence_level=confidence_level),
            wilson(int(b_in.sum()), m, confidence_level=confidence_level),
            paired_difference(b, c, m, confidence_level=confidence_level),
            mcnemar_pvalue(b, c), (b, c), m,
        ))
    c_out, b_out, mask = outcomes[metric]
    worse = get_metric(metric).sign * (c_out.astype(float) - b_out.astype(float))
    found = search_slices(
        X, worse, base=mask, options=options, confidence_level=confidence_level, rng=rng,
        label=f"paired {metric} difference (candidate worse > 0)", encoding=encoding,
        design=design,
    )
    same = outcomes["selection"][0] == outcomes["selection"][1]
    agreement = float(np.mean(same) if live is None else np.average(same, weights=design.weights))
    return Comparison(metric, tuple(results), found, agreement, confidence_level)


def _weighted(name, c_in, b_in, mask, design, discordant, confidence_level) -> MetricComparison:
    """One metric under a non-plain design (the module notes give the method)."""
    w = design.row_weights(len(mask))[mask]
    units = design.units(len(mask))[mask]
    clustered = design.cluster is not None
    key = np.zeros(len(w), dtype=np.int64)

    def effective(y):
        e = effective_counts(key, 1, y, w, units, clustered=clustered)
        return float(e.weight[0]), float(e.events[0]), float(e.n_eff[0]), e.clusters

    if not (w > 0).any():  # no row of positive weight in the base
        nan = Estimate(np.nan, np.nan, np.nan, "wilson", 0.0)
        return MetricComparison(name, nan, nan, Estimate(np.nan, np.nan, np.nan, "tango-score",
                                                         0.0), np.nan, discordant, 0,
                                "mcnemar-score-effective", 0.0, None, (0.0, 0.0, 0.0))
    rates = []
    for y in (c_in, b_in):
        W, X_, n_eff, _ = effective(y)
        est = wilson(X_ / W * n_eff, n_eff, confidence_level=confidence_level)
        rates.append(Estimate(X_ / W, est.low, est.high, est.method, n_eff))
    d = c_in.astype(float) - b_in
    W, _, n_eff, clusters = effective(d)
    W_b, W_c = float(w @ (c_in & ~b_in)), float(w @ (~c_in & b_in))
    b_eff, c_eff = n_eff * W_b / W, n_eff * W_c / W
    diff = paired_difference(b_eff, c_eff, n_eff, confidence_level=confidence_level)
    diff = Estimate((W_b - W_c) / W, diff.low, diff.high, diff.method, n_eff)
    p = 1.0 if b_eff + c_eff <= 0 else float(
        2 * special.ndtr(-abs(b_eff - c_eff) / np.sqrt(b_eff + c_eff)))
    return MetricComparison(name, rates[0], rates[1], diff, p, discordant, int(mask.sum()),
                            "mcnemar-score-effective", W,
                            None if clusters is None else int(clusters[0]),
                            (b_eff, c_eff, n_eff))
