"""Run a :class:`~probe.plan.Plan` end to end and assemble the report dict.

The steps: read and check the data, load the model, score once, then the analyses the plan asks for
(groups always; slices, flips, proxies, comparison when their section is present), then the policy
verdict, then provenance. Each analysis is a library function returning a frozen result; this module
only calls them in order, times them, and puts their ``to_dict()`` into the report (contract:
``docs/contracts.md``). It never prints; progress goes through the optional callback.
"""

from __future__ import annotations

import platform
import time
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import datetime, timezone
from importlib import metadata
from typing import Callable

import numpy as np
import pandas as pd

from . import __version__
from .adapters import load_model
from .compare import compare_models
from .data import Holdout, close_names, prepare_holdout, read_table, sha256_file
from .encode import encode_columns
from .errors import DataError
from .flips import flip_test
from .groups import group_metrics
from .plan import Plan
from .policy import judge
from .proxies import ProxyFindings, find_proxies
from .report.json import SCHEMA
from .slices import find_slices

__all__ = ["CAUTION", "run_plan", "Progress"]

CAUTION = (
    "A statistical screen, not a legal finding. The four-fifths rule is a rule of thumb, not a legal "
    "test. Counterfactual flips measure how decisions depend on an attribute; they do not by themselves "
    "establish or rule out disparate impact. Defer to counsel, local law and licensed practice."
)

Progress = Callable[[str, int, int], None]
"""``progress(step, done, total)``: called as long steps advance (the CLI draws the bar)."""

_VERSIONS = ("numpy", "pandas", "scipy", "scikit-learn", "lightgbm", "skops", "onnxruntime")


@dataclass
class _Clock:
    timings: dict

    @contextmanager
    def step(self, name: str):
        start = time.perf_counter()
        try:
            yield
        finally:
            self.timings[name] = round(time.perf_counter() - start, 4)


def _versions() -> dict:
    out = {"python": platform.python_version(), "probe": __version__}
    for name in _VERSIONS:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = None
    return out


def load_holdout(plan: Plan) -> Holdout:
    """Read the plan's data file and check its column roles."""
    path = plan.resolve(plan.data.path)
    frame = read_table(path)
    return prepare_holdout(
        frame,
        label=plan.data.label or None,
        positive=plan.data.positive,
        protected=plan.data.protected,
        intersections=plan.data.intersections,
        source=str(path),
        sha256=sha256_file(path),
    )


def _load(plan: Plan, spec: str, holdout: Holdout):
    return load_model(
        plan.resolve_spec(spec),
        base_dir=plan.base_dir,
        positive=holdout.positive,
        trust_pickle=plan.model.trust_pickle,
        trusted_types=plan.model.trusted_types,
        feature_names=plan.data.features,
        batch_size=plan.model.batch_size,
    )


def _bar(progress: Progress | None, step: str):
    if progress is None:
        return None
    return lambda done, total: progress(step, done, total)


def _slice_exclude(plan: Plan, holdout: Holdout, model) -> list[str]:
    exclude = [holdout.label, *plan.slices.exclude] if plan.slices else [holdout.label]
    if model.kind == "column":
        exclude.append(model.spec.split(":", 1)[1])
    return [c for c in dict.fromkeys(exclude) if c]  # flips run without a label


