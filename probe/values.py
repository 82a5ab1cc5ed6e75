"""Values crossing a boundary, made safe once: numbers and levels for the report, seeds for a run.

- :func:`json_number`: a float for the report, ``None`` (JSON ``null``) when it is NaN or infinite;
  a bare NaN is not JSON.
- :func:`report_level`: a data value (a group, a flip's level, a slice predicate's value) in a form
  JSON can hold: numpy scalars as Python numbers, dates and times as ISO text, anything else that
  is not a plain number, text or boolean as its text.
- :func:`as_rng`: the one way an ``rng`` argument becomes a generator, refusing what numpy cannot
  seed with a one-line :class:`~probe.errors.PlanError`.
"""

from __future__ import annotations

import datetime as _dt
import math
import numbers

import numpy as np
import pandas as pd

from .errors import PlanError

__all__ = ["json_number", "report_level", "as_rng", "read_only"]


def json_number(x) -> float | None:
    """``float(x)``, or None when it is missing, NaN or infinite."""
    if x is None:
        return None
    x = float(x)
    return None if math.isnan(x) or math.isinf(x) else x


def report_level(v):
    """A level as the report holds it: JSON-ready, and the same value on every run."""
    if isinstance(v, np.generic):
        v = v.item()
    if v is None or isinstance(v, (bool, str, int)):
        return v
    if isinstance(v, float):
        return json_number(v)
    if isinstance(v, (pd.Timestamp, _dt.datetime, _dt.date, _dt.time)):
        return v.isoformat()
    if v is pd.NaT or v is pd.NA:
        return None
    if isinstance(v, numbers.Real):
        return json_number(v)
    return str(v)


def as_rng(rng, name: str = "rng") -> np.random.Generator:
    """``np.random.default_rng(rng)`` for None, a non-negative integer or a Generator; anything
    else (a negative seed, a float, text) is a :class:`PlanError` naming ``name``."""
    if rng is None or isinstance(rng, np.random.Generator):
        return np.random.default_rng(rng)
    if isinstance(rng, (int, np.integer)) and not isinstance(rng, bool):
        if rng < 0:
            raise PlanError(f"`{name}` (the seed) must be a whole number of at least 0, got {rng}")
        return np.random.default_rng(int(rng))
    raise PlanError(f"`{name}` must be None, a whole number of at least 0 or a numpy Generator, "
                    f"got {rng!r}")


def read_only(a) -> np.ndarray:
    """``a`` as an array that cannot be written (results and evidence are shared, never copied)."""
    a = np.asarray(a)
    a.setflags(write=False)
    return a
