"""Judge a run's typed findings against the plan's policy, with a stated error rate for the verdict.

Each rule is judged on a *family* of subjects (the groups, the flip rows, the slices, the comparison's
overall shortfall and worse slices). A subject *passes* when its whole interval lies on the right side of
the bound, *fails* when its whole interval lies on the wrong side, and is *inconclusive* when the
interval straddles the bound. The intervals are simultaneous: with ``R`` rules judged and a family of
``m`` subjects, each subject is judged on its two-sided interval at level ``1 - alpha / (R m)``
(Bonferroni over the subjects of every rule, ``alpha = 1 - confidence_level``). So the chance that the
verdict wrongly fails or wrongly passes any subject is at most ``alpha`` — for a model that meets
every rule exactly at its bound, the policy fails in at most ``alpha`` of runs. With one rule of one
subject the judged interval is the report's own.

Nothing passes on too little: a subject with fewer than ``min_rows`` rows, an interval of zero width,
or an estimate that is not honest for judging (slice rates measured on the rows that chose them, when
the search ran without a split) is inconclusive, with the reason. A rule whose section was not run is
inconclusive ("not measured"). Inconclusive rules fail the run only when ``fail_on_inconclusive`` is
set.

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
- ``max_regression``: the comparison's overall shortfall in its metric (candidate minus baseline,
  oriented by the metric so that larger is worse) and each worse slice's mean paired shortfall (family:
  one plus the worse-slice search's carried slices).

:func:`measure` reads the typed results of the analyses (no report dict, no string keys) and returns,
per rule, a :class:`Family` of :class:`Measure`; :func:`judge` turns those into a :class:`Verdict`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Mapping

from .options import PolicyOptions
from .stats import Estimate

__all__ = ["RULES", "Family", "Measure", "RuleResult", "Verdict", "judge", "measure"]

ADJUSTMENT = "bonferroni"


@dataclass(frozen=True)
class Rule:
    """A policy rule: which side of its bound passes, and which analysis measures it."""

    bound: str  # "lower": the interval must lie at or above it; "upper": at or below it
    section: str


RULES = {
    "min_impact_ratio": Rule("lower", "group metrics"),
    "max_fpr_gap": Rule("upper", "group metrics"),
    "max_fnr_gap": Rule("upper", "group metrics"),
    "max_error_gap": Rule("upper", "group metrics"),
    "max_flip_rate": Rule("upper", "flip tests"),
    "max_slice_gap": Rule("upper", "slice search"),
    "max_regression": Rule("upper", "model comparison"),
}


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
    """

    subject: str
    estimate: Estimate
    at: Callable[[float], Estimate] | None = None
    rows: int | None = None
    unjudged: str | None = None

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


@dataclass(frozen=True)
class RuleResult:
    """One rule judged on one subject.

    Attributes
    ----------
    name : str
        The policy key (``min_impact_ratio`` …).
    subject : str
    threshold : float
    value : dict or None
        The estimate judged, at ``level`` (value, low, high, method); None when not measured.
    status : str
        ``"pass"``, ``"fail"`` or ``"inconclusive"``.
    message : str
        Why, in a few words.
    level : float or None
        The simultaneous two-sided confidence level of the interval judged.
    family : int
        The number of hypotheses the rule's adjustment covers.
    """

    name: str
    subject: str
    threshold: float
    value: dict | None
    status: str
    message: str
    level: float | None = None
    family: int = 0

    def to_dict(self) -> dict:
        passed = {"pass": True, "fail": False}.get(self.status)
        return {"name": self.name, "subject": self.subject, "threshold": self.threshold,
                "value": self.value, "level": self.level, "family": self.family,
                "status": self.status, "passed": passed, "message": self.message}


