"""What each policy rule is measured on: the typed results of the analyses turned into families of
oriented estimates, judged by :func:`probe.policy.judge`.

What each rule is measured on (its family):

- ``min_impact_ratio``: every group's impact ratio (groups and intersections), except the reference
  group and groups under 2 % of rows (the Uniform Guidelines' Q&A 11 compares groups above 2 %; NYC's
  rules allow leaving them out of impact ratios), which are listed as not judged.
- ``max_fpr_gap``, ``max_fnr_gap``, ``max_error_gap``: every group's absolute gap in that rate to its
  attribute's reference group (groups and intersections; every group but the reference, small ones
  too), judged on the interval of ``|d|`` implied by Newcombe's interval ``[L, U]`` of the difference
  ``d`` (``[0, max(-L, U)]`` when it holds 0, else ``[min(|L|, |U|), max(|L|, |U|)]``), so the largest
  gap passes only when every group's does. A subject's rows are the smaller of the two bases (the
  label-negatives for FPR, the label-positives for FNR, all rows for errors).
- ``max_flip_rate``: every applicable flip row's judged figure: the flip rate for direct flips, the
  excess over the placebo for transport, the excess over own-group twins for twins.
- ``max_slice_gap``: the slices carried to the estimate part (the family the q-values are over); the
  listed ones are judged, each slice's gap to the rest oriented so that larger is worse (for selection,
  the shortfall). Without a split the gaps carry the selection effect and are not judged.
- A subject whose groups are known only as membership probabilities (``estimated``) can fail but
  not pass: its probability-weighted estimate is biased toward no disparity when the
  probabilities come from features that relate to the outcome (:data:`probe.design.
  MEMBERSHIP_CAUTION`), so an interval inside the bound does not rule a violation out.
- Under clusters (``[data] cluster``), a subject whose estimate rests on fewer than
  :data:`~probe.design.MIN_CLUSTERS` clusters (the fewer of its two samples) is inconclusive: a
  cluster-robust variance from so few clusters is itself unreliable.
- ``max_regression``: the comparison's overall shortfall in its metric (candidate minus baseline,
  oriented by the metric so that larger is worse) and each worse slice's mean paired shortfall (family:
  one plus the worse-slice search's carried slices).

:func:`measure` reads the typed results (no report dict, no string keys) and returns, per rule, a
:class:`Family` of :class:`Measure`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

from .design import MIN_CLUSTERS
from .stats import Estimate

__all__ = ["Family", "Measure", "measure", "undefined"]


@dataclass(frozen=True)
class Measure:
    """One subject a rule is judged on.

    Attributes
    ----------
    subject : str
        What it measures (``sex = F (vs M)``, ``slice 2: …``, ``overall error``).
    estimate : Estimate
        At the report's confidence level, oriented so that the rule's bound applies as written (a
        selection shortfall is positive).
    at : callable or None
        ``at(confidence_level) -> Estimate``: the same estimate at another two-sided level, oriented
        the same way. None: only ``estimate`` exists, and the subject is judged on it when the
        simultaneous level is the report's, and is inconclusive otherwise.
    rows : int or None
        The rows behind the estimate (None: not applicable).
    unjudged : str or None
        Why the estimate cannot be judged honestly (it is then inconclusive with this reason).
    no_pass : str or None
        Why the estimate can show a violation but not rule one out (a pass is then inconclusive
        with this reason; a fail stands).
    """

    subject: str
    estimate: Estimate
    at: Callable[[float], Estimate] | None = None
    rows: int | None = None
    unjudged: str | None = None
    no_pass: str | None = None

    def interval(self, level: float, report_level: float) -> Estimate | None:
        if self.at is not None:
            return self.at(level)
        return self.estimate if math.isclose(level, report_level) else None


@dataclass(frozen=True)
class Family:
    """A rule's family: the subjects to judge and how many hypotheses the adjustment covers.

    ``size`` is at least ``len(measures)``: the listed slices are chosen from a larger family fixed
    before their estimates were looked at, and simultaneous coverage of that family covers any subset
    of it."""

    measures: tuple
    size: int
    what: str


def undefined(est: Estimate | None) -> bool:
    return est is None or any(not math.isfinite(v) for v in (est.value, est.low, est.high))


def _worse_up(est: Estimate, sign: int) -> Estimate:
    """``est`` turned so that larger is worse (``sign`` -1: a shortfall where lower is worse)."""
    if sign > 0:
        return est
    return Estimate(-est.value, -est.high, -est.low, est.method, est.n_effective)


def _turned(at, sign):
    return at if sign > 0 else (lambda level: _worse_up(at(level), -1))


_SELECTED = ("no split: the {what} was estimated on the rows that chose the slice and is overstated; "
             "search with a split to judge it")


def measure(*, groups=None, slices=None, flips=None, comparison=None,
            confidence_level: float = 0.95, estimated=()) -> dict:
    """The family each rule is judged on, from the typed results of the analyses.

    Parameters
    ----------
    groups : GroupMetrics, optional
    slices : SliceFindings, optional
    flips : sequence of FlipFindings, optional
    comparison : Comparison, optional
    confidence_level : float, default=0.95
        The report's level (the estimates shown beside each judgement).
    estimated : collection of str, default=()
        The attributes known only as (fractional) membership probabilities: their subjects can
        fail but not pass.

    Returns
    -------
    dict
        Rule name -> :class:`Family`, or None when the analysis was not run (or, for flips, no test
        applied).
    """
    out: dict[str, Family | None] = {}
    if groups is None:
        out["min_impact_ratio"] = None
    else:
        judged = [r for r in groups.rows if r.group != r.reference_group and not r.small]
        few = _cluster_check(groups, "selection_rate")
        ms = tuple(Measure(f"{r.attribute} = {r.group} (vs {r.reference_group})", r.impact_ratio,
                           r.impact_ratio_at, r.rows, few(r), _no_pass(r.attribute, estimated))
                   for r in judged)
        # an attribute whose reference was chosen from the data has intervals that already hold
        # together (Bonferroni over its pairs, see probe.groups): one hypothesis for all its groups
        chosen = {r.attribute for r in judged if not r.reference_fixed}
        size = len(chosen) + sum(1 for r in judged if r.attribute not in chosen)
        out["min_impact_ratio"] = Family(ms, size, f"{len(ms)} groups of {len({r.attribute for r in judged})} attributes")
    for name, rate in _GAPS.items():
        out[name] = None if groups is None else _gap_family(groups, rate, estimated)
    flip_ms = tuple(m for f in flips or () for row in f.rows
                    if (m := _flip_measure(row, confidence_level, estimated)) is not None)
    out["max_flip_rate"] = Family(flip_ms, len(flip_ms),
                                  f"{len(flip_ms)} flip rows") if flip_ms else None
    if slices is None:
        out["max_slice_gap"] = None
    else:
        sign = -1 if slices.direction == "lower" else 1
        why = _SELECTED.format(what="gap") if slices.selected else None
        ms = tuple(
            Measure(f"slice {s.rank}: {s.label}" + (" (shortfall in selection rate)" if sign < 0
                                                    else ""),
                    _worse_up(s.gap, sign), _turned(s.gap_at, sign), s.rows,
                    why or few_clusters(getattr(s, "clusters", None)))
            for s in slices.found)
        out["max_slice_gap"] = Family(ms, slices.family,
                                      f"{slices.family} slices carried to the estimate part")
    if comparison is None:
        out["max_regression"] = None
    else:
        o, found = comparison.overall, comparison.worse_slices
        why = _SELECTED.format(what="shortfall") if found.selected else None
        ms = (Measure(f"overall {o.metric}", o.shortfall, o.shortfall_at, o.rows,
                      few_clusters(getattr(o, "clusters", None))),) + tuple(
            Measure(f"worse slice {s.rank}: {s.label}", s.rate,
                    lambda level, s=s: comparison.slice_shortfall_at(s, level), s.rows,
                    why or few_clusters(getattr(s, "clusters", None)))
            for s in comparison.worse)
        out["max_regression"] = Family(ms, 1 + found.family,
                                       f"the overall shortfall and {found.family} slices")
    return out


_GAPS = {"max_fpr_gap": "fpr", "max_fnr_gap": "fnr", "max_error_gap": "error_rate"}
_GAP_WORDS = {"fpr": "FPR", "fnr": "FNR", "error_rate": "error rate"}


def _absolute(est: Estimate) -> Estimate:
    """``|d|`` with the interval of ``|d|`` that ``d``'s interval implies."""
    if undefined(est):
        return Estimate(math.nan, math.nan, math.nan, est.method)
    low, high = est.low, est.high
    if low >= 0:
        return Estimate(abs(est.value), low, high, est.method, est.n_effective)
    if high <= 0:
        return Estimate(abs(est.value), -high, -low, est.method, est.n_effective)
    return Estimate(abs(est.value), 0.0, max(-low, high), est.method, est.n_effective)


