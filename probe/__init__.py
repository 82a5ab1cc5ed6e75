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

#: Where each public name lives. They are imported on first use (PEP 562), so that importing one
#: part (the command line, a model's child process) does not import every analysis and scipy.
_WHERE = {
    "Model": "adapters", "load_model": "adapters",
    "Comparison": "compare", "compare_models": "compare",
    "Design": "design", "Membership": "design", "read_design": "design_data",
    "Holdout": "data", "prepare_holdout": "data", "read_table": "data",
    "Encoding": "encode", "encode_columns": "encode",
    "DataError": "errors", "DegenerateWarning": "errors", "ModelError": "errors",
    "PlanError": "errors", "ProbeError": "errors", "TrustError": "errors",
    "FlipFindings": "flips", "flip_test": "flips",
    "GroupMetrics": "groups", "group_metrics": "groups",
    "run_plan": "pipeline",
    "Plan": "plan", "load_plan": "plan", "plan_from_dict": "plan",
    "Verdict": "policy", "judge": "policy",
    "ProxyFindings": "proxies", "find_proxies": "proxies",
    "metric_outcome": "metrics",
    "Slice": "slices", "SliceFindings": "slices", "find_slices": "slices",
    "search_slices": "slices",
    "Estimate": "stats",
}


def __getattr__(name: str):
    if name not in _WHERE:
        raise AttributeError(f"module 'probe' has no attribute {name!r}")
    import importlib

    value = getattr(importlib.import_module(f".{_WHERE[name]}", __name__), name)
    globals()[name] = value  # once
    return value


def __dir__():
    return sorted(set(globals()) | set(_WHERE))


__all__ = [
    "__version__",
    "Comparison",
    "DataError",
    "DegenerateWarning",
    "Design",
    "Encoding",
    "Estimate",
    "FlipFindings",
    "GroupMetrics",
    "Holdout",
    "Membership",
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
    "read_design",
    "read_table",
    "run_plan",
    "search_slices",
]