@dataclass(frozen=True)
class Verdict:
    """The run's verdict.

    Attributes
    ----------
    rules : tuple of RuleResult
    fail_on_inconclusive : bool
    confidence_level : float
        One minus the verdict's stated error rate.
    rules_judged : int
        ``R``, the rules the error rate is split over.
    min_rows : int
    passed : bool or None
        None when the policy has no rules; False when any rule fails (or, with
        ``fail_on_inconclusive``, is inconclusive); True otherwise.
    """

    rules: tuple[RuleResult, ...]
    fail_on_inconclusive: bool
    confidence_level: float = 0.95
    rules_judged: int = 0
    min_rows: int = 0

    @property
    def passed(self) -> bool | None:
        if not self.rules:
            return None
        statuses = {r.status for r in self.rules}
        if "fail" in statuses or (self.fail_on_inconclusive and "inconclusive" in statuses):
            return False
        return True

    @property
    def status(self) -> str:
        if not self.rules:
            return "no policy"
        counts = self.counts()
        if counts["fail"] or (self.fail_on_inconclusive and counts["inconclusive"]):
            return "fail"
        return "inconclusive" if counts["inconclusive"] else "pass"

    def counts(self) -> dict:
        out = {"pass": 0, "fail": 0, "inconclusive": 0}
        for r in self.rules:
            out[r.status] += 1
        return out

    def to_dict(self) -> dict:
        return {"passed": self.passed, "status": self.status,
                "fail_on_inconclusive": self.fail_on_inconclusive, "counts": self.counts(),
                "error_control": {"error_rate": 1.0 - self.confidence_level,
                                  "adjustment": ADJUSTMENT, "rules_judged": self.rules_judged,
                                  "min_rows": self.min_rows},
                "rules": [r.to_dict() for r in self.rules]}


def _undefined(est: Estimate | None) -> bool:
    return est is None or any(not math.isfinite(v) for v in (est.value, est.low, est.high))


def _pct(level: float) -> str:
    text = f"{100 * level:.3f}".rstrip("0").rstrip(".")
    return f"{text} %"


def _judge_one(name, m: Measure, threshold, *, upper, level, report_level, family, min_rows):
    def result(est, status, why):
        return RuleResult(name, m.subject, threshold, None if est is None else est.to_dict(),
                          status, why, level, family)

    if m.unjudged:
        return result(m.estimate, "inconclusive", m.unjudged)
    if m.rows is not None and m.rows < min_rows:
        return result(m.estimate, "inconclusive",
                      f"{m.rows} rows, fewer than the policy's minimum of {min_rows}")
    est = m.interval(level, report_level)
    if est is None:
        return result(m.estimate, "inconclusive", f"no interval at the simultaneous {_pct(level)} level")
    if _undefined(est):
        return result(est, "inconclusive", "not measured (the estimate is undefined)")
    if est.high - est.low <= 0:
        return result(est, "inconclusive", "the interval has zero width: no evidence either way")
    low, high = est.low, est.high
    where = "whole interval"
    if upper:
        if high <= threshold:
            return result(est, "pass", f"{where} at or below the bound {threshold:g}")
        if low > threshold:
            return result(est, "fail", f"{where} above the bound {threshold:g}")
    else:
        if low >= threshold:
            return result(est, "pass", f"{where} at or above the bound {threshold:g}")
        if high < threshold:
            return result(est, "fail", f"{where} below the bound {threshold:g}")
    return result(est, "inconclusive", f"the interval straddles the bound {threshold:g}")


def judge(measured: Mapping[str, Family | None], policy: PolicyOptions, *,
          confidence_level: float = 0.95) -> Verdict:
    """Judge the measured families against ``policy`` at a simultaneous level.

    Parameters
    ----------
    measured : mapping
        Rule name -> :class:`Family` (from :func:`measure`); a missing or None entry means the
        analysis that measures the rule was not run, and a set rule is then inconclusive.
    policy : PolicyOptions
    confidence_level : float, default=0.95
        One minus the verdict's error rate: the chance that any subject of any rule is wrongly
        failed or wrongly passed is at most ``1 - confidence_level`` (Bonferroni).

    Returns
    -------
    Verdict
    """
    alpha = 1.0 - confidence_level
    active = [name for name in RULES
              if getattr(policy, name) is not None and measured.get(name) is not None]
    n_rules = len(active)
    rules: list[RuleResult] = []
    for name, rule in RULES.items():
        bound = getattr(policy, name)
        if bound is None:
            continue
        fam = measured.get(name)
        if fam is None:
            rules.append(RuleResult(name, "(not run)", bound, None, "inconclusive",
                                    f"`{name}` is set but the {rule.section} were not run; "
                                    "nothing was measured"))
            continue
        size = max(fam.size, len(fam.measures), 1)
        level = 1.0 - alpha / (n_rules * size)
        rules.extend(
            _judge_one(name, m, bound, upper=rule.bound == "upper", level=level,
                       report_level=confidence_level, family=size, min_rows=policy.min_rows)
            for m in fam.measures)
    return Verdict(tuple(rules), policy.fail_on_inconclusive, confidence_level, n_rules,
                   policy.min_rows)


