"""The model's input columns: the names it records against the names given; numeric columns."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from probe.errors import ModelError

from .messages import ticks
from .model import BatchFailure

__all__ = ["check_count", "numeric", "reconcile_names"]


def numeric(s: pd.Series, name: str, dtype: Any = np.float64) -> np.ndarray:
    if pd.api.types.is_bool_dtype(s) or (
        pd.api.types.is_numeric_dtype(s) and not isinstance(s.dtype, pd.CategoricalDtype)
    ):
        return s.to_numpy(dtype=dtype, na_value=np.nan)
    try:
        return pd.to_numeric(s.astype(object), errors="raise").to_numpy(
            dtype=dtype, na_value=np.nan
        )
    except (TypeError, ValueError):
        example = next((v for v in s if pd.notna(v) and not _is_number(v)), None)
        raise BatchFailure(
            f"column `{name}` holds values that are not numbers (e.g. {example!r}), but the "
            "model reads it as a number"
        ) from None


def reconcile_names(model_names: tuple[str, ...], given: tuple[str, ...] | None,
                    spec: str) -> tuple[str, ...]:
    """The model's own input names win; names given as well must be the same columns."""
    if given is not None and set(given) != set(model_names):
        extra = [c for c in given if c not in model_names]
        lacking = [c for c in model_names if c not in given]
        parts = []
        if lacking:
            parts.append(f"it also reads {ticks(lacking)}")
        if extra:
            parts.append(f"it does not read {ticks(extra)}")
        raise ModelError(
            f"`feature_names` does not match the inputs model `{spec}` records: "
            + "; ".join(parts)
        )
    return model_names


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float, np.number)) and not isinstance(v, bool)


def check_count(given: tuple[str, ...] | None, n_inputs: int | None, spec: str) -> None:
    """A model that records how many inputs it takes, but not their names, gets that many names."""
    if given is not None and n_inputs is not None and len(given) != n_inputs:
        raise ModelError(
            f"model `{spec}` takes {n_inputs} input columns, but `feature_names` lists "
            f"{len(given)}"
        )
