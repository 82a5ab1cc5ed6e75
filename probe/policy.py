"""Judge a report against the plan's policy: every rule on its interval, not its point value.

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
- ``max_regression``: the comparison's overall difference in its metric (candidate minus baseline),
  and each worse slice's mean paired difference.
"""

from __future__ import annotations

from dataclasses import dataclass

from .options import PolicyOptions

__all__ = ["RuleResult", "Verdict", "judge"]


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


def _judge(name, subject, threshold, est, *, upper: bool) -> RuleResult:
    if est is None or est.get("value") is None or est.get("low") is None or est.get("high") is None:
        return RuleResult(name, subject, threshold, est, "inconclusive",
                          "not measured (the estimate is undefined)")
    low, high = est["low"], est["high"]
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
    return RuleResult(name, subject, threshold, est, status, why)


def _shortfall(est: dict) -> dict:
    """A gap where lower is worse (selection), turned so that larger is worse like the others."""
    neg = {k: (None if est.get(k) is None else -est[k]) for k in ("value", "low", "high")}
    return {"value": neg["value"], "low": neg["high"], "high": neg["low"], "method": est.get("method")}


def _not_run(name, threshold, section) -> RuleResult:
    return RuleResult(name, "(not run)", threshold, None, "inconclusive",
                      f"`{name}` is set but the {section} were not run; nothing was measured")


def judge(report: dict, policy: PolicyOptions) -> Verdict:
    """Judge the report's sections against ``policy``.

    Parameters
    ----------
    report : dict
        The report dict (its ``groups``, ``flips``, ``slices`` and ``comparison`` sections).
    policy : PolicyOptions

    Returns
    -------
    Verdict
    """
    rules: list[RuleResult] = []
    if policy.min_impact_ratio is not None:
        bound = policy.min_impact_ratio
        groups = report.get("groups")
        if groups is None:
            rules.append(_not_run("min_impact_ratio", bound, "group metrics"))
        else:
            for row in groups:
                if row["group"] == row["reference_group"] or row.get("small"):
                    continue
                subject = f"{row['attribute']} = {row['group']} (vs {row['reference_group']})"
                rules.append(_judge("min_impact_ratio", subject, bound, row["impact_ratio"],
                                    upper=False))
    if policy.max_flip_rate is not None:
        bound = policy.max_flip_rate
        flips = report.get("flips")
        applicable = [f for f in flips or () if f.get("flip_rate") is not None]
        if not applicable:
            rules.append(_not_run("max_flip_rate", bound, "flip tests"))
        for row in applicable:
            subject = f"{row['mode']} flip of {row['attribute']}: {row['from']} -> {row['to']}"
            measured = row["flip_rate"]
            if row["mode"] == "twins" and row.get("excess") is not None:
                # twins disagree with a person near the decision boundary whatever the group; only
                # the excess over twins from the person's own group is attributable to the group
                subject += " (excess over own-group twins)"
                measured = row["excess"]
            rules.append(_judge("max_flip_rate", subject, bound, measured, upper=True))
    if policy.max_slice_gap is not None:
        bound = policy.max_slice_gap
        slices = report.get("slices")
        if slices is None:
            rules.append(_not_run("max_slice_gap", bound, "slice search"))
        else:
            lower = slices.get("direction") == "lower"
            for s in slices["found"]:
                subject = f"slice {s['rank']}: {s['label']}"
                gap = _shortfall(s["gap"]) if lower else s["gap"]
                if lower:
                    subject += " (shortfall in selection rate)"
                rules.append(_judge("max_slice_gap", subject, bound, gap, upper=True))
    if policy.max_regression is not None:
        bound = policy.max_regression
        comparison = report.get("comparison")
        if comparison is None:
            rules.append(_not_run("max_regression", bound, "model comparison"))
        else:
            primary = comparison["overall"]
            # the shortfall is oriented so larger is worse (fewer selected, for the selection rate)
            rules.append(_judge("max_regression", f"overall {primary['metric']}", bound,
                                primary["shortfall"], upper=True))
            for s in comparison["worse_slices"]:
                subject = f"worse slice {s['rank']}: {s['label']}"
                rules.append(_judge("max_regression", subject, bound, s["rate"], upper=True))
    return Verdict(tuple(rules), policy.fail_on_inconclusive)