# -- what each rule is measured on -----------------------------------------------------------------


def _worse_up(est: Estimate, sign: int) -> Estimate:
    """``est`` turned so that larger is worse (``sign`` -1: a shortfall where lower is worse)."""
    if sign > 0:
        return est
    return Estimate(-est.value, -est.high, -est.low, est.method)


def _turned(at, sign):
    return at if sign > 0 else (lambda level: _worse_up(at(level), -1))


_SELECTED = ("no split: the {what} was estimated on the rows that chose the slice and is overstated; "
             "search with a split to judge it")


def measure(*, groups=None, slices=None, flips=None, comparison=None,
            confidence_level: float = 0.95) -> dict:
    """The family each rule is judged on, from the typed results of the analyses.

    Parameters
    ----------
    groups : GroupMetrics, optional
    slices : SliceFindings, optional
    flips : sequence of FlipFindings, optional
    comparison : Comparison, optional
    confidence_level : float, default=0.95
        The report's level (the estimates shown beside each judgement).

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
        ms = tuple(Measure(f"{r.attribute} = {r.group} (vs {r.reference_group})", r.impact_ratio,
                           r.impact_ratio_at, r.rows) for r in judged)
        # an attribute whose reference was chosen from the data has intervals that already hold
        # together (Bonferroni over its pairs, see probe.groups): one hypothesis for all its groups
        chosen = {r.attribute for r in judged if not r.reference_fixed}
        size = len(chosen) + sum(1 for r in judged if r.attribute not in chosen)
        out["min_impact_ratio"] = Family(ms, size, f"{len(ms)} groups of {len({r.attribute for r in judged})} attributes")
    for name, rate in _GAPS.items():
        out[name] = None if groups is None else _gap_family(groups, rate)
    flip_ms = tuple(m for f in flips or () for row in f.rows
                    if (m := _flip_measure(row, confidence_level)) is not None)
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
                    _worse_up(s.gap, sign), _turned(s.gap_at, sign), s.rows, why)
            for s in slices.found)
        out["max_slice_gap"] = Family(ms, slices.family,
                                      f"{slices.family} slices carried to the estimate part")
    if comparison is None:
        out["max_regression"] = None
    else:
        o, found = comparison.overall, comparison.worse_slices
        why = _SELECTED.format(what="shortfall") if found.selected else None
        ms = (Measure(f"overall {o.metric}", o.shortfall, o.shortfall_at, o.rows),) + tuple(
            Measure(f"worse slice {s.rank}: {s.label}", s.rate,
                    lambda level, s=s: comparison.slice_shortfall_at(s, level), s.rows, why)
            for s in comparison.worse)
        out["max_regression"] = Family(ms, 1 + found.family,
                                       f"the overall shortfall and {found.family} slices")
    return out


_GAPS = {"max_fpr_gap": "fpr", "max_fnr_gap": "fnr", "max_error_gap": "error_rate"}
_GAP_WORDS = {"fpr": "FPR", "fnr": "FNR", "error_rate": "error rate"}


def _absolute(est: Estimate) -> Estimate:
    """``|d|`` with the interval of ``|d|`` that ``d``'s interval implies."""
    if _undefined(est):
        return Estimate(math.nan, math.nan, math.nan, est.method)
    low, high = est.low, est.high
    if low >= 0:
        return Estimate(abs(est.value), low, high, est.method)
    if high <= 0:
        return Estimate(abs(est.value), -high, -low, est.method)
    return Estimate(abs(est.value), 0.0, max(-low, high), est.method)


def _gap_family(groups, rate: str) -> Family:
    """Every group's absolute gap in ``rate`` to its reference group (the reference left out)."""
    compared = [r for r in groups.rows if r.group != r.reference_group]
    ms = tuple(
        Measure(f"{r.attribute} = {r.group} (vs {r.reference_group}): {_GAP_WORDS[rate]} gap",
                _absolute(r.gap_at(rate, groups.confidence_level)),
                lambda level, r=r: _absolute(r.gap_at(rate, level)), r.gap_rows(rate))
        for r in compared)
    attributes = len({r.attribute for r in compared})
    return Family(ms, len(ms), f"{len(ms)} groups of {attributes} attributes")


def _flip_measure(row, confidence_level) -> Measure | None:
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
    return Measure(subject, est, row.judged_at, row.rows)