def run_plan(plan: Plan, *, command: str | None = None, progress: Progress | None = None) -> dict:
    """Run everything ``plan`` asks for and return the report dict (``report.json``'s content).

    Parameters
    ----------
    plan : Plan
    command : str, optional
        The command line, for provenance.
    progress : callable, optional
        ``progress(step, done, total)`` for long steps.

    Returns
    -------
    dict
        Keys ``schema``, ``caution``, ``provenance``, ``groups``, ``groups_unknown``, ``slices``,
        ``flips``, ``proxies``, ``comparison``, ``verdict``; sections not run are None.
    """
    clock = _Clock({})
    seed = plan.seed
    cl = plan.confidence_level
    favorable = plan.favorable
    if plan.model is None:
        return _run_proxies_only(plan, command, clock)
    with clock.step("load data"):
        holdout = load_holdout(plan)
    frame = holdout.frame
    with clock.step("load model"):
        model = _load(plan, plan.model.spec, holdout)
    # the model never sees the label, even when it reads the whole frame (py:, cmd:, http:)
    inputs = frame.drop(columns=[holdout.label]) if holdout.label else frame
    with clock.step("score"):
        scores = model.scores(inputs, progress=_bar(progress, "scoring"))
    decision = scores >= plan.model.threshold

    report: dict = {"schema": SCHEMA, "caution": CAUTION}
    groups = None
    unknown = None
    if holdout.y_true is not None and (holdout.protected or holdout.intersections):
        with clock.step("groups"):
            g = group_metrics(frame, holdout.y_true, decision, attributes=holdout.protected,
                              intersections=holdout.intersections, favorable=favorable,
                              confidence_level=cl)
        groups, unknown = g.to_dict(), g.unknown

    slices = None
    if plan.slices is not None:
        s = plan.slices
        with clock.step("slices"):
            found = find_slices(
                frame, holdout.y_true, decision, metric=s.metric, favorable=favorable,
                depth=s.depth, min_rows=s.min_rows, columns=s.columns,
                exclude=_slice_exclude(plan, holdout, model), bins=s.bins, top=s.top,
                split=s.split, confidence_level=cl, interval=s.interval, rng=seed,
            )
        slices = found.to_dict()

    # one proxy ranking per attribute, for the proxies table and transport flips alike
    rankings = _ProxyRankings(plan, frame, model.feature_names, holdout.label, holdout.protected)
    flips = None
    if plan.flips is not None:
        attributes = plan.flips.attributes or holdout.protected
        if not attributes:
            raise DataError("[flips] needs `attributes` (or protected attributes in [data])")
        rows: list = []
        jobs = [(a, m) for a in attributes for m in plan.flips.modes]
        tick = _bar(progress, "flip tests")
        with clock.step("flips"):
            # the breakdown's columns, encoded once for every attribute and mode
            encoding = encode_columns(frame, columns=plan.search.columns, bins=plan.search.bins,
                                      exclude=_slice_exclude(plan, holdout, model))
            for done, (attribute, mode) in enumerate(jobs):
                if tick:
                    tick(done, len(jobs))
                if attribute not in frame.columns:
                    raise DataError(f"flip attribute `{attribute}` is not in the data"
                                    + close_names(attribute, list(frame.columns)))
                # transport moves the proxies of the ranking the proxies table shows
                ranking = (rankings(attribute)
                           if mode == "transport" and plan.flips.proxies is None else None)
                result = flip_test(
                    model, inputs, attribute, options=plan.flips, mode=mode,
                    threshold=plan.model.threshold, favorable=favorable, confidence_level=cl,
                    rng=seed, scores=scores, encoding=encoding, proxy_ranking=ranking,
                )
                rows.extend(result.to_dict())
                rows.extend(_note_rows(result, attribute, mode))
            if tick:
                tick(len(jobs), len(jobs))
        flips = rows

    proxies = None
    if plan.proxies is not None:
        with clock.step("proxies"):
            proxies = _proxies(plan, frame, holdout.protected, rankings)

    comparison = None
    if plan.compare is not None:
        with clock.step("compare"):
            baseline = _load(plan, plan.compare.baseline, holdout)
            base_scores = baseline.scores(inputs, progress=_bar(progress, "scoring baseline"))
            result = compare_models(
                frame, holdout.y_true, decision, base_scores >= plan.model.threshold,
                metric=plan.compare.metric, favorable=favorable,
                exclude=_slice_exclude(plan, holdout, model), confidence_level=cl, rng=seed,
                depth=plan.slices.depth if plan.slices else 3,
                min_rows=plan.slices.min_rows if plan.slices else None,
                bins=plan.slices.bins if plan.slices else 5,
                columns=plan.slices.columns if plan.slices else None,
            )
            comparison = {"baseline": baseline.describe(), **result.to_dict()}

    report.update(groups=groups, groups_unknown=unknown, slices=slices, flips=flips,
                  proxies=proxies, comparison=comparison)
    with clock.step("verdict"):
        report["verdict"] = judge(report, plan.policy).to_dict()
    report["provenance"] = _provenance(plan, command, clock, model.describe(), holdout.describe())
    return _ordered(report)


