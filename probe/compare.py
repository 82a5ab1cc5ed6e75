"""Candidate against baseline on the same rows: paired differences, and where the candidate is worse.

For each metric (error, FPR, FNR, selection) both models' rates get Wilson intervals and their paired
difference (candidate minus baseline) Tango's score interval for paired proportions
(:func:`probe.paired.tango_interval`): it holds its level when the two models rarely disagree and is
never of zero width, even when they agree on every row. The p-value is the exact McNemar test on the
discordant cells. Then the slice search runs on the per-row paired
difference, oriented so that larger is worse for the candidate (``worse_slices``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

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
    """

    metric: str
    candidate: Estimate
    baseline: Estimate
    difference: Estimate
    p_value: float
    discordant: tuple[int, int]
    rows: int

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
        return self._oriented(paired_difference(b, c, self.rows,
                                                confidence_level=confidence_level))

    def _oriented(self, d: Estimate) -> Estimate:
        if get_metric(self.metric).sign > 0:
            return d
        return Estimate(-d.value, -d.high, -d.low, d.method)

    def to_dict(self) -> dict:
        return {"metric": self.metric, "rows": self.rows, "candidate": self.candidate.to_dict(),
                "baseline": self.baseline.to_dict(), "difference": self.difference.to_dict(),
                "shortfall": self.shortfall.to_dict(),
                "p_value": json_number(self.p_value), "test": "mcnemar-exact",
                "discordant": list(self.discordant),
                "worse_if": get_metric(self.metric).worse}


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
    results = []
    for name, (c_out, b_out, mask) in outcomes.items():
        c_in, b_in = c_out[mask].astype(bool), b_out[mask].astype(bool)
        b, c, m = int(np.sum(c_in & ~b_in)), int(np.sum(~c_in & b_in)), int(mask.sum())
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
    )
    agreement = float(np.mean(outcomes["selection"][0] == outcomes["selection"][1]))
    return Comparison(metric, tuple(results), found, agreement, confidence_level)
