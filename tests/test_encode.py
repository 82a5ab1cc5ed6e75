"""Encoding of slice columns: codes, predicates and labels checked row by row."""

import math
import re

import numpy as np
import pandas as pd
import pytest

from probe.encode import encode_columns
from probe.errors import DataError, PlanError


def _holds(pred, value):
    """An independent reading of a predicate on one raw value (the contract's semantics)."""
    missing = value is None or (isinstance(value, float) and math.isnan(value))
    if pred["op"] == "missing":
        return missing
    if missing:
        return False
    if pred["op"] == "==":
        return value == pred["value"]
    if pred["op"] == "not in":
        return value not in pred["value"]
    assert pred["op"] == "in"
    low, high = pred["value"]
    return (low is None or value >= low) and (high is None or value < high)


def _label_texts(label):
    """The numbers a bin label states, as written (None for an open end)."""
    num = r"(-?[\d,]+(?:\.\d+)?(?:e-?\d+)?)"
    if m := re.fullmatch(rf"\w+ in \[{num}, {num}\)", label):
        return m[1], m[2]
    if m := re.fullmatch(rf"\w+ < {num}", label):
        return None, m[1]
    if m := re.fullmatch(rf"\w+ >= {num}", label):
        return m[1], None
    raise AssertionError(f"unexpected bin label {label!r}")


def _frame(seed, n=3000):
    r = np.random.default_rng(seed)
    util = r.random(n)
    util[r.random(n) < 0.1] = np.nan
    return pd.DataFrame({
        "age": r.integers(18, 90, n),
        "income": np.round(r.lognormal(10.5, 0.8, n), 2),
        "utilisation": util,
        "debt": np.where(r.random(n) < 0.6, 0.0, r.exponential(5000, n)),  # ties at zero
        "score": r.normal(-3, 0.01, n),  # small negative numbers
        "district": r.choice(["Harrowmere", "Oakvale", "Brindle", "Quarry", "Fenwick", "Ash"],
                             n, p=[0.4, 0.3, 0.2, 0.08, 0.015, 0.005]),
        "member": r.random(n) < 0.3,
    })


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_every_row_satisfies_exactly_its_own_predicate(seed):
    frame = _frame(seed)
    frame.loc[frame.index[::13], "district"] = None
    enc = encode_columns(frame, min_level_share=0.01)
    assert set(enc.names) == set(frame.columns)
    for col in enc.columns:
        raw = frame[col.name].astype(object).tolist()
        for pred in col.predicates:
            assert pred["column"] == col.name
        truth = np.array([[_holds(p, v) for p in col.predicates] for v in raw])
        # each row matches exactly one level, and that level is its code
        assert (truth.sum(axis=1) == 1).all(), col.name
        np.testing.assert_array_equal(truth.argmax(axis=1), col.codes)
        counts = np.bincount(col.codes, minlength=col.n_levels)
        assert (counts > 0).all(), f"{col.name} has an empty level"


@pytest.mark.parametrize("seed", [0, 3])
def test_bin_labels_state_the_same_edges_as_the_predicates(seed):
    frame = _frame(seed)
    enc = encode_columns(frame, columns=["age", "income", "utilisation", "debt", "score"])
    for col in enc.columns:
        for label, pred in zip(col.labels, col.predicates):
            if pred["op"] == "missing":
                assert label == f"{col.name} is missing"
                continue
            # a label states each edge to three significant figures (more where two would read
            # alike), so it is within half a unit of its last digit of the predicate's exact edge
            for text, edge in zip(_label_texts(label), pred["value"]):
                if edge is None:
                    assert text is None, label
                    continue
                value = float(text.replace(",", ""))
                if "e" in text:  # a tiny edge, written with three significant figures
                    assert abs(value - edge) <= 5e-3 * abs(edge), label
                else:
                    digits = len(text.partition(".")[2])
                    assert abs(value - edge) <= 0.5 * 10.0 ** -digits + 1e-12, label
        assert len(set(col.labels)) == col.n_levels
        raw = frame[col.name].to_numpy(dtype=float)
        # edges are rounded but still cut where the data's quantiles put them: about 1/5 each
        # (except where ties collapse bins)
        if col.name in ("age", "income", "utilisation", "score"):
            shares = np.bincount(col.codes)[: 5] / np.isfinite(raw).sum()
            assert len(shares) == 5 and np.all(np.abs(shares - 0.2) < 0.03), (col.name, shares)


def test_labels_read_naturally():
    frame = pd.DataFrame({
        "age": np.repeat([19, 22, 24, 25, 28, 31, 34, 37, 45, 60], 10),
        "income": np.linspace(20_000.37, 120_000.91, 100),
        "utilisation": np.linspace(0.001, 0.999, 100),
    })
    enc = encode_columns(frame, bins=4)
    # edges move to the roundest number between neighbouring values: 31 -> 30, 45 -> 40
    assert enc["age"].labels == ("age < 25", "age in [25, 30)", "age in [30, 40)", "age >= 40")
    assert enc["income"].labels[-1] == "income >= 95,000"
    assert enc["utilisation"].labels[0] == "utilisation < 0.25"


def test_ties_collapse_bins_and_few_values_become_levels():
    frame = pd.DataFrame({"debt": [0.0] * 70 + list(np.arange(1.0, 31.0)), "kids": [0, 1, 2, 3] * 25})
    enc = encode_columns(frame, bins=5)
    debt = enc["debt"]
    assert debt.labels[0] == "debt < 1" and np.bincount(debt.codes)[0] == 70
    assert debt.n_levels < 5
    assert enc["kids"].labels == ("kids = 0", "kids = 1", "kids = 2", "kids = 3")
    assert encode_columns(frame, bins=2)["kids"].n_levels == 2