def _ordered(report: dict) -> dict:
    order = ("schema", "caution", "provenance", "verdict", "groups", "groups_unknown", "slices",
             "flips", "proxies", "comparison")
    return {key: report.get(key) for key in order}


def _provenance(plan: Plan, command, clock, model: dict | None, data: dict) -> dict:
    return {
        "probe_version": __version__,
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "command": command,
        "seed": plan.seed,
        "confidence_level": plan.confidence_level,
        "threshold": plan.model.threshold if plan.model else None,
        "favorable": plan.model.favorable if plan.model else None,
        "model": model,
        "data": data,
        "plan": plan.to_dict(),
        "plan_sha256": plan.sha256,
        "versions": _versions(),
        "timings": clock.timings,
    }


class _ProxyRankings:
    """:func:`find_proxies` once per attribute, over the plan's features, else the model's, else
    all columns but the label and the protected attributes: the proxies table and transport flips
    read the same ranking. The multivariate check runs for the attributes the table shows."""

    def __init__(self, plan: Plan, frame: pd.DataFrame, model_features, label: str | None,
                 protected: tuple[str, ...]):
        self.plan, self.frame, self.model_features = plan, frame, model_features
        self.skip = {label, *protected}
        self.table = set((plan.proxies.attributes or protected) if plan.proxies else ())
        self.found: dict = {}

    def __call__(self, attribute: str) -> ProxyFindings:
        if attribute not in self.found:
            plan = self.plan
            features = (plan.proxies.features if plan.proxies else None) or self.model_features
            if features:
                features = [c for c in features if c != attribute]
            else:
                features = [c for c in self.frame.columns if c not in self.skip | {attribute}]
            self.found[attribute] = find_proxies(
                self.frame, attribute, features=features, confidence_level=plan.confidence_level,
                rng=plan.seed, multivariate=attribute in self.table)
        return self.found[attribute]


def _proxies(plan: Plan, frame: pd.DataFrame, protected: tuple[str, ...],
             rankings: _ProxyRankings) -> list[dict]:
    """The proxies table: each attribute's ranking."""
    attributes = plan.proxies.attributes or protected
    if not attributes:
        raise DataError("[proxies] needs `attributes` (or protected attributes in [data])")
    out = []
    for attribute in attributes:
        if attribute not in frame.columns:
            raise DataError(f"proxy attribute `{attribute}` is not in the data"
                            + close_names(attribute, list(frame.columns)))
        out.append(rankings(attribute).to_dict())
    return out


def _run_proxies_only(plan: Plan, command, clock) -> dict:
    """``probe proxies``: no model, no label needed."""
    with clock.step("load data"):
        path = plan.resolve(plan.data.path)
        frame = read_table(path)
    data = {"path": str(path), "sha256": sha256_file(path), "rows": len(frame)}
    protected = tuple(plan.data.protected)
    label = plan.data.label or None
    if label and label not in frame.columns:
        raise DataError(f"label column `{label}` is not in `{path}`"
                        + close_names(label, list(frame.columns)))
    with clock.step("proxies"):
        proxies = _proxies(plan, frame, protected,
                           _ProxyRankings(plan, frame, None, label, protected))
    report = {"schema": SCHEMA, "caution": CAUTION, "proxies": proxies,
              "verdict": judge({}, plan.policy).to_dict()}
    report["provenance"] = _provenance(plan, command, clock, None, data)
    return _ordered(report)


def _note_rows(result, attribute, mode) -> list:
    """Modes that do not apply (e.g. a direct flip of a non-input) leave a note, not a fake zero."""
    if result.rows:
        return []
    return [{"attribute": attribute, "mode": mode, "from": None, "to": None, "rows": 0,
             "flip_rate": None, "to_favorable": None, "to_unfavorable": None,
             "mean_score_change": None, "applicable": False,
             "sentence": "; ".join(result.notes) or f"{mode} flips do not apply to `{attribute}`",
             "notes": list(result.notes)}]
