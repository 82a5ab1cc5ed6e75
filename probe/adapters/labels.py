"""Which output is the positive class: class labels matched with ``1 == "1" == True``, the
probability column of the positive class, and hard labels turned into 0/1 scores."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from probe.errors import ModelError

from .messages import ticks
from .model import BatchFailure

__all__ = ["class_index", "index_from_positive", "labels_equal", "zero_one"]


def _label_key(value: Any) -> Any:
    """A comparable form of a class label, so that 1 == 1.0 == "1" == True."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, bool):
        return 1.0 if value else 0.0
    if isinstance(value, (int, float)):
        return float(value)
    if isinstance(value, str):
        s = value.strip()
        if s.lower() == "true":
            return 1.0
        if s.lower() == "false":
            return 0.0
        try:
            return float(s)
        except ValueError:
            return s
    return value


def class_index(classes: Sequence, positive: Any, spec: str, opts: Any = None) -> int:
    """Position of the positive class among ``classes`` (default: the last of two).

    ``opts`` (the load options) words the error when ``positive`` is the label's value rather
    than a ``positive_class`` the user gave: it names the label's values and the fix."""
    classes = list(classes)
    if positive is None:
        if len(classes) == 2:
            return 1
        if len(classes) == 1:
            return 0
        raise ModelError(
            f"model `{spec}` has {len(classes)} classes ({ticks(map(repr, classes))}); "
            "say which is the positive class with `positive`"
        )
    for i, c in enumerate(classes):
        if type(c) is type(positive) and c == positive:
            return i
    key = _label_key(positive)
    matches = [i for i, c in enumerate(classes) if _label_key(c) == key]
    if len(matches) == 1:
        return matches[0]
    shown = ", ".join(repr(c) for c in classes)
    if opts is None or opts.positive_class_given:
        raise ModelError(
            f"positive class {positive!r} (--positive-class, positive_class under [model]) is "
            f"not one of the classes of model `{spec}`: {shown}"
        )
    held = "" if not opts.label_values else (
        "; the label holds " + ", ".join(repr(v) for v in opts.label_values[:10])
        + (", …" if len(opts.label_values) > 10 else ""))
    raise ModelError(
        f"the label's positive value {positive!r} is not one of the classes of model `{spec}` "
        f"({shown}){held}; say which class means {positive!r} with --positive-class VALUE "
        "(positive_class under [model])"
    )


def index_from_positive(positive: Any, width: int, spec: str) -> int:
    """Column of the positive class when the model does not name its classes."""
    if width == 1:
        return 0
    if positive is None:
        if width == 2:
            return 1
        raise ModelError(
            f"model `{spec}` gives {width} probability columns and does not name its classes; "
            "say which column is the positive class with `positive`"
        )
    key = _label_key(positive)
    if isinstance(key, float) and key.is_integer() and 0 <= key < width:
        return int(key)
    raise ModelError(
        f"model `{spec}` does not name its classes, and positive class {positive!r} is not a "
        f"column number from 0 to {width - 1}"
    )


def labels_equal(labels: np.ndarray, positive: Any) -> np.ndarray:
    key = _label_key(positive)
    if labels.dtype.kind in "biuf" and isinstance(key, float):
        return (labels.astype(np.float64) == key).astype(np.float64)
    return np.array([_label_key(v) == key for v in labels.tolist()], dtype=np.float64)


def zero_one(labels: np.ndarray) -> np.ndarray:
    if labels.dtype.kind == "b":
        return labels.astype(np.float64)
    keys = np.array([_label_key(v) for v in labels.tolist()], dtype=object)
    ok = np.array([k in (0.0, 1.0) and isinstance(k, float) for k in keys], dtype=bool)
    if not ok.all():
        bad = labels[~ok][0]
        raise BatchFailure(
            f"predict returned the label {bad!r}; without classes_ probe needs 0/1 labels "
            "or `positive`"
        )
    return keys.astype(np.float64)
