"""The report model: a run's typed findings assembled into the report dict, in one place.

``report.json`` (schema :data:`SCHEMA`, contract in ``docs/contracts.md``) is built here and nowhere
else: each analysis contributes its ``to_dict()``, notes included, the verdict comes from the
typed judgement (:mod:`probe.policy`), and provenance records what an auditor needs to reproduce the
run. Renderers (:mod:`probe.report`) work from this dict alone, so a saved report can be re-rendered.
"""

from __future__ import annotations

import platform
from dataclasses import dataclass, field
from datetime import datetime, timezone
from importlib import metadata
from typing import Any

from ._version import __version__

__all__ = ["SCHEMA", "CAUTION", "Findings", "assemble_report"]

SCHEMA = "probe.report/2"

CAUTION = (
    "A statistical screen, not a legal finding. The four-fifths rule is a rule of thumb, not a legal "
    "test. Counterfactual flips measure how decisions depend on an attribute; they do not by themselves "
    "establish or rule out disparate impact. Defer to counsel, local law and licensed practice."
)

_VERSIONS = ("numpy", "pandas", "scipy", "scikit-learn", "lightgbm", "skops", "onnxruntime")
_ORDER = ("schema", "caution", "provenance", "verdict", "groups", "groups_unknown", "slices",
          "flips", "proxies", "comparison")


@dataclass
class Findings:
    """The typed results of one run (None where an analysis was not run).

    Attributes
    ----------
    groups : GroupMetrics or None
    slices : SliceFindings or None
    flips : list of FlipFindings or None
        One per attribute and mode, in the plan's order.
    proxies : list of ProxyFindings or None
    comparison : Comparison or None
    baseline : dict or None
        The baseline model's description (provenance of the comparison).
    """

    groups: Any = None
    slices: Any = None
    flips: list | None = None
    proxies: list | None = None
    comparison: Any = None
    baseline: dict | None = None
    timings: dict = field(default_factory=dict)


def assemble_report(findings: Findings, verdict, provenance: dict) -> dict:
    """The report dict of a run, keys in the contract's order."""
    f = findings
    comparison = None
    if f.comparison is not None:
        comparison = {"baseline": f.baseline, **f.comparison.to_dict()}
    report = {
        "schema": SCHEMA,
        "caution": caution(provenance.get("design")),
        "provenance": provenance,
        "verdict": verdict.to_dict(),
        "groups": None if f.groups is None else f.groups.to_dict(),
        "groups_unknown": None if f.groups is None else f.groups.unknown,
        "slices": None if f.slices is None else f.slices.to_dict(),
        "flips": None if f.flips is None else [row for r in f.flips for row in r.to_dict()],
        "proxies": None if f.proxies is None else [p.to_dict() for p in f.proxies],
        "comparison": comparison,
    }
    return {key: report.get(key) for key in _ORDER}


def caution(design: dict | None) -> str:
    """The report's caution: :data:`CAUTION`, and the membership caution when groups were
    estimated from probabilities."""
    if not design or not design.get("membership"):
        return CAUTION
    from .design import MEMBERSHIP_CAUTION

    names = ", ".join(f"`{a}`" for a in design["membership"])
    return CAUTION + " " + MEMBERSHIP_CAUTION.format(attributes=names)


def versions() -> dict:
    """Versions of Python, probe and the libraries that shape the numbers."""
    out = {"python": platform.python_version(), "probe": __version__}
    for name in _VERSIONS:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = None
    return out


def provenance(plan, *, command: str | None, timings: dict, model: dict | None,
               data: dict, favorable: tuple[str, bool] | None = None, design=None) -> dict:
    """What an auditor needs to reproduce the run: inputs, their hashes, the plan, seed, versions.

    ``favorable`` is the reading used and whether the plan stated it (None without a model);
    ``design`` the :class:`~probe.design.Design` when weights, clusters or membership
    probabilities were given (``design`` is null otherwise)."""
    return {
        "probe_version": __version__,
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "command": command,
        "seed": plan.seed,
        "confidence_level": plan.confidence_level,
        "threshold": plan.model.threshold if plan.model else None,
        "favorable": favorable[0] if favorable else None,
        "favorable_stated": favorable[1] if favorable else None,
        "model": model,
        "data": data,
        "design": None if design is None or design.given is False else design.describe(),
        "plan": plan.to_dict(),
        "plan_sha256": plan.sha256,
        "versions": versions(),
        "timings": timings,
    }
