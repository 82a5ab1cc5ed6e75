"""Rules judged on simultaneous intervals: pass, fail and inconclusive on constructed cases, the
Bonferroni level over rules and families, what is never passed (too few rows, zero width, selected
estimates), and what each rule is measured on, read from typed results."""

import math
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.proportion import proportion_confint

from probe.groups import group_metrics
from probe.options import PolicyOptions
from probe.policy import Family, Measure, judge, measure
from probe.stats import Estimate

NAN = float("nan")


def est(value, low, high, method="wilson"):
    return Estimate(value, low, high, method)


def wilson_at(x, n):
    """A rate's Wilson interval at any level (statsmodels, independent of probe)."""
    def at(level):
        low, high = proportion_confint(x, n, alpha=1 - level, method="wilson")
        return Estimate(x / n, float(low), float(high), "wilson")
    return at


def const(e):
    """A measure's interval that is the same at every level (constructed cases)."""
    return lambda level: e


def fam(*measures, size=None):
    return Family(tuple(measures), size or len(measures), "test")


def m(subject, e, **kw):
    return Measure(subject, e, const(e), **kw)


IMPACT = fam(
    m("g = B (vs A)", est(0.90, 0.85, 0.95), rows=500),  # confidently above 0.8: pass
    m("g = C (vs A)", est(0.60, 0.50, 0.70), rows=500),  # confidently below: fail
    m("g = D (vs A)", est(0.81, 0.70, 0.92), rows=500),  # straddles: inconclusive
)


def test_each_status_from_its_interval():
    verdict = judge({"min_impact_ratio": IMPACT}, PolicyOptions(min_impact_ratio=0.8))
    statuses = {r.subject.split(" (")[0]: r.status for r in verdict.rules}
    assert statuses == {"g = B": "pass", "g = C": "fail", "g = D": "inconclusive"}
    assert verdict.passed is False and verdict.status == "fail"
    assert all(r.level == pytest.approx(1 - 0.05 / 3) for r in verdict.rules)


def test_without_an_interval_at_the_simultaneous_level_nothing_is_judged():
    e = est(0.90, 0.85, 0.95)  # passes at the report's level, but a family of 2 needs another
    verdict = judge({"min_impact_ratio": fam(Measure("a", e), Measure("b", e))},
                    PolicyOptions(min_impact_ratio=0.8))
    assert {r.status for r in verdict.rules} == {"inconclusive"}
    assert "no interval at" in verdict.rules[0].message
    (single,) = judge({"min_impact_ratio": fam(Measure("a", e))},
                      PolicyOptions(min_impact_ratio=0.8)).rules
    assert single.status == "pass"


def test_the_level_is_bonferroni_over_rules_and_families():
    # two rules judged (R = 2): a family of 4 flip rows and a slice family of 50 (2 listed)
    flips = fam(*[Measure(f"flip {i}", wilson_at(5, 1000)(0.95), wilson_at(5, 1000), 1000)
                  for i in range(4)])
    slices = fam(Measure("slice 1", wilson_at(300, 1000)(0.95), wilson_at(300, 1000), 1000),
                 Measure("slice 2", wilson_at(30, 1000)(0.95), wilson_at(30, 1000), 1000), size=50)
    verdict = judge({"max_flip_rate": flips, "max_slice_gap": slices},
                    PolicyOptions(max_flip_rate=0.05, max_slice_gap=0.1))
    by = {r.subject: r for r in verdict.rules}
    assert by["flip 0"].level == pytest.approx(1 - 0.05 / (2 * 4))
    assert by["slice 1"].level == pytest.approx(1 - 0.05 / (2 * 50))
    assert by["slice 1"].family == 50
    # the judged interval is the measure's own at that level
    low, high = proportion_confint(300, 1000, alpha=0.05 / 100, method="wilson")
    assert by["slice 1"].value["low"] == pytest.approx(low)
    assert by["slice 1"].status == "fail" and by["slice 2"].status == "pass"
    ec = verdict.to_dict()["error_control"]
    assert ec == {"error_rate": pytest.approx(0.05), "adjustment": "bonferroni",
                  "rules_judged": 2, "min_rows": 30}