def _gap_family(groups, rate: str, estimated=()) -> Family:
    """Every group's absolute gap in ``rate`` to its reference group (the reference left out)."""
    compared = [r for r in groups.rows if r.group != r.reference_group]
    few = _cluster_check(groups, rate)
    ms = tuple(
        Measure(f"{r.attribute} = {r.group} (vs {r.reference_group}): {_GAP_WORDS[rate]} gap",
                _absolute(r.gap_at(rate, groups.confidence_level)),
                lambda level, r=r: _absolute(r.gap_at(rate, level)), r.gap_rows(rate), few(r),
                _no_pass(r.attribute, estimated))
        for r in compared)
    attributes = len({r.attribute for r in compared})
    return Family(ms, len(ms), f"{len(ms)} groups of {attributes} attributes")


def few_clusters(*counts) -> str | None:
    """Why an estimate on these samples' cluster counts cannot be judged (None: it can)."""
    known = [int(c) for c in counts if c is not None]
    if not known or min(known) >= MIN_CLUSTERS:
        return None
    return (f"rests on {min(known)} clusters, fewer than {MIN_CLUSTERS}: a cluster-robust "
            "interval from so few is unreliable")


def _cluster_check(groups, rate: str):
    """``row -> reason or None``: a group and its reference judged on too few clusters in the
    base of ``rate`` (all rows; label-negatives for FPR; label-positives for FNR)."""
    clusters = {(r.attribute, r.group): r.rate_clusters.get(rate) for r in groups.rows}
    return lambda r: few_clusters(r.rate_clusters.get(rate),
                                  clusters.get((r.attribute, r.reference_group)))


