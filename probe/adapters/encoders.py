"""The levels a fitted scikit-learn model knows for its categorical inputs (``Model.categories``).

The walk goes through pipelines (only the first real step sees the named columns), column
transformers, feature unions and calibrated classifiers to the encoders (anything with
``categories_``, such as ``OneHotEncoder`` and ``OrdinalEncoder``), and maps their levels to the
input columns they read. Flips use them to refuse a level the model never saw.
"""

from __future__ import annotations

from typing import Any

import numpy as np

__all__ = ["sklearn_categories"]


def sklearn_categories(est: Any) -> dict[str, tuple]:
    """The levels known to fitted OneHotEncoder/OrdinalEncoder-like steps, by input column."""
    found: dict[str, tuple] = {}
    try:
        _walk_encoders(est, None, found, depth=0)
    except Exception:  # introspection of third-party objects must never break loading
        return {}
    return found


def _walk_encoders(est: Any, columns: list[str] | None, found: dict[str, tuple],
                   depth: int) -> None:
    if depth > 20 or est is None or isinstance(est, str):
        return
    steps = getattr(est, "steps", None)
    if isinstance(steps, list):  # Pipeline: only the first real step sees the named columns
        first = True
        for step in steps:
            trans = step[1] if isinstance(step, tuple) and len(step) >= 2 else None
            if trans is None or isinstance(trans, str):
                continue
            _walk_encoders(trans, columns if first else None, found, depth + 1)
            first = False
        return
    transformers = getattr(est, "transformers_", None)
    if isinstance(transformers, list):  # ColumnTransformer
        names_in = getattr(est, "feature_names_in_", None)
        names_in = [str(c) for c in names_in] if names_in is not None else columns
        for item in transformers:
            if not (isinstance(item, tuple) and len(item) >= 3):
                continue
            _walk_encoders(item[1], _resolve_columns(item[2], names_in), found, depth + 1)
        return
    union = getattr(est, "transformer_list", None)
    if isinstance(union, list):  # FeatureUnion: every part sees the same columns
        for item in union:
            if isinstance(item, tuple) and len(item) >= 2:
                _walk_encoders(item[1], columns, found, depth + 1)
        return
    calibrated = getattr(est, "calibrated_classifiers_", None)
    if isinstance(calibrated, list) and calibrated:
        _walk_encoders(getattr(calibrated[0], "estimator", None), columns, found, depth + 1)
        return
    cats = getattr(est, "categories_", None)
    if isinstance(cats, list):
        names = getattr(est, "feature_names_in_", None)
        names = [str(c) for c in names] if names is not None else columns
        if names is not None and len(names) == len(cats):
            for name, levels in zip(names, cats):
                found[name] = tuple(np.asarray(levels).tolist())


def _resolve_columns(cols: Any, names_in: list[str] | None) -> list[str] | None:
    if callable(cols):
        return None
    if isinstance(cols, (str, int, np.integer)):
        cols = [cols]
    if isinstance(cols, slice):
        return None if names_in is None else names_in[cols]
    try:
        items = list(cols)
    except TypeError:
        return None
    if items and all(isinstance(c, (bool, np.bool_)) for c in items):
        if names_in is None or len(names_in) != len(items):
            return None
        return [n for n, keep in zip(names_in, items) if keep]
    if all(isinstance(c, (int, np.integer)) for c in items):
        if names_in is None:
            return None
        return [names_in[int(i)] for i in items]
    return [str(c) for c in items]
