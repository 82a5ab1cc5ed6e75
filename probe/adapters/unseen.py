"""Rows whose categorical value the model never saw (``Model.categories``), counted per column.

A value counts as seen when it equals one of the model's levels as it is, as text (``1`` and
``"1"`` read from a CSV), or as a number (``1`` and ``1.0``). Missing values are not unseen
values: the model's own missing-value handling applies to them.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["unseen_rows"]


def unseen_rows(X: pd.DataFrame, categories: dict[str, tuple]) -> dict[str, tuple[int, Any]]:
    """Per column of ``X`` with known levels: (rows with an unseen value, the most common one).

    Columns without unseen values are left out; the order is the frame's column order.
    """
    out: dict[str, tuple[int, Any]] = {}
    if not categories:
        return out
    names = {str(c): c for c in X.columns}
    for col in names:
        levels = categories.get(col)
        if levels is None:
            continue
        counts = X[names[col]].value_counts(dropna=True, sort=True)
        known = _Known(levels)
        bad = [(int(n), v) for v, n in counts.items() if not known.has(v)]
        if bad:
            out[col] = (sum(n for n, _ in bad), bad[0][1])
    return out


class _Known:
    """Membership of one column's levels, with the text and number forms described above."""

    def __init__(self, levels: tuple) -> None:
        self.raw = {v for v in levels if _hashable(v)}
        self.text = {str(v) for v in levels}
        self.number = {float(v) for v in levels if _number(v)}

    def has(self, value: Any) -> bool:
        if _hashable(value) and value in self.raw:
            return True
        if str(value) in self.text:
            return True
        return _number(value) and float(value) in self.number


def _hashable(value: Any) -> bool:
    try:
        hash(value)
    except TypeError:
        return False
    return True


def _number(value: Any) -> bool:
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, float, np.number)):
        return False
    return math.isfinite(float(value))