def test_a_subject_at_the_bound_fails_in_at_most_alpha_of_runs():
    # planted: 20 flip rows whose true rate is exactly the bound 0.05 (n = 400 each); a correct
    # simultaneous judgement fails the policy in <= 5 % of runs; 400 runs, so 0.05 + 3 MC s.e.
    # = 0.083 is a bound a correct method exceeds with probability < 0.002
    rng = np.random.default_rng(0)
    fails = 0
    for _ in range(400):
        xs = rng.binomial(400, 0.05, size=20)
        f = fam(*[Measure(f"r{i}", wilson_at(x, 400)(0.95), wilson_at(x, 400), 400)
                  for i, x in enumerate(xs)])
        fails += judge({"max_flip_rate": f}, PolicyOptions(max_flip_rate=0.05)).status == "fail"
    assert fails / 400 <= 0.083


def test_inconclusive_fails_only_when_asked():
    measured = {"min_impact_ratio": fam(IMPACT.measures[0], IMPACT.measures[2])}
    lenient = judge(measured, PolicyOptions(min_impact_ratio=0.8))
    assert lenient.passed is True and lenient.status == "inconclusive"
    strict = judge(measured, PolicyOptions(min_impact_ratio=0.8, fail_on_inconclusive=True))
    assert strict.passed is False and strict.status == "fail"


def test_too_few_rows_zero_width_and_selected_estimates_never_pass():
    f = fam(m("small", est(0.0, 0.0, 0.01), rows=12),
            m("flat", est(0.0, 0.0, 0.0), rows=5000),
            m("chosen", est(0.0, 0.0, 0.01), rows=5000, unjudged="no split: overstated"))
    rules = judge({"max_flip_rate": f}, PolicyOptions(max_flip_rate=0.05)).rules
    assert [r.status for r in rules] == ["inconclusive"] * 3
    assert "fewer than the policy's minimum of 30" in rules[0].message
    assert "zero width" in rules[1].message
    assert rules[2].message == "no split: overstated"


def test_sections_not_run_and_no_rules():
    verdict = judge({"max_regression": None}, PolicyOptions(max_regression=0.02))
    (rule,) = verdict.rules
    assert rule.status == "inconclusive" and "not run" in rule.message
    assert judge({}, PolicyOptions()).passed is None


def test_an_undefined_estimate_is_inconclusive():
    (rule,) = judge({"max_flip_rate": fam(Measure("x", est(NAN, NAN, NAN)))},
                    PolicyOptions(max_flip_rate=0.01)).rules
    assert rule.status == "inconclusive" and "undefined" in rule.message


@pytest.mark.parametrize("low, high, status", [(0.80, 0.9, "pass"), (0.7, 0.7999, "fail"),
                                               (0.79, 0.81, "inconclusive")])
def test_boundaries_are_inclusive_for_pass(low, high, status):
    measured = {"min_impact_ratio": fam(m("g = B", est((low + high) / 2, low, high)))}
    assert judge(measured, PolicyOptions(min_impact_ratio=0.8)).rules[0].status == status


def test_impact_ratio_is_measured_on_every_group_but_the_reference_and_small_ones():
    # planted: a selects 60 %, b 30 %, c (1 % of rows, small) 0 %; the reference is a
    f = pd.DataFrame({"g": ["a"] * 500 + ["b"] * 490 + ["c"] * 10})
    sel = np.r_[np.arange(500) < 300, np.arange(490) < 147, np.zeros(10, bool)]
    m = measure(groups=group_metrics(f, sel, sel, attributes=["g"]))
    (only,) = m["min_impact_ratio"].measures
    assert only.subject == "g = b (vs a)" and only.rows == 490
    assert only.estimate.value == pytest.approx(0.3 / 0.6)
    assert m["max_slice_gap"] is None and m["max_regression"] is None


def _row(mode, flip, what="flip rate", raw=None):
    return SimpleNamespace(attribute="sex", mode=mode, from_="F", to="M", rows=800,
                           impossible=not math.isfinite(flip.value) if flip else False,
                           flip_rate=raw or flip, judged_what=what, judged_at=lambda level: flip)


