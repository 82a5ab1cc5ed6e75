"""Reading tables and checking column roles: every bad-input message, and the three formats."""

import numpy as np
import pandas as pd
import pytest

from probe.data import prepare_holdout, read_table
from probe.errors import DataError


@pytest.fixture
def frame():
    return pd.DataFrame({
        "repaid": [1, 0, 1, 1, 0, 0],
        "sex": ["F", "M", "F", "M", None, "F"],
        "age": [25, 40, 33, 51, 29, 62],
        "income": [30.5, 40.0, 55.1, 20.0, 31.0, 45.0],
    })


@pytest.mark.parametrize("suffix", [".csv", ".parquet", ".feather"])
def test_read_table_round_trips_each_format(tmp_path, frame, suffix):
    path = tmp_path / f"holdout{suffix}"
    {".csv": lambda p: frame.to_csv(p, index=False), ".parquet": frame.to_parquet,
     ".feather": frame.to_feather}[suffix](path)
    back = read_table(path)
    pd.testing.assert_frame_equal(back, frame, check_dtype=suffix != ".csv")


def test_missing_file_suggests_close_names(tmp_path, frame):
    frame.to_csv(tmp_path / "holdout.csv", index=False)
    with pytest.raises(DataError, match=r"`.*holdot\.csv` not found; did you mean `holdout\.csv`"):
        read_table(tmp_path / "holdot.csv")


def test_unknown_suffix_and_empty_data(tmp_path):
    (tmp_path / "x.xlsx").write_text("a")
    with pytest.raises(DataError, match="unknown suffix `.xlsx`"):
        read_table(tmp_path / "x.xlsx")
    (tmp_path / "empty.csv").write_text("")
    with pytest.raises(DataError, match="is empty"):
        read_table(tmp_path / "empty.csv")
    (tmp_path / "header.csv").write_text("a,b\n")
    with pytest.raises(DataError, match="header but no rows"):
        read_table(tmp_path / "header.csv")


def test_missing_column_suggests_close_names(frame):
    with pytest.raises(DataError, match=r"label column `repayed` is not in the data; did you mean `repaid`"):
        prepare_holdout(frame, label="repayed")
    with pytest.raises(DataError, match=r"protected column `Sex`.*did you mean `sex`"):
        prepare_holdout(frame, label="repaid", protected=["Sex"])


def test_label_must_be_binary_and_complete(frame):
    bad = frame.assign(repaid=[1, 0, 2, 1, 0, 0])
    with pytest.raises(DataError, match=r"not binary: 3 distinct values \(1, 0, 2\)"):
        prepare_holdout(bad, label="repaid")
    missing = frame.assign(repaid=[1, None, 1, None, 0, 0])
    with pytest.raises(DataError, match=r"2 missing values \(data rows 2, 4\)"):
        prepare_holdout(missing, label="repaid")


def test_positive_value_must_occur_and_is_coerced(frame):
    with pytest.raises(DataError, match=r"positive value 'yes' does not occur .* \(values: 1, 0\)"):
        prepare_holdout(frame, label="repaid", positive="yes")
    h = prepare_holdout(frame, label="repaid", positive="1")  # flags arrive as text
    np.testing.assert_array_equal(h.y_true, frame["repaid"].to_numpy() == 1)
    text = frame.assign(repaid=np.where(frame.repaid == 1, "good", "bad"))
    with pytest.raises(DataError, match="say which is the positive class"):
        prepare_holdout(text, label="repaid")
    assert prepare_holdout(text, label="repaid", positive="good").y_true.sum() == 3


def test_protected_attribute_needs_two_levels_and_unknowns_are_counted(frame):
    with pytest.raises(DataError, match=r"`one` .* has one level \(only 'x'\)"):
        prepare_holdout(frame.assign(one="x"), label="repaid", protected=["one"])
    h = prepare_holdout(frame, label="repaid", protected=["sex"])
    assert h.unknown == {"sex": 1}


def test_empty_frame_and_input_not_modified(frame):
    with pytest.raises(DataError, match="has no rows"):
        prepare_holdout(frame.iloc[:0], label="repaid")
    before = frame.copy()
    h = prepare_holdout(frame, label="repaid", protected=["sex"], intersections=[["sex", "age"]])
    pd.testing.assert_frame_equal(frame, before)
    assert not h.y_true.flags.writeable


def test_na_is_a_level_in_text_and_missing_among_numbers(tmp_path):
    # a continent column holding North America's code `NA`, a numeric column holding `NA`
    path = tmp_path / "h.csv"
    path.write_text("continent,debt,initial,note\nNA,1.5,N/A,x\nEU,NA,B,\nNA,2.5,null,y\n"
                    "AS,,None,z\n")
    frame = read_table(path)
    # the truth, written by hand: text columns keep every word, numbers lose the words to NaN
    assert frame["continent"].tolist() == ["NA", "EU", "NA", "AS"]
    assert frame["initial"].tolist() == ["N/A", "B", "null", "None"]
    np.testing.assert_array_equal(frame["debt"].to_numpy(dtype=float), [1.5, np.nan, 2.5, np.nan])
    assert frame["note"].isna().tolist() == [False, True, False, False]  # empty: missing anywhere
    holdout = prepare_holdout(frame.assign(y=[1, 0, 1, 0]), label="y", protected=["continent"])
    assert holdout.unknown == {"continent": 0}
    assert set(frame["continent"].dropna()) == {"NA", "EU", "AS"}  # both groups appear


@pytest.mark.parametrize("suffix", [".csv", ".tsv", ".parquet", ".feather"])
def test_duplicate_column_names_are_refused_naming_file_and_names(tmp_path, suffix):
    import pyarrow as pa
    import pyarrow.feather as feather
    import pyarrow.parquet as pq

    path = tmp_path / f"h{suffix}"
    if suffix in (".csv", ".tsv"):
        sep = "," if suffix == ".csv" else "\t"
        path.write_text(sep.join(["y", "a", "y", "a", "b"]) + "\n" + sep.join("10101") + "\n")
    else:
        table = pa.table([pa.array([1, 0])] * 3, names=["y", "a", "y"])
        (pq.write_table if suffix == ".parquet" else feather.write_feather)(table, path)
    with pytest.raises(DataError) as err:
        read_table(path)
    msg = str(err.value)
    assert str(path) in msg and "`y`" in msg and "\n" not in msg and ".1" not in msg
    if suffix in (".csv", ".tsv"):
        assert "`a`" in msg and "`b`" not in msg
