"""The decision metrics, each defined once: its per-row outcome, its base population, which way is worse.

Every analysis that ranks, compares or judges a rate asks this module, so "which direction is worse"
and "which decision is favourable" are decided in one place:

==========  ==============================  ====================  ==============
metric      per-row outcome                 base population       worse when
==========  ==============================  ====================  ==============
error       decision != label               all rows              higher
fpr         positive decision               label-negative rows   higher
fnr         negative decision               label-positive rows   higher
selection   the favourable decision         all rows              lower
==========  ==============================  ====================  ==============

The favourable decision is set once per run (``favorable``: the positive decision by default, the
negative one for, e.g., a fraud flag where "not flagged" is what a person wants). A run that does not
state it, on a label that reads as adverse (``denied``, ``default``), is refused
(:func:`resolve_favorable`): the default reading would invert every selection rate.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from .errors import DataError, PlanError

__all__ = ["FOUR_FIFTHS", "Metric", "METRICS", "METRIC_NAMES", "get_metric", "as_favorable", "as_binary",
           "metric_outcome", "favorable_decision", "ADVERSE_WORDS", "resolve_favorable"]


FOUR_FIFTHS = Fraction(4, 5)
"""The four-fifths rule of thumb (29 CFR 1607.4(D)), kept exact so that a ratio of exactly 4/5 is
compared on counts, not as a rounded float."""


@dataclass(frozen=True)
class Metric:
    """One decision metric.

    Attributes
    ----------
    name : str
        The key used in plans, flags and reports (``"fnr"``).
    words : str
        What a reader calls it (``"false-negative rate"``).
    short : str
        A column header (``"FNR"``).
    base : str
        ``"all"``, ``"label-positive"`` or ``"label-negative"``: the rows the rate is over.
    worse : str
        ``"higher"`` or ``"lower"``: which direction of the rate is worse for the people in a slice.
    needs_label : bool
    """

    name: str
    words: str
    short: str
    base: str
    worse: str
    needs_label: bool

    @property
    def sign(self) -> int:
        """+1 when higher is worse, -1 when lower is worse: ``sign * difference`` is the shortfall."""
        return 1 if self.worse == "higher" else -1

    def outcome(self, y_true, decision, *, favorable=True) -> tuple[np.ndarray, np.ndarray]:
        """The per-row 0/1 outcome (uint8) and the boolean mask of the base population."""
        pred = as_binary(decision, "y_pred")
        everyone = np.ones(len(pred), dtype=bool)
        if self.name == "selection":
            return (pred == as_favorable(favorable)).astype(np.uint8), everyone
        true = as_binary(y_true, "y_true")
        if len(true) != len(pred):
            raise DataError(f"`y_true` has {len(true)} rows but `y_pred` has {len(pred)}")
        if self.name == "error":
            return (pred != true).astype(np.uint8), everyone
        if self.name == "fpr":
            return pred.astype(np.uint8), ~true
        return (~pred).astype(np.uint8), true.copy()


METRICS: dict[str, Metric] = {
    m.name: m for m in (
        Metric("error", "error rate", "error", "all", "higher", True),
        Metric("fpr", "false-positive rate", "FPR", "label-negative", "higher", True),
        Metric("fnr", "false-negative rate", "FNR", "label-positive", "higher", True),
        Metric("selection", "selection rate", "selection", "all", "lower", False),
    )
}
METRIC_NAMES: tuple[str, ...] = tuple(METRICS)


def get_metric(name) -> Metric:
    """The :class:`Metric` called ``name``; a :class:`~probe.errors.PlanError` names the choices."""
    if isinstance(name, Metric):
        return name
    try:
        return METRICS[name]
    except (KeyError, TypeError):
        from .data import close_names

        raise PlanError(f"`metric` must be one of {', '.join(METRIC_NAMES)}, got {name!r}"
                        + (close_names(name, METRIC_NAMES) if isinstance(name, str) else "")) from None


def as_favorable(favorable) -> bool:
    """``True`` when the positive decision is favourable; accepts a bool or "positive"/"negative"."""
    if isinstance(favorable, str):
        if favorable not in ("positive", "negative"):
            raise PlanError(f"`favorable` must be 'positive' or 'negative', got {favorable!r}")
        return favorable == "positive"
    if favorable in (True, False, 0, 1):
        return bool(favorable)
    raise PlanError(f"`favorable` must be True/False or 'positive'/'negative', got {favorable!r}")


ADVERSE_WORDS = ("deny", "denied", "denial", "decline", "reject", "refus", "default", "fraud", "bad",
                 "churn", "delinquen", "chargeoff", "writeoff", "arrear", "foreclos", "bankrupt",
                 "evict", "recidiv", "rearrest", "fail", "risk", "flag")
"""Word parts that make a label (or its positive value) read as an adverse outcome: a part of the
name (split at anything not a letter and at lower-to-upper case changes) that starts with one of
them, case-insensitively (``loan_denied``, ``isDefault``, ``charge-off``)."""


def _adverse_word(text) -> str | None:
    """The first entry of :data:`ADVERSE_WORDS` that a word part of ``text`` starts with."""
    spaced = re.sub(r"(?<=[a-z])(?=[A-Z])", " ", str(text))
    parts = [p.lower() for p in re.split(r"[^A-Za-z]+", spaced) if p]
    parts += [a + b for a, b in zip(parts, parts[1:])]  # charge-off, write off
    return next((w for p in parts for w in ADVERSE_WORDS if p.startswith(w)), None)


def resolve_favorable(favorable, label, positive) -> tuple[str, bool]:
    """The favourable decision of a run and whether it was stated: ``(favorable, True)`` as given,
    else ``("positive", False)`` unless the label's name or its positive value reads as an adverse
    outcome (:data:`ADVERSE_WORDS`), which is a :class:`~probe.errors.PlanError` asking which."""
    if favorable is not None:
        return favorable, True
    if label and (_adverse_word(label) or (isinstance(positive, str) and _adverse_word(positive))):
        raise PlanError(
            f"label `{label}` (positive value {positive!r}) reads as an adverse outcome, so the "
            "favourable decision is probably the negative one; say which: --favorable negative "
            "(or --favorable positive to keep the default reading; plan: `favorable` in [model])")
    return "positive", False


def favorable_decision(decision, favorable) -> np.ndarray:
    """Boolean: each row received the favourable decision."""
    pred = as_binary(decision, "y_pred")
    return pred if as_favorable(favorable) else ~pred


def as_binary(y, name: str) -> np.ndarray:
    """A boolean copy of a 0/1 or boolean vector; anything else is refused with one line."""
    if y is None:
        raise DataError(f"`{name}` is required for this metric")
    arr = np.asarray(y)
    if arr.ndim != 1:
        raise DataError(f"`{name}` must be one-dimensional, got shape {arr.shape}")
    if arr.dtype == bool:
        return arr.copy()
    if arr.dtype.kind in "iuf":
        bad = ~np.isin(arr, (0, 1))
        if bad.any():
            rows = np.flatnonzero(bad)
            raise DataError(
                f"`{name}` must be 0/1 or boolean; {len(rows)} rows are not "
                f"(first at row {rows[0]}: {arr[rows[0]]!r}); map the positive class to 1 first"
            )
        return arr == 1
    raise DataError(
        f"`{name}` must be 0/1 or boolean, got dtype {arr.dtype}; map the positive class to 1 first"
    )


def metric_outcome(y_true, y_pred, metric, *, favorable=True):
    """The per-row 0/1 outcome of a metric and the mask of its base population.

    Parameters
    ----------
    y_true : array_like of bool or 0/1, or None
        The labels (1 = positive class); not needed for ``"selection"``.
    y_pred : array_like of bool or 0/1
        The model's decisions.
    metric : {"error", "fpr", "fnr", "selection"}
    favorable : bool or {"positive", "negative"}, default=True
        Which decision is the favourable one (only for ``selection``).

    Returns
    -------
    outcome : ndarray of uint8
    base : ndarray of bool

    Raises
    ------
    DataError
        The arrays are not binary or their lengths differ.
    PlanError
        An unknown metric.

    Examples
    --------
    >>> out, base = metric_outcome([1, 0, 1], [1, 1, 0], "fnr")
    >>> out.tolist(), base.tolist()
    ([0, 0, 1], [True, False, True])
    """
    return get_metric(metric).outcome(y_true, y_pred, favorable=favorable)