def test_flip_rows_are_judged_on_their_judged_figure():
    flips = [SimpleNamespace(rows=(_row("twins", est(0.004, -0.002, 0.008, "t"),
                                        "excess over own-group twins"),))]
    (rule,) = judge(measure(flips=flips), PolicyOptions(max_flip_rate=0.01)).rules
    assert rule.status == "pass" and "excess" in rule.subject
    assert rule.value["value"] == 0.004


def test_a_flip_row_without_its_control_is_inconclusive_not_dropped():
    # transport scored (raw rate 3 %) but the group was too small for a placebo: judged_at is None
    flips = [SimpleNamespace(rows=(_row("transport", None, "excess over the placebo",
                                        raw=est(0.03, 0.02, 0.04)),))]
    (rule,) = judge(measure(flips=flips), PolicyOptions(max_flip_rate=0.01)).rules
    assert rule.status == "inconclusive" and "could not be formed" in rule.message
    assert rule.value["value"] == 0.03


def test_flip_tests_that_did_not_apply_leave_the_rule_not_run():
    flips = [SimpleNamespace(rows=(_row("direct", est(NAN, NAN, NAN)),)),
             SimpleNamespace(rows=())]
    (rule,) = judge(measure(flips=flips), PolicyOptions(max_flip_rate=0.01)).rules
    assert rule.subject == "(not run)" and rule.status == "inconclusive"


def _slices(selected, gap):
    found = SimpleNamespace(rank=1, label="x = 1", rows=900, gap=gap, gap_at=lambda level: gap)
    return SimpleNamespace(direction="lower", found=(found,), selected=selected, family=1)


def test_a_selection_shortfall_is_judged_as_a_gap():
    # planted: a slice selected 20 % against 60 % for the rest; gap -0.386 [-0.42, -0.35]
    slices = _slices(False, est(-0.386, -0.42, -0.35, "newcombe"))
    (rule,) = judge(measure(slices=slices), PolicyOptions(max_slice_gap=0.05)).rules
    assert rule.status == "fail" and rule.value["low"] == 0.35 and rule.value["high"] == 0.42


def test_slice_gaps_without_a_split_are_not_judged():
    slices = _slices(True, est(-0.386, -0.42, -0.35, "newcombe"))
    (rule,) = judge(measure(slices=slices), PolicyOptions(max_slice_gap=0.05)).rules
    assert rule.status == "inconclusive" and "no split" in rule.message


# -- the gap rules (max_fpr_gap, max_fnr_gap, max_error_gap) ---------------------------------------


def _gap_data():
    """Planted: 3 groups of 600 rows, half label-positive; FPR a 0.10, b 0.40, c 0.12; FNR 0.10
    everywhere; a fixed as the reference. Plus an intersection with a second attribute."""
    g = np.repeat(["a", "b", "c"], 600)
    h = np.tile(["u", "v"], 900)
    y = np.tile(np.r_[np.ones(300, bool), np.zeros(300, bool)], 3)
    k = np.tile(np.arange(300), 6)
    fpr = np.repeat([0.10, 0.40, 0.12], 600)
    pred = np.where(y, k >= 30, k < (fpr * 300).round())
    return pd.DataFrame({"g": g, "h": h}), y, pred


def test_rate_gaps_are_measured_on_every_group_but_the_reference():
    f, y, pred = _gap_data()
    gm = group_metrics(f, y, pred, attributes=["g", "h"], intersections=[["g", "h"]],
                       reference={"g": "a", "h": "u", "g & h": "a & u"})
    fam_ = measure(groups=gm)["max_fpr_gap"]
    # brute force: every row of every attribute and intersection but its reference group
    expected = [(r.attribute, r.group) for r in gm.rows if r.group != r.reference_group]
    assert [m_.subject.split(" (vs")[0] for m_ in fam_.measures] == [
        f"{a} = {g}" for a, g in expected]
    assert fam_.size == len(expected) == 2 + 1 + 5
    by = {m_.subject.split(" (vs")[0]: m_ for m_ in fam_.measures}
    b = by["g = b"]
    assert b.estimate.value == pytest.approx(0.40 - 0.10)
    assert b.rows == 300  # the label-negatives of b and of a
    # the interval of |d| is Newcombe's of d (statsmodels), folded at zero
    from statsmodels.stats.proportion import confint_proportions_2indep
    low, high = confint_proportions_2indep(120, 300, 30, 300, method="newcomb", compare="diff",
                                           alpha=0.01)
    assert (b.at(0.99).low, b.at(0.99).high) == pytest.approx((low, high))
    c = by["g = c"]  # 0.12 - 0.10: the interval holds 0, so |d| runs from 0
    low, high = confint_proportions_2indep(36, 300, 30, 300, method="newcomb", compare="diff")
    assert low < 0 < high
    assert (c.estimate.low, c.estimate.high) == pytest.approx((0.0, max(-low, high)))


