"""The options of :func:`~probe.adapters.load_model`, validated and normalised once."""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from probe.errors import PlanError

from .messages import ticks

__all__ = ["Options", "load_model_iv"]


@dataclass(frozen=True)
class Options:
    """The validated, normalised options of one :func:`load_model` call."""

    base: Path
    positive: Any
    trust_pickle: bool
    trusted_types: tuple[str, ...]
    feature_names: tuple[str, ...] | None
    batch_size: int
    timeout: float


def load_model_iv(*, base_dir, positive, trust_pickle, trusted_types, feature_names,
                  batch_size, timeout) -> Options:
    """Validate and normalise every option of :func:`load_model` once."""
    if isinstance(positive, np.generic):
        positive = positive.item()
    if isinstance(trusted_types, str) or not all(isinstance(t, str) for t in trusted_types):
        raise PlanError(f"`trusted_types` must be a list of type names, got {trusted_types!r}")
    if feature_names is not None:
        if isinstance(feature_names, str):
            raise PlanError(
                f"`feature_names` must be a list of column names, got {feature_names!r}"
            )
        feature_names = tuple(str(c) for c in feature_names)
        if not feature_names:
            raise PlanError("`feature_names` is empty; leave it out to pass every column")
        dupes = sorted({c for c in feature_names if feature_names.count(c) > 1})
        if dupes:
            raise PlanError(f"`feature_names` lists {ticks(dupes)} more than once")
    if (isinstance(batch_size, bool) or not isinstance(batch_size, (int, np.integer))
            or batch_size < 1):
        raise PlanError(f"`batch_size` must be a whole number of at least 1, got {batch_size!r}")
    if (isinstance(timeout, bool) or not isinstance(timeout, (int, float))
            or not math.isfinite(timeout) or timeout <= 0):
        raise PlanError(f"`timeout` must be a positive number of seconds, got {timeout!r}")
    return Options(
        base=Path(base_dir).expanduser() if base_dir is not None else Path.cwd(),
        positive=positive,
        trust_pickle=bool(trust_pickle),
        trusted_types=tuple(trusted_types),
        feature_names=feature_names,
        batch_size=int(batch_size),
        timeout=float(timeout),
    )
