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

What each rule is measured on (its family) is :mod:`probe.policy_measure`: :func:`measure` reads
the typed results of the analyses (no report dict, no string keys) and returns, per rule, a
:class:`Family` of :class:`Measure`; :func:`judge` turns those into a :class:`Verdict`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping

from .options import PolicyOptions
from .policy_measure import Family, Measure, measure, undefined

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
    if undefined(est):
        return result(est, "inconclusive", "not measured (the estimate is undefined)")
    if est.high - est.low <= 0:
        return result(est, "inconclusive", "the interval has zero width: no evidence either way")
    low, high = est.low, est.high
    where = "whole interval"
    if m.no_pass and (high <= threshold if upper else low >= threshold):
        return result(est, "inconclusive", m.no_pass)
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
