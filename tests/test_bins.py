"""Bins and conditions: the one wording of a cut-point and a conjunction; bands of a numeric protected
attribute (refused past a few values, binned when asked) wherever it is a group."""

import json

import numpy as np
import pandas as pd
import pytest

from probe.bins import (MAX_NUMERIC_GROUPS, bin_labels, conjunction, fmt_number, group_view,
                        parse_bins)
from probe.errors import DataError, PlanError


@pytest.mark.parametrize("value", [0.873367, 12.3456, 0.0012345, -0.873367, 3.14159, 0.5])
def test_cut_points_are_written_with_three_significant_figures(value):
    # Python's own "g" format rounds to three significant figures: the independent reference
    assert float(fmt_number(value, 3)) == float(f"{value:.3g}")


def test_whole_numbers_keep_every_digit_and_a_thousands_separator():
    assert fmt_number(19000.0, 3) == "19,000" and fmt_number(12345.67, 3) == "12,346"
    assert fmt_number(float("inf")) == "inf"


def test_edges_get_more_digits_only_where_two_would_read_alike():
    labels = bin_labels("x", [0.8731, 0.8734, 25.0])
    assert labels == ["x < 0.8731", "x in [0.8731, 0.8734)", "x in [0.8734, 25)", "x >= 25"]
    assert conjunction(["a < 1", "b = u"]) == "a < 1 and b = u"


def test_flag_and_plan_forms_parse_alike():
    assert parse_bins("age=25:40:60,debt=4") == parse_bins({"age": [25, 40, 60], "debt": 4}) \
        == {"age": (25.0, 40.0, 60.0), "debt": 4}
    for bad in ("age", "age=60:40", {"age": 1}, {"age": [1, float("nan")]}, "age=x:1"):
        with pytest.raises(PlanError):
            parse_bins(bad)


def _ages(n=2000, seed=0):
    r = np.random.default_rng(seed)
    ages = r.integers(18, 90, n).astype(float)
    ages[::97] = np.nan
    return pd.DataFrame({"age": ages, "sex": r.choice(["F", "M"], n)})


def test_a_numeric_attribute_with_many_values_is_refused_with_the_fix():
    frame = _ages()
    assert frame["age"].nunique() > MAX_NUMERIC_GROUPS
    with pytest.raises(DataError) as err:
        group_view(frame, ["age", "sex"], None)
    assert "--bins age=25:40:60" in str(err.value) and "{ age = 4 }" in str(err.value)
    few = pd.DataFrame({"children": np.arange(200) % 4})
    assert group_view(few, ["children"], None) is few  # a few values are groups as they are


def test_edges_band_the_attribute_as_pandas_cut_does():
    frame = _ages()
    before = frame.copy()
    view = group_view(frame, ["age", "sex"], {"age": (25.0, 40.0, 60.0)})
    pd.testing.assert_frame_equal(frame, before)  # the input is not modified
    # pandas' cut with right-open bins is the independent reference
    ref = pd.cut(frame["age"], [-np.inf, 25, 40, 60, np.inf], right=False,
                 labels=["age < 25", "age in [25, 40)", "age in [40, 60)", "age >= 60"])
    assert view["age"].astype(object).where(view["age"].notna(), None).tolist() == \
        ref.astype(object).where(ref.notna(), None).tolist()
    assert list(view["age"].cat.categories) == list(ref.cat.categories)


def test_quantile_bands_hold_about_equal_shares():
    view = group_view(_ages(), ["age"], {"age": 4})
    shares = view["age"].value_counts(normalize=True, sort=False).to_numpy()
    assert len(shares) == 4 and np.all(np.abs(shares - 0.25) < 0.03)


def test_bins_for_a_column_that_is_not_a_group_are_refused():
    with pytest.raises(PlanError, match="`income`"):
        group_view(_ages(), ["age"], {"age": 4, "income": 3})


def test_bands_are_the_groups_of_a_run(tmp_path):
    from probe.cli import main

    r = np.random.default_rng(3)
    n = 3000
    age = r.integers(18, 80, n)
    score = np.where(age >= 40, 0.9, 0.1) * (r.random(n) < 0.9) + 0.05
    pd.DataFrame({"age": age, "y": (r.random(n) < 0.5).astype(int), "score": score}).to_csv(
        tmp_path / "h.csv", index=False)
    base = ["groups", "--data", str(tmp_path / "h.csv"), "--label", "y", "--model", "column:score",
            "--protected", "age", "--quiet"]
    assert main(base) == 2
    assert main([*base, "--bins", "age=40:", "--json", str(tmp_path / "r.json")]) == 0
    groups = {g["group"]: g for g in json.loads((tmp_path / "r.json").read_text())["groups"]}
    assert set(groups) == {"age < 40", "age >= 40"}
    # the counts and selection rates of the bands, by pandas
    for label, mask in (("age < 40", age < 40), ("age >= 40", age >= 40)):
        assert groups[label]["rows"] == int(mask.sum())
        assert groups[label]["selection_rate"]["value"] == pytest.approx(
            float((score[mask] >= 0.5).mean()))