def test_gap_rules_judge_fail_pass_and_inconclusive_at_the_bonferroni_level():
    f, y, pred = _gap_data()
    gm = group_metrics(f, y, pred, attributes=["g"], reference={"g": "a"})
    verdict = judge(measure(groups=gm),
                    PolicyOptions(max_fpr_gap=0.2, max_fnr_gap=0.1, max_error_gap=0.2))
    status = {(r.name, r.subject.split(" (vs")[0]): r.status for r in verdict.rules}
    # b's FPR gap 0.30 [>0.2]: fail; c's 0.02 straddles nothing near 0.2: pass; FNR gaps are 0
    # with intervals of about +-0.05: pass against 0.1; error gaps 0.15 and 0.01
    assert status[("max_fpr_gap", "g = b")] == "fail"
    assert status[("max_fpr_gap", "g = c")] == "pass"
    assert status[("max_fnr_gap", "g = b")] == "pass"
    assert status[("max_error_gap", "g = c")] == "pass"
    assert status[("max_error_gap", "g = b")] == "inconclusive"  # 0.15 with a wide interval
    assert verdict.rules_judged == 3
    assert all(r.family == 2 and r.level == pytest.approx(1 - 0.05 / (3 * 2))
               for r in verdict.rules)
    # the judged interval is the one at that level (statsmodels' Newcombe, folded at zero)
    from statsmodels.stats.proportion import confint_proportions_2indep
    fail = next(r for r in verdict.rules if r.name == "max_fpr_gap" and "g = b" in r.subject)
    low, high = confint_proportions_2indep(120, 300, 30, 300, method="newcomb", compare="diff",
                                           alpha=0.05 / 6)
    assert (fail.value["low"], fail.value["high"]) == pytest.approx((low, high))


def test_a_negative_gap_counts_by_its_size():
    # a's FPR is 0.30 below the reference b's: judged on |d|, so it fails like a gap above
    f, y, pred = _gap_data()
    gm = group_metrics(f, y, pred, attributes=["g"], reference={"g": "b"})  # b has the high FPR
    rules = judge(measure(groups=gm), PolicyOptions(max_fpr_gap=0.2)).rules
    a = next(r for r in rules if "g = a" in r.subject)
    assert a.status == "fail" and a.value["value"] == pytest.approx(0.30)
    assert 0.2 < a.value["low"] < a.value["high"]


def test_a_gap_on_too_few_rows_or_an_empty_base_is_inconclusive():
    f, y, pred = _gap_data()
    keep = ~((f["g"] == "c").to_numpy() & ~y) | (np.arange(len(y)) % 60 == 0)  # c: 5 negatives
    gm = group_metrics(f[keep], y[keep], pred[keep], attributes=["g"], reference={"g": "a"})
    rules = {r.subject.split(" (vs")[0]: r for r in
             judge(measure(groups=gm), PolicyOptions(max_fpr_gap=0.5)).rules}
    assert rules["g = c"].status == "inconclusive" and "fewer than" in rules["g = c"].message
    assert rules["g = b"].status == "pass"
    only_pos = y.copy()
    gm = group_metrics(f, only_pos | (f["g"] == "c").to_numpy(), pred, attributes=["g"],
                       reference={"g": "a"})
    rules = {r.subject.split(" (vs")[0]: r for r in
             judge(measure(groups=gm), PolicyOptions(max_fpr_gap=0.5, min_rows=1)).rules}
    assert rules["g = c"].status == "inconclusive"  # c has no label-negatives: no FPR


def test_gap_rules_without_groups_are_not_run():
    (rule,) = judge(measure(), PolicyOptions(max_error_gap=0.1)).rules
    assert rule.subject == "(not run)" and "group metrics" in rule.message