_ESTIMATED = ("groups known only as membership probabilities: the estimate is biased toward no "
              "disparity when the probabilities come from features that relate to the outcome, "
              "so it can show a violation but not rule one out")


def _no_pass(attribute: str, estimated) -> str | None:
    """The reason an attribute's (or intersection's) subject cannot pass, or None."""
    return _ESTIMATED if set(attribute.split(" & ")) & set(estimated) else None


def _flip_measure(row, confidence_level, estimated=()) -> Measure | None:
    """The row's judged figure; None when nothing was scored (an impossible target level). A
    scored row whose control (placebo, own-group twins) could not be formed is inconclusive: its
    raw flip rate would count the noise the control removes."""
    if row.impossible or not math.isfinite(row.flip_rate.value):
        return None
    subject = f"{row.mode} flip of {row.attribute}: {row.from_} -> {row.to}"
    if row.judged_what != "flip rate":
        subject += f" ({row.judged_what})"
    est = row.judged_at(confidence_level)
    if est is None:
        return Measure(subject, row.flip_rate, None, row.rows,
                       f"not judged: the control for the {row.judged_what} could not be formed (too "
                       "few rows), and the raw flip rate includes what the control removes")
    return Measure(subject, est, row.judged_at, row.rows,
                   few_clusters(getattr(row, "clusters", None)),
                   _no_pass(row.attribute, estimated))
