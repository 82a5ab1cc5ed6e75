"""The exceptions and warnings probe raises.

Every expected failure (bad input, a bad plan, a model that cannot be loaded or
scored) is a :class:`ProbeError`. The command line catches ``ProbeError`` in one
place, prints ``error: <message>`` on one line and exits with code 2; anything
else is a bug and is allowed to raise.

Messages name the parameter, file or column in backticks, state the
constraint, echo what arrived, and add the fix when one is obvious.
"""

from __future__ import annotations

__all__ = [
    "ProbeError",
    "DataError",
    "PlanError",
    "ModelError",
    "TrustError",
    "ProbeWarning",
    "DegenerateWarning",
]


class ProbeError(Exception):
    """Base class of every expected failure; its message is one line for the user."""


class DataError(ProbeError, ValueError):
    """The data cannot be read or does not fit the roles asked of it."""


class PlanError(ProbeError, ValueError):
    """The plan (TOML file or flags) is invalid: unknown key, wrong type, bad value."""


class ModelError(ProbeError, RuntimeError):
    """The model cannot be loaded, or scoring failed or returned unusable scores."""


class TrustError(ProbeError, PermissionError):
    """Loading the model would execute code or use types the user has not trusted."""


class ProbeWarning(UserWarning):
    """Base class of probe's warnings."""


class DegenerateWarning(ProbeWarning, RuntimeWarning):
    """A statistic is undefined for these inputs (e.g. an empty group); NaN is returned."""
