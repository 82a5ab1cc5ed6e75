"""probe: test a trained binary classifier before it is released.

The Python API mirrors the command line: load data and a model, then ask where it fails
(:func:`find_slices`), how groups fare (:func:`group_metrics`), whether decisions move with a protected
attribute (:func:`flip_test`, :func:`find_proxies`), whether a candidate is worse than production
(:func:`compare_models`), and run a whole plan with :func:`run_plan`. Every result is a frozen object
with ``to_dict()`` (the report section) and ``to_frame()``.

A statistical screen, not a legal finding; the four-fifths rule is a rule of thumb; defer to counsel,
local law and licensed practice.
"""

from ._version import __version__

from .adapters import Model, load_model
from .compare import Comparison, compare_models
from .data import Holdout, prepare_holdout, read_table
from .encode import Encoding, encode_columns
from .errors import DataError, DegenerateWarning, ModelError, PlanError, ProbeError, TrustError
from .flips import FlipFindings, flip_test
from .groups import GroupMetrics, group_metrics
from .pipeline import run_plan
from .plan import Plan, load_plan, plan_from_dict
from .policy import Verdict, judge
from .proxies import ProxyFindings, find_proxies
from .metrics import metric_outcome
from .slices import Slice, SliceFindings, find_slices, search_slices
from .stats import Estimate

__all__ = [
    "__version__",
    "Comparison",
    "DataError",
    "DegenerateWarning",
    "Encoding",
    "Estimate",
    "FlipFindings",
    "GroupMetrics",
    "Holdout",
    "Model",
    "ModelError",
    "Plan",
    "PlanError",
    "ProbeError",
    "ProxyFindings",
    "Slice",
    "SliceFindings",
    "TrustError",
    "Verdict",
    "compare_models",
    "encode_columns",
    "find_proxies",
    "find_slices",
    "flip_test",
    "group_metrics",
    "judge",
    "load_model",
    "load_plan",
    "metric_outcome",
    "plan_from_dict",
    "prepare_holdout",
    "read_table",
    "run_plan",
    "search_slices",
]