def test_rare_and_missing_levels():
    frame = pd.DataFrame({"district": ["Harrowmere"] * 60 + ["Oakvale"] * 30 + ["Ash", "Elm"] * 2
                          + [None] * 6})
    col = encode_columns(frame, min_level_share=0.05)["district"]
    assert col.labels == ("district = Harrowmere", "district = Oakvale", "district = other",
                          "district is missing")
    assert col.predicates[2] == {"column": "district", "op": "not in",
                                 "value": ["Harrowmere", "Oakvale"]}
    assert np.bincount(col.codes).tolist() == [60, 30, 4, 6]
    assert col.codes.dtype == np.uint8
    capped = encode_columns(frame, max_levels=1)["district"]
    assert capped.labels[:2] == ("district = Harrowmere", "district = other")


def test_identifier_and_constant_columns_are_left_out_with_a_note():
    n = 200
    frame = pd.DataFrame({
        "row_id": np.arange(1000, 1000 + n),
        "ref": [f"REF-{i:05d}" for i in range(n)],
        "country": ["Freedonia"] * n,
        "income": np.random.default_rng(0).integers(10_000, 10_000_000, n),  # unique but not an id
        "group": ["a", "b"] * (n // 2),
    })
    enc = encode_columns(frame)
    assert enc.names == ("income", "group")
    assert len(enc.notes) == 3
    assert any("`row_id`" in s and "identifies rows" in s for s in enc.notes)
    assert any("`ref`" in s and "identifies rows" in s for s in enc.notes)
    assert any("`country`" in s and "constant" in s for s in enc.notes)


def test_columns_and_exclude_select_and_do_not_modify_the_frame():
    frame = _frame(0, n=300)
    before = frame.copy()
    enc = encode_columns(frame, columns=["district", "age", "member"], exclude=["age"])
    assert enc.names == ("district", "member")
    assert enc["member"].labels == ("member = False", "member = True")
    assert enc["member"].kind == "boolean"
    pd.testing.assert_frame_equal(frame, before)
    assert not enc["district"].codes.flags.writeable


def test_unknown_column_names_suggest_close_matches():
    frame = _frame(0, n=50)
    with pytest.raises(DataError, match=r"`distrct`; did you mean `district`\?"):
        encode_columns(frame, columns=["distrct", "age"])
    with pytest.raises(DataError, match=r"`exclude`.*`incme`.*`income`"):
        encode_columns(frame, exclude=["incme"])
    with pytest.raises(PlanError, match="`bins`"):
        encode_columns(frame, bins=1)


def test_to_frame_lists_levels_with_counts():
    frame = _frame(1, n=500)
    table = encode_columns(frame, columns=["member", "age"]).to_frame()
    member = table[table.column == "member"]
    assert member.rows.tolist() == [int((~frame.member).sum()), int(frame.member.sum())]
    assert table.groupby("column").rows.sum().eq(500).all()


def test_quantiles_of_sorted_values_are_numpys_to_the_last_bit():
    # reference: numpy.quantile (default linear method); the encoder skips its copy and partial sort
    from probe.bins import _sorted_quantile

    r = np.random.default_rng(0)
    for t in range(400):
        n = int(r.integers(1, 300))
        x = [r.normal(size=n), r.integers(0, 4, n).astype(float), r.lognormal(10, 2, n)][t % 3]
        x.sort()
        q = np.concatenate([r.random(6), [0.0, 0.2, 0.19, 0.21, 0.5, 1.0]])
        np.testing.assert_array_equal(_sorted_quantile(x, q), np.quantile(x, q))


def test_categorical_levels_count_like_pandas_value_counts():
    # reference: pandas value_counts on the same categorical (unused categories and missing values)
    r = np.random.default_rng(4)
    codes = r.choice([-1, 0, 1, 2, 3, 4], 3000, p=[0.05, 0.4, 0.3, 0.15, 0.08, 0.02])
    names = ["Harrowmere", "Oakvale", "Brindle", "Quarry", "Ash", "Elm"]
    col = pd.Categorical.from_codes(codes, names)
    frame = pd.DataFrame({"district": col})
    enc = encode_columns(frame, min_level_share=0.05)["district"]
    counts = frame["district"].value_counts()
    named = [lv for lv in counts.index if counts[lv] >= 0.05 * len(frame)]
    assert enc.labels == tuple(f"district = {lv}" for lv in named) + ("district = other",
                                                                        "district is missing")
    expected = [counts[lv] for lv in named] + [counts.drop(named).sum(), int((codes == -1).sum())]
    assert np.bincount(enc.codes).tolist() == expected


def test_infinite_values_duplicate_names_and_empty_columns_are_named():
    frame = pd.DataFrame({"x": [1.0, np.inf, 2.0, 3.0] * 10, "y": ["a", "b"] * 20})
    with pytest.raises(DataError, match=r"column `x` has 10 infinite values \(first at row 1\)"):
        encode_columns(frame)
    twin = pd.DataFrame([[1, 2], [3, 4]], columns=["a", "a"])
    with pytest.raises(DataError, match="more than one column named `a`"):
        encode_columns(twin)
    empty = pd.DataFrame({"e": [np.nan] * 40, "y": ["a", "b"] * 20})
    assert any("every value is missing" in n for n in encode_columns(empty).notes)
