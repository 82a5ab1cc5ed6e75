"""Rules judged on their intervals: pass, fail and inconclusive on constructed cases; what each rule
is measured on, read from typed results."""

from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from probe.groups import group_metrics
from probe.options import PolicyOptions
from probe.policy import Measure, judge, measure
from probe.stats import Estimate

NAN = float("nan")


def est(value, low, high, method="wilson"):
    return Estimate(value, low, high, method)


IMPACT = [
    Measure("g = B (vs A)", est(0.90, 0.85, 0.95)),  # confidently above 0.8: pass
    Measure("g = C (vs A)", est(0.60, 0.50, 0.70)),  # confidently below: fail
    Measure("g = D (vs A)", est(0.81, 0.70, 0.92)),  # straddles: inconclusive
]
MEASURED = {
    "min_impact_ratio": IMPACT,
    "max_flip_rate": [Measure("direct flip of sex: F -> M", est(0.002, 0.001, 0.004))],
    "max_slice_gap": [Measure("slice 1: x = 1", est(0.2, 0.15, 0.25, "newcombe"))],
    "max_regression": None,  # the comparison was not run
}


def test_each_status_from_its_interval():
    verdict = judge(MEASURED, PolicyOptions(min_impact_ratio=0.8))
    statuses = {r.subject.split(" (")[0]: r.status for r in verdict.rules}
    assert statuses == {"g = B": "pass", "g = C": "fail", "g = D": "inconclusive"}
    assert verdict.passed is False and verdict.status == "fail"


def test_inconclusive_fails_only_when_asked():
    measured = {"min_impact_ratio": [IMPACT[0], IMPACT[2]]}
    lenient = judge(measured, PolicyOptions(min_impact_ratio=0.8))
    assert lenient.passed is True and lenient.status == "inconclusive"
    strict = judge(measured, PolicyOptions(min_impact_ratio=0.8, fail_on_inconclusive=True))
    assert strict.passed is False and strict.status == "fail"


def test_upper_bound_rules_and_sections_not_run():
    verdict = judge(MEASURED, PolicyOptions(max_flip_rate=0.01, max_slice_gap=0.10,
                                            max_regression=0.02))
    by_name = {r.name: r for r in verdict.rules}
    assert by_name["max_flip_rate"].status == "pass"
    assert by_name["max_slice_gap"].status == "fail"
    assert by_name["max_regression"].status == "inconclusive"  # comparison not run
    assert "not run" in by_name["max_regression"].message
    d = verdict.to_dict()
    assert d["counts"] == {"pass": 1, "fail": 1, "inconclusive": 1}
    assert [r["passed"] for r in d["rules"]] == [True, False, None]


def test_no_rules_means_no_verdict():
    verdict = judge(MEASURED, PolicyOptions())
    assert verdict.passed is None and verdict.to_dict()["status"] == "no policy"


def test_an_undefined_estimate_is_inconclusive():
    (rule,) = judge({"max_flip_rate": [Measure("x", est(NAN, NAN, NAN))]},
                    PolicyOptions(max_flip_rate=0.01)).rules
    assert rule.status == "inconclusive" and "undefined" in rule.message


@pytest.mark.parametrize("low, high, status", [(0.80, 0.9, "pass"), (0.7, 0.7999, "fail"),
                                               (0.79, 0.81, "inconclusive")])
def test_boundaries_are_inclusive_for_pass(low, high, status):
    measured = {"min_impact_ratio": [Measure("g = B", est((low + high) / 2, low, high))]}
    assert judge(measured, PolicyOptions(min_impact_ratio=0.8)).rules[0].status == status


def test_impact_ratio_is_measured_on_every_group_but_the_reference_and_small_ones():
    # planted: a selects 60 %, b 30 %, c (1 % of rows, small) 0 %; the reference is a
    f = pd.DataFrame({"g": ["a"] * 500 + ["b"] * 490 + ["c"] * 10})
    sel = np.r_[np.arange(500) < 300, np.arange(490) < 147, np.zeros(10, bool)]
    m = measure(groups=group_metrics(f, sel, sel, attributes=["g"]))
    (only,) = m["min_impact_ratio"]
    assert only.subject == "g = b (vs a)"
    assert only.estimate.value == pytest.approx(0.3 / 0.6)
    assert m["max_slice_gap"] is None and m["max_regression"] is None


def _row(mode, flip, excess=None):
    return SimpleNamespace(attribute="sex", mode=mode, from_="F", to="M", flip_rate=flip,
                           excess=excess)


def test_twins_are_judged_on_their_excess_over_own_group_twins():
    flips = [SimpleNamespace(rows=(_row("twins", est(0.09, 0.085, 0.095),
                                        est(0.004, -0.002, 0.008, "paired-wald")),))]
    (rule,) = judge(measure(flips=flips), PolicyOptions(max_flip_rate=0.01)).rules
    assert rule.status == "pass" and "excess" in rule.subject
    assert rule.value["value"] == 0.004


def test_flip_tests_that_did_not_apply_leave_the_rule_not_run():
    flips = [SimpleNamespace(rows=(_row("direct", est(NAN, NAN, NAN)),)),
             SimpleNamespace(rows=())]
    (rule,) = judge(measure(flips=flips), PolicyOptions(max_flip_rate=0.01)).rules
    assert rule.subject == "(not run)" and rule.status == "inconclusive"


def test_a_selection_shortfall_is_judged_as_a_gap():
    # planted: a slice selected 20 % against 60 % for the rest; gap -0.386 [-0.42, -0.35]
    found = SimpleNamespace(rank=1, label="x = 1", gap=est(-0.386, -0.42, -0.35, "newcombe"))
    slices = SimpleNamespace(direction="lower", found=(found,))
    (rule,) = judge(measure(slices=slices), PolicyOptions(max_slice_gap=0.05)).rules
    assert rule.status == "fail" and rule.value["low"] == 0.35 and rule.value["high"] == 0.42
