"""Each metric once: outcomes against a confusion matrix counted by scikit-learn, and orientation."""

import numpy as np
import pytest
from sklearn.metrics import confusion_matrix

from probe.errors import DataError, PlanError
from probe.metrics import METRICS, get_metric, metric_outcome


@pytest.fixture(scope="module")
def labelled():
    rng = np.random.default_rng(5)
    y = rng.random(1000) < 0.4
    pred = rng.random(1000) < np.where(y, 0.7, 0.2)
    return y, pred


def test_rates_equal_those_of_sklearns_confusion_matrix(labelled):
    y, pred = labelled
    tn, fp, fn, tp = confusion_matrix(y, pred).ravel()  # reference library
    expected = {"error": (fp + fn) / len(y), "fpr": fp / (fp + tn), "fnr": fn / (fn + tp),
                "selection": (tp + fp) / len(y)}
    for name, rate in expected.items():
        out, base = metric_outcome(y, pred, name)
        assert out[base].mean() == pytest.approx(rate, abs=1e-12), name


def test_selection_follows_the_favourable_decision(labelled):
    y, pred = labelled
    pos, _ = metric_outcome(y, pred, "selection", favorable=True)
    neg, _ = metric_outcome(y, pred, "selection", favorable="negative")
    assert (pos + neg == 1).all()


def test_which_direction_is_worse_is_written_once():
    assert {m.name: m.sign for m in METRICS.values()} == {"error": 1, "fpr": 1, "fnr": 1,
                                                          "selection": -1}
    assert get_metric("fnr").base == "label-positive" and get_metric("fpr").base == "label-negative"


def test_bad_input_gets_one_clear_line():
    with pytest.raises(PlanError, match=r"`metric` must be one of .*did you mean `fnr`"):
        get_metric("fnrr")
    with pytest.raises(DataError, match="`y_pred` must be 0/1 or boolean"):
        metric_outcome([1, 0], [0.3, 0.9], "error")
    with pytest.raises(DataError, match="`y_true` is required"):
        metric_outcome(None, [1, 0], "fpr")


@pytest.mark.parametrize("label, positive", [
    ("denied", 1), ("loan_denied", 1), ("isDefault", True), ("charge-off", 1), ("FRAUD_flag", 1),
    ("outcome", "Rejected"), ("status", "bad"),
])
def test_an_adverse_label_needs_the_favourable_decision_stated(label, positive):
    from probe.metrics import resolve_favorable

    with pytest.raises(PlanError) as err:
        resolve_favorable(None, label, positive)
    assert f"label `{label}` (positive value {positive!r}) reads as an adverse outcome" in str(err.value)
    assert "--favorable negative" in str(err.value)
    assert resolve_favorable("positive", label, positive) == ("positive", True)
    assert resolve_favorable("negative", label, positive) == ("negative", True)


@pytest.mark.parametrize("label, positive", [("repaid", 1), ("hired", "yes"), ("y", 1),
                                             ("approved", True)])
def test_an_ordinary_label_defaults_to_the_positive_decision(label, positive):
    from probe.metrics import resolve_favorable

    assert resolve_favorable(None, label, positive) == ("positive", False)
