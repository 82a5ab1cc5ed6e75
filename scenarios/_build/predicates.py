"""Rows of a frame that satisfy a conjunction of predicates.

The planted slices and defect regions of the scenarios (``TRUTHS`` in each ``generate.py``) and
the slices found by the search are written as predicates ``{"column", "op", "value"}``; this is
the one evaluator the generators, the truth measurement and the tests share. It reads predicates
as text-level conditions on the raw columns, with no use of probe's encoding, so a test can check
the slice search's rows against it.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from probe.errors import DataError


def slice_mask(frame: pd.DataFrame, predicates: list[dict]) -> np.ndarray:
    """Rows of ``frame`` that satisfy every predicate (a conjunction).

    Parameters
    ----------
    frame : pandas.DataFrame
        The data.
    predicates : list of dict
        Each ``{"column", "op", "value"}`` with ``op`` one of ``"=="``, ``"!="``, ``">="``,
        ``">"``, ``"<"``, ``"<="``, ``"missing"`` (value ignored), ``"in"`` (value a list of
        levels, or ``[low, high)`` for a numeric column with ``None`` for an open end) or
        ``"not in"`` (a present value outside the listed levels: the slice search's ``other``
        level). Comparisons are false on missing values.

    Returns
    -------
    numpy.ndarray of bool
    """
    mask = np.ones(len(frame), dtype=bool)
    for predicate in predicates:
        column, op, value = predicate["column"], predicate["op"], predicate.get("value")
        if column not in frame.columns:
            raise DataError(f"predicate column `{column}` is not in the data")
        series = frame[column]
        present = series.notna().to_numpy()
        if op == "missing":
            mask &= ~present
        elif op == "==":
            mask &= (series == value).to_numpy(dtype=bool, na_value=False)
        elif op == "!=":
            mask &= present & (series != value).to_numpy(dtype=bool, na_value=False)
        elif op in (">=", ">", "<", "<="):
            numbers = pd.to_numeric(series, errors="coerce").to_numpy(dtype=float)
            with np.errstate(invalid="ignore"):
                hit = {
                    ">=": numbers >= value,
                    ">": numbers > value,
                    "<": numbers < value,
                    "<=": numbers <= value,
                }[op]
            mask &= hit & present
        elif op == "in":
            is_interval = (
                isinstance(value, (list, tuple))
                and len(value) == 2
                and pd.api.types.is_numeric_dtype(series)
            )
            if is_interval:
                numbers = series.to_numpy(dtype=float, na_value=np.nan)
                low, high = value
                hit = present.copy()
                if low is not None:
                    hit &= numbers >= low
                if high is not None:
                    hit &= numbers < high
                mask &= hit
            else:
                mask &= series.isin(list(value)).to_numpy(dtype=bool)
        elif op == "not in":
            mask &= present & ~series.isin(list(value)).to_numpy(dtype=bool)
        else:
            raise DataError(
                f"predicate op `{op}` on `{column}` is not one of ==, !=, >=, >, <, <=, in, "
                "not in, missing"
            )
    return mask
