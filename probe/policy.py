"""Judge a run's typed findings against the plan's policy: every rule on its interval, not its point value.

A rule with a lower bound (``min_impact_ratio``) *passes* when the whole interval lies at or above the
bound, *fails* when the whole interval lies below it, and is *inconclusive* when the interval straddles
it; a rule with an upper bound (``max_flip_rate``, ``max_slice_gap``, ``max_regression``) the mirror
image. A rule whose section was not run is inconclusive ("not measured"). Inconclusive rules fail the
run only when ``fail_on_inconclusive`` is set.

What each rule is measured on:

- ``min_impact_ratio``: every group's impact ratio (groups and intersections), except the reference
  group and groups under 2 % of rows (the Uniform Guidelines' Q&A 11 compares groups above 2 %; NYC's
  rules allow leaving them out of impact ratios), which are listed as not judged.
- ``max_flip_rate``: every applicable flip row's flip rate; for twins, the excess of the cross-group
  discordance over the own-group discordance (the part attributable to the group), when reported.
- ``max_slice_gap``: every reported slice's gap to the rest of the data (estimate part), oriented so
  that larger is worse: for selection (where the lowest rates are the finding) the shortfall.
- ``max_regression``: the comparison's overall shortfall in its metric (candidate minus baseline,
  oriented by the metric so that larger is worse: for selection, fewer favourable decisions), and
  each worse slice's mean paired shortfall.

:func:`measure` reads the typed results of the analyses (no report dict, no string keys) and
returns, per rule, the estimates to judge, each oriented so that the rule's bound applies as stated;
:func:`judge` turns those into a :class:`Verdict`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping, Sequence

from .options import PolicyOptions
from .stats import Estimate

__all__ = ["RULES", "Measure", "RuleResult", "Verdict", "judge", "measure"]


@dataclass(frozen=True)
class Rule:
    """A policy rule: which side of its bound passes, and which analysis measures it."""

    bound: str  # "lower": the interval must lie at or above it; "upper": at or below it
    section: str


RULES = {
    "min_impact_ratio": Rule("lower", "group metrics"),
    "max_flip_rate": Rule("upper", "flip tests"),
    "max_slice_gap": Rule("upper", "slice search"),
    "max_regression": Rule("upper", "model comparison"),
}


@dataclass(frozen=True)
class Measure:
    """One estimate a rule is judged on.

    Attributes
    ----------
    subject : str
        What it measures (``sex = F (vs M)``, ``slice 2: …``, ``overall error``).
    estimate : Estimate
        Oriented so that the rule's bound applies as written (a selection shortfall is positive).
    """

    subject: str
    estimate: Estimate


@dataclass(frozen=True)
class RuleResult:
    """One rule judged on one subject.

    Attributes
    ----------
    name : str
        The policy key (``min_impact_ratio`` …).
    subject : str
        What it was measured on (``sex = F``, ``slice 2: …``, ``overall error``).
    threshold : float
    value : dict or None
        The estimate object (value, low, high, method), None when not measured.
    status : str
        ``"pass"``, ``"fail"`` or ``"inconclusive"``.
    message : str
        Why, in a few words (the value and its interval are in ``value``).
    """

    name: str
    subject: str
    threshold: float
    value: dict | None
    status: str
    message: str

    def to_dict(self) -> dict:
        passed = {"pass": True, "fail": False}.get(self.status)
        return {"name": self.name, "subject": self.subject, "threshold": self.threshold,
                "value": self.value, "status": self.status, "passed": passed,
                "message": self.message}


@dataclass(frozen=True)
class Verdict:
    """The run's verdict.

    Attributes
    ----------
    rules : tuple of RuleResult
    fail_on_inconclusive : bool
    passed : bool or None
        None when the policy has no rules; False when any rule fails (or, with
        ``fail_on_inconclusive``, is inconclusive); True otherwise.
    """

    rules: tuple[RuleResult, ...]
    fail_on_inconclusive: bool

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
                "rules": [r.to_dict() for r in self.rules]}


def _undefined(est: Estimate | None) -> bool:
    return est is None or any(not math.isfinite(v) for v in (est.value, est.low, est.high))


def _judge(name, subject, threshold, est: Estimate | None, *, upper: bool) -> RuleResult:
    if _undefined(est):
        return RuleResult(name, subject, threshold, None if est is None else est.to_dict(),
                          "inconclusive", "not measured (the estimate is undefined)")
    low, high = est.low, est.high
    if upper:
        if high <= threshold:
            status, why = "pass", f"whole interval at or below the bound {threshold:g}"
        elif low > threshold:
            status, why = "fail", f"whole interval above the bound {threshold:g}"
        else:
            status, why = "inconclusive", f"interval straddles the bound {threshold:g}"
    else:
        if low >= threshold:
            status, why = "pass", f"whole interval at or above the bound {threshold:g}"
        elif high < threshold:
            status, why = "fail", f"whole interval below the bound {threshold:g}"
        else:
            status, why = "inconclusive", f"interval straddles the bound {threshold:g}"
    return RuleResult(name, subject, threshold, est.to_dict(), status, why)


def _worse_up(est: Estimate, sign: int) -> Estimate:
    """``est`` turned so that larger is worse (``sign`` -1: a shortfall where lower is worse)."""
    if sign > 0:
        return est
    return Estimate(-est.value, -est.high, -est.low, est.method)


def measure(*, groups=None, slices=None, flips=None, comparison=None) -> dict:
    """The estimates each rule is judged on, from the typed results of the analyses.

    Parameters
    ----------
    groups : GroupMetrics, optional
    slices : SliceFindings, optional
    flips : sequence of FlipFindings, optional
    comparison : Comparison, optional

    Returns
    -------
    dict
        Rule name -> list of :class:`Measure`, or None when the analysis was not run (or, for
        flips, no test applied).
    """
    out: dict[str, list[Measure] | None] = {}
    out["min_impact_ratio"] = None if groups is None else [
        Measure(f"{r.attribute} = {r.group} (vs {r.reference_group})", r.impact_ratio)
        for r in groups.rows if r.group != r.reference_group and not r.small]
    rows = [row for f in flips or () for row in f.rows if math.isfinite(row.flip_rate.value)]
    out["max_flip_rate"] = [_flip_measure(row) for row in rows] or None
    if slices is None:
        out["max_slice_gap"] = None
    else:
        lower = slices.direction == "lower"
        out["max_slice_gap"] = [
            Measure(f"slice {s.rank}: {s.label}" + (" (shortfall in selection rate)" if lower else ""),
                    _worse_up(s.gap, -1 if lower else 1)) for s in slices.found]
    if comparison is None:
        out["max_regression"] = None
    else:
        o = comparison.overall
        out["max_regression"] = [Measure(f"overall {o.metric}", o.shortfall)] + [
            Measure(f"worse slice {s.rank}: {s.label}", s.rate) for s in comparison.worse]
    return out


def _flip_measure(row) -> Measure:
    subject = f"{row.mode} flip of {row.attribute}: {row.from_} -> {row.to}"
    if row.mode == "twins" and row.excess is not None:
        # twins disagree with a person near the decision boundary whatever the group; only the
        # excess over twins from the person's own group is attributable to the group
        return Measure(subject + " (excess over own-group twins)", row.excess)
    return Measure(subject, row.flip_rate)


def judge(measured: Mapping[str, Sequence[Measure] | None], policy: PolicyOptions) -> Verdict:
    """Judge the measured estimates against ``policy``.

    Parameters
    ----------
    measured : mapping
        Rule name -> measures (from :func:`measure`); a missing or None entry means the analysis
        that measures the rule was not run, and a set rule is then inconclusive ("not measured").
    policy : PolicyOptions

    Returns
    -------
    Verdict
    """
    rules: list[RuleResult] = []
    for name, rule in RULES.items():
        bound = getattr(policy, name)
        if bound is None:
            continue
        items = measured.get(name)
        if items is None:
            rules.append(RuleResult(name, "(not run)", bound, None, "inconclusive",
                                    f"`{name}` is set but the {rule.section} were not run; "
                                    "nothing was measured"))
            continue
        rules.extend(_judge(name, m.subject, bound, m.estimate, upper=rule.bound == "upper")
                     for m in items)
    return Verdict(tuple(rules), policy.fail_on_inconclusive)
