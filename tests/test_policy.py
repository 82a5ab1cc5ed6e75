"""Rules judged on their intervals: pass, fail and inconclusive on constructed cases."""

import pytest

from probe.options import PolicyOptions
from probe.policy import judge


def est(value, low, high, method="wilson"):
    return {"value": value, "low": low, "high": high, "method": method}


def group(name, ir, *, small=False, ref="A"):
    return {"attribute": "g", "group": name, "reference_group": ref, "small": small,
            "impact_ratio": ir}


REPORT = {
    "groups": [
        group("A", est(1.0, 1.0, 1.0)),                 # the reference: not judged
        group("B", est(0.90, 0.85, 0.95)),              # confidently above 0.8: pass
        group("C", est(0.60, 0.50, 0.70)),              # confidently below: fail
        group("D", est(0.81, 0.70, 0.92)),              # straddles: inconclusive
        group("E", est(0.10, 0.0, 0.5), small=True),    # under 2 %: not judged
    ],
    "flips": [{"attribute": "sex", "mode": "direct", "from": "F", "to": "M",
               "flip_rate": est(0.002, 0.001, 0.004)}],
    "slices": {"found": [{"rank": 1, "label": "x = 1", "gap": est(0.2, 0.15, 0.25, "newcombe")}]},
    "comparison": None,
}


def test_each_status_from_its_interval():
    verdict = judge(REPORT, PolicyOptions(min_impact_ratio=0.8))
    statuses = {r.subject.split(" (")[0]: r.status for r in verdict.rules}
    assert statuses == {"g = B": "pass", "g = C": "fail", "g = D": "inconclusive"}
    assert verdict.passed is False and verdict.status == "fail"


def test_inconclusive_fails_only_when_asked():
    report = {**REPORT, "groups": REPORT["groups"][:2] + REPORT["groups"][3:4]}
    lenient = judge(report, PolicyOptions(min_impact_ratio=0.8))
    assert lenient.passed is True and lenient.status == "inconclusive"
    strict = judge(report, PolicyOptions(min_impact_ratio=0.8, fail_on_inconclusive=True))
    assert strict.passed is False and strict.status == "fail"


def test_upper_bound_rules_and_sections_not_run():
    verdict = judge(REPORT, PolicyOptions(max_flip_rate=0.01, max_slice_gap=0.10, max_regression=0.02))
    by_name = {r.name: r for r in verdict.rules}
    assert by_name["max_flip_rate"].status == "pass"
    assert by_name["max_slice_gap"].status == "fail"
    assert by_name["max_regression"].status == "inconclusive"  # comparison not run
    assert "not run" in by_name["max_regression"].message
    d = verdict.to_dict()
    assert d["counts"] == {"pass": 1, "fail": 1, "inconclusive": 1}
    assert [r["passed"] for r in d["rules"]] == [True, False, None]


def test_no_rules_means_no_verdict():
    verdict = judge(REPORT, PolicyOptions())
    assert verdict.passed is None and verdict.to_dict()["status"] == "no policy"


@pytest.mark.parametrize("low, high, status", [(0.80, 0.9, "pass"), (0.7, 0.7999, "fail"),
                                               (0.79, 0.81, "inconclusive")])
def test_boundaries_are_inclusive_for_pass(low, high, status):
    report = {"groups": [group("A", est(1, 1, 1)), group("B", est((low + high) / 2, low, high))]}
    assert judge(report, PolicyOptions(min_impact_ratio=0.8)).rules[0].status == status


def test_twins_are_judged_on_their_excess_over_own_group_twins():
    row = {"attribute": "sex", "mode": "twins", "from": "F", "to": "M",
           "flip_rate": est(0.09, 0.085, 0.095), "excess": est(0.004, -0.002, 0.008, "wald")}
    verdict = judge({"flips": [row]}, PolicyOptions(max_flip_rate=0.01))
    (rule,) = verdict.rules
    assert rule.status == "pass" and "excess" in rule.subject
    assert rule.value["value"] == 0.004


def test_a_selection_shortfall_is_judged_as_a_gap():
    # planted: a slice selected 20 % against 60 % for the rest; gap -0.386 [-0.42, -0.35]
    slices = {"direction": "lower", "found": [{"rank": 1, "label": "x = 1",
                                               "gap": est(-0.386, -0.42, -0.35, "newcombe")}]}
    (rule,) = judge({"slices": slices}, PolicyOptions(max_slice_gap=0.05)).rules
    assert rule.status == "fail" and rule.value["low"] == 0.35 and rule.value["high"] == 0.42
