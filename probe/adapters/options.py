"""The options of :func:`~probe.adapters.load_model`, validated and normalised once."""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from probe.errors import PlanError
from probe.options import MAX_TIMEOUT

from .messages import ticks

__all__ = ["Options", "load_model_iv"]

_HEX64 = re.compile(r"[0-9a-f]{64}")


@dataclass(frozen=True)
class Options:
    """The validated, normalised options of one :func:`load_model` call.

    ``positive`` is the model's class that counts as positive: ``positive_class`` when given,
    else the label's positive value; ``label_positive`` and ``label_values`` are kept for the
    message when that value is none of the model's classes.
    """

    base: Path
    positive: Any
    positive_class_given: bool
    label_positive: Any
    label_values: tuple | None
    trust_pickle: bool
    sha256: str | None
    trusted_types: tuple[str, ...]
    feature_names: tuple[str, ...] | None
    batch_size: int
    timeout: float
    isolate: bool
    allow_unseen: bool


def load_model_iv(*, base_dir, positive, positive_class=None, label_values=None,
                  trust_pickle, sha256=None, trusted_types, feature_names, batch_size, timeout,
                  isolate=True, allow_unseen=False) -> Options:
    """Validate and normalise every option of :func:`load_model` once."""
    if isinstance(positive, np.generic):
        positive = positive.item()
    if isinstance(positive_class, np.generic):
        positive_class = positive_class.item()
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
            or not math.isfinite(timeout) or not 0 < timeout <= MAX_TIMEOUT):
        raise PlanError(f"`timeout` must be a positive number of seconds up to {MAX_TIMEOUT:g}, "
                        f"got {timeout!r}")
    if sha256 is not None:
        if not isinstance(sha256, str) or not _HEX64.fullmatch(sha256.strip().lower()):
            raise PlanError(
                f"`sha256` must be the 64 hexadecimal digits of a SHA-256, got {sha256!r}"
            )
        sha256 = sha256.strip().lower()
    for name, value in (("trust_pickle", trust_pickle), ("isolate", isolate),
                        ("allow_unseen", allow_unseen)):
        if not isinstance(value, (bool, np.bool_)):
            raise PlanError(f"`{name}` must be true or false, got {value!r}")
    return Options(
        base=Path(base_dir).expanduser() if base_dir is not None else Path.cwd(),
        positive=positive if positive_class is None else positive_class,
        positive_class_given=positive_class is not None,
        label_positive=positive,
        label_values=None if label_values is None else tuple(label_values),
        trust_pickle=bool(trust_pickle),
        sha256=sha256,
        trusted_types=tuple(trusted_types),
        feature_names=feature_names,
        batch_size=int(batch_size),
        timeout=float(timeout),
        isolate=bool(isolate),
        allow_unseen=bool(allow_unseen),
    )
