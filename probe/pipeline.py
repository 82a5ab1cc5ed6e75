"""Run a :class:`~probe.plan.Plan` end to end: prepare the evidence once, run the analyses, judge.

The steps: read and check the data, load the model(s) and score once (:func:`prepare`, which
returns the run's :class:`~probe.evidence.Evidence`: scores, decisions, the slice columns encoded
once), then the analyses the plan asks for, each reading that evidence (groups always; slices,
proxies, flips, comparison when their section is present), then the typed verdict
(:mod:`probe.policy`), then the report dict (:mod:`probe.assemble`). This module only calls them in
order and times them. It never prints; progress goes through the optional callback.
"""

from __future__ import annotations

import time
import warnings
from contextlib import contextmanager
from dataclasses import replace
from typing import Callable

import pandas as pd

from .adapters import load_model
from .assemble import Findings, assemble_report, provenance
from .bins import group_view
from .compare import compare_models
from .adapters.isolated import start_server
from .data import check_columns, close_names, prepare_holdout, read_table, sha256_file
from .design_data import read_design
from .encode import encode_columns
from .errors import DataError, ProbeWarning
from .evidence import Evidence, ModelRun
from .flips import flip_test
from .flips.context import refuse_fixed_scores
from .groups import group_metrics
from .metrics import resolve_favorable
from .plan import Plan
from .policy import judge, measure
from .proxies import find_proxies
from .slices import find_slices
from .threads import limited

__all__ = ["run_plan", "prepare", "Progress"]

Progress = Callable[[str, int, int], None]
"""``progress(step, done, total)``: called as long steps advance (the CLI draws the bar)."""


class _Clock:
    def __init__(self):
        self.timings: dict = {}

    @contextmanager
    def step(self, name: str):
        start = time.perf_counter()
        try:
            yield
        finally:
            self.timings[name] = round(time.perf_counter() - start, 4)


def _bar(progress: Progress | None, step: str):
    if progress is None:
        return None
    return lambda done, total: progress(step, done, total)


def _load(plan: Plan, spec: str, holdout, *, pin: str | None):
    """Load a model with the plan's options; ``pin``: the SHA-256 the plan gives its file."""
    m = plan.model
    values = None
    if holdout.label:
        values = sorted(holdout.frame[holdout.label].dropna().unique().tolist(), key=str)
    return load_model(plan.resolve_spec(spec), base_dir=plan.base_dir, positive=holdout.positive,
                      positive_class=m.positive_class, label_values=values,
                      trust_pickle=m.trust_pickle, sha256=pin,
                      trusted_types=m.trusted_types, feature_names=plan.data.features,
                      batch_size=m.batch_size, timeout=m.timeout, isolate=m.isolate,
                      allow_unseen=m.allow_unseen)


def _never_sliced(plan: Plan, label: str | None, models) -> list[str]:
    """The label, the plan's exclusions, every ``column:`` model's score column (the candidate's
    and the baseline's) and the design's columns (weights, cluster ids, membership
    probabilities) are never sliced."""
    exclude = [label, *plan.search.exclude] if label else list(plan.search.exclude)
    exclude += _design_columns(plan)
    exclude += [m.spec.split(":", 1)[1] for m in models if m.kind == "column"]
    return list(dict.fromkeys(exclude))


def _design_columns(plan: Plan) -> list[str]:
    """The columns that describe the sample, not the people: weights, clusters, membership
    probabilities (never sliced, never ranked as proxies)."""
    d = plan.data
    return [c for c in (d.weights, d.cluster) if c] + [
        c for groups in d.membership.values() for c in groups.values()]


def prepare(plan: Plan, *, clock: _Clock | None = None, progress: Progress | None = None) -> Evidence:
    """Read the data, score every model the plan names once, and encode the slice columns once."""
    clock = clock or _Clock()
    d = plan.data
    if plan.model.isolate:  # the model server's imports overlap reading the data
        start_server([plan.resolve_spec(plan.model.spec)]
                     + ([plan.resolve_spec(plan.compare.baseline)] if plan.compare else []))
    with clock.step("load data"):
        path = plan.resolve(d.path)
        table = read_table(path)
        holdout = prepare_holdout(table, label=d.label or None, positive=d.positive,
                                  protected=_protected(d), intersections=d.intersections,
                                  source=str(path), sha256=sha256_file(path),
                                  membership=tuple(d.membership))
        design = read_design(table, weights=d.weights, cluster=d.cluster,
                             membership=d.membership, where=f"`{path}`")
    frame = holdout.frame
    _check_named_columns(plan, frame, str(path))
    groups = group_view(frame, [c for c in _group_columns(holdout.protected, holdout.intersections)
                                if c not in design.membership], d.bins)
    favorable, _ = resolve_favorable(plan.model.favorable, holdout.label, holdout.positive)
    with clock.step("load model"):
        model = _load(plan, plan.model.spec, holdout, pin=plan.model.sha256)
    if plan.flips is not None:
        refuse_fixed_scores(model)  # before the scoring and every other analysis
    # the model never sees the label, even when it reads the whole frame (py:, cmd:, http:)
    inputs = frame.drop(columns=[holdout.label]) if holdout.label else frame
    threshold = plan.model.threshold
    with clock.step("score"):
        runs = {"candidate": ModelRun.from_scores(
            model, model.scores(inputs, progress=_bar(progress, "scoring")), threshold)}
    if plan.compare is not None:
        with clock.step("score baseline"):
            baseline = _load(plan, plan.compare.baseline, holdout,
                             pin=plan.compare.baseline_sha256)
            runs["baseline"] = ModelRun.from_scores(
                baseline, baseline.scores(inputs, progress=_bar(progress, "scoring baseline")),
                threshold)
    s = plan.search
    with clock.step("encode"):
        encoding = encode_columns(frame, columns=s.columns,
                                  exclude=_never_sliced(plan, holdout.label,
                                                       [r.model for r in runs.values()]),
                                  bins=s.bins)
    return Evidence(holdout, inputs, runs, encoding, threshold=threshold,
                    favorable=favorable, groups=groups, design=design)


def _protected(d) -> tuple:
    """The protected attributes: those named, then any known only as membership probabilities."""
    return tuple(dict.fromkeys([*d.protected, *d.membership]))


def _check_named_columns(plan: Plan, frame, source: str) -> None:
    """Every column a plan or flag names is in the data, checked before a model is loaded."""
    named = {"`data.features` (--features)": plan.data.features or (),
             "`slices.columns` (--columns)": plan.search.columns or (),
             "`slices.exclude` (--exclude)": plan.search.exclude,
             "`flips.proxies` (--proxies)": (plan.flips.proxies or ()) if plan.flips else (),
             "`proxies.features` (--features)": (plan.proxies.features or ()) if plan.proxies else ()}
    for role, names in named.items():
        check_columns(frame, names, role, f"`{source}`")


def _group_columns(protected, intersections) -> list:
    """The columns that define groups: the protected attributes and the intersections' columns."""
    return list(dict.fromkeys([*protected, *(c for combo in intersections for c in combo)]))


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
        Keys ``schema``, ``caution``, ``provenance``, ``verdict``, ``groups``, ``groups_unknown``,
        ``slices``, ``flips``, ``proxies``, ``comparison``; sections not run are None.
    """
    clock = _Clock()
    with limited():  # every estimator and BLAS/OpenMP pool of the run, the model's included
        if plan.model is None:
            return _run_proxies_only(plan, command, clock, progress)
        return _run(plan, command, clock, progress)


def _run(plan: Plan, command, clock: _Clock, progress) -> dict:
    ev = prepare(plan, clock=clock, progress=progress)
    found = Findings()
    cl, seed = plan.confidence_level, plan.seed
    h = ev.holdout
    if ev.y_true is not None and (h.protected or h.intersections):
        with clock.step("groups"):
            found.groups = group_metrics(ev.groups, ev.y_true, ev.decision(),
                                         attributes=h.protected, intersections=h.intersections,
                                         favorable=ev.favorable, confidence_level=cl,
                                         reference=plan.data.references, design=ev.design)
    if plan.slices is not None:
        with clock.step("slices"):
            found.slices = find_slices(ev.frame, ev.y_true, ev.decision(), options=plan.slices,
                                       favorable=ev.favorable, confidence_level=cl, rng=seed,
                                       encoding=ev.encoding,
                design=replace(ev.design, membership={}))  # paired rows: no groups to weigh
    rankings: dict = {}
    if plan.proxies is not None:
        with clock.step("proxies"):
            attributes = _attributes(plan.proxies.attributes, h.protected, "proxies", ev.frame,
                                     ev.design.membership)
            found.proxies = [_ranking(plan, ev.frame, a, ev.model().feature_names, h.label,
                                      h.protected, rankings, ev.groups, progress, ev.design)
                             for a in attributes]
    if plan.flips is not None:
        with clock.step("flips"):
            found.flips = _flips(plan, ev, rankings, progress)
    if plan.compare is not None:
        with clock.step("compare"):
            search = replace(plan.search, metric=plan.compare.metric)
            found.comparison = compare_models(
                ev.frame, ev.y_true, ev.decision(), ev.decision("baseline"),
                metric=plan.compare.metric, favorable=ev.favorable, options=search,
                confidence_level=cl, rng=seed,
                encoding=ev.encoding,
                design=replace(ev.design, membership={}))  # paired rows: no groups to weigh
            found.baseline = ev.model("baseline").describe()
    with clock.step("verdict"):
        measured = measure(groups=found.groups, slices=found.slices, flips=found.flips,
                           estimated=ev.design.estimated,
                           comparison=found.comparison, confidence_level=cl)
        verdict = judge(measured, plan.policy, confidence_level=cl)
    prov = provenance(plan, command=command, timings=clock.timings,
                      model=ev.model().describe(), data=h.describe(), design=ev.design,
                      favorable=resolve_favorable(plan.model.favorable, h.label, h.positive))
    return assemble_report(found, verdict, prov)


def _attributes(asked, protected, section: str, frame, membership=()) -> tuple:
    attributes = asked or protected
    if not attributes:
        raise DataError(f"[{section}] needs `attributes` (or protected attributes in [data])")
    for a in attributes:
        if a not in frame.columns and a not in membership:
            what = "flip" if section == "flips" else "proxy"
            raise DataError(f"{what} attribute `{a}` is not in the data"
                            + close_names(a, list(frame.columns)))
    return tuple(attributes)


def _ranking(plan: Plan, frame, attribute, model_features, label, protected, rankings: dict,
             groups, progress: Progress | None = None, design=None):
    """The proxy ranking of one attribute, computed once per run (the table and transport share it);
    the attribute as the groups see it (its bands when binned; an attribute known as membership
    probabilities as each row's most probable group), the features as they are."""
    if attribute not in rankings:
        notes = []
        member = design.membership.get(attribute) if design is not None else None
        if member is not None:
            frame = frame.assign(**{attribute: member.most_likely()})
            notes.append(f"`{attribute}` is known as membership probabilities: the proxies are "
                         "ranked against each row's most probable group")
        if design is not None and (design.weights is not None or design.cluster is not None):
            notes.append("the ranking is unweighted: it measures association in the rows as "
                         "sampled, not in the weighted population")
        features = (plan.proxies.features if plan.proxies else None) or model_features
        if features:
            features = [c for c in features if c != attribute]
        else:
            skip = {label, attribute, *protected, *_design_columns(plan)}
            features = [c for c in frame.columns if c not in skip]
        # the multivariate check runs only for the attributes the proxies table shows
        shown = (plan.proxies.attributes or protected) if plan.proxies else ()
        if groups is not frame and attribute in groups.columns:
            frame = frame.assign(**{attribute: groups[attribute]})
        found = find_proxies(frame, attribute, features=features,
                             confidence_level=plan.confidence_level, rng=plan.seed,
                             multivariate=attribute in shown,
                             progress=_bar(progress, f"proxies of {attribute}"))
        rankings[attribute] = replace(found, notes=(*found.notes, *notes)) if notes else found
    return rankings[attribute]


def _flips(plan: Plan, ev: Evidence, rankings: dict, progress) -> list:
    f = plan.flips
    attributes = _attributes(f.attributes, ev.holdout.protected, "flips", ev.frame,
                             ev.design.membership)
    jobs = [(a, m) for a in attributes for m in f.modes]
    tick = _bar(progress, "flip tests")
    out = []
    for done, (attribute, mode) in enumerate(jobs):
        if tick:
            tick(done, len(jobs))
        ranking = None
        if mode == "transport" and f.proxies is None:
            ranking = _ranking(plan, ev.frame, attribute, ev.model().feature_names,
                               ev.holdout.label, ev.holdout.protected, rankings, ev.groups,
                               design=ev.design)
        with warnings.catch_warnings():  # the report states it: the row that does not apply
            warnings.filterwarnings("ignore", message=".*direct flip does not apply",
                                    category=ProbeWarning)
            out.append(flip_test(ev.model(), _flip_frame(ev, attribute, mode), attribute,
                                 options=f, mode=mode,
                                 threshold=ev.threshold, favorable=ev.favorable,
                                 confidence_level=plan.confidence_level, rng=plan.seed,
                                 scores=ev.scores(), encoding=ev.encoding, proxy_ranking=ranking,
                                 design=ev.design))
    if tick:
        tick(len(jobs), len(jobs))
    return out


def _flip_frame(ev: Evidence, attribute: str, mode: str):
    """The model's inputs with a binned attribute as its bands (its groups); a flip that would
    set a band as the value of a model input cannot be scored, so it is refused."""
    if ev.groups is ev.frame or attribute in ev.design.membership \
            or not isinstance(ev.groups[attribute].dtype, pd.CategoricalDtype) \
            or isinstance(ev.frame[attribute].dtype, pd.CategoricalDtype):
        return ev.inputs
    banded = ev.groups[attribute]
    names = ev.model().feature_names
    if mode != "twins" and (names is None or attribute in names):
        raise DataError(f"{mode} flips of `{attribute}` would set a band (a binned value) as a "
                        "model input, which cannot be scored; flip it with --mode twins")
    return ev.inputs.assign(**{attribute: banded})


def _run_proxies_only(plan: Plan, command, clock: _Clock, progress) -> dict:
    """``probe proxies``: no model, no label needed."""
    with clock.step("load data"):
        path = plan.resolve(plan.data.path)
        frame = read_table(path)
    data = {"path": str(path), "sha256": sha256_file(path), "rows": len(frame)}
    design = read_design(frame, weights=plan.data.weights, cluster=plan.data.cluster,
                         membership=plan.data.membership, where=f"`{path}`")
    protected = _protected(plan.data)
    label = plan.data.label or None
    if label and label not in frame.columns:
        raise DataError(f"label column `{label}` is not in `{path}`"
                        + close_names(label, list(frame.columns)))
    if not label and not plan.proxies.features:
        raise DataError("proxies need to know the label so that it is not ranked as a proxy: "
                        "name it with --label COL (plan: `label` in [data]), or name the candidate "
                        "features with --features A,B (plan: `features` in [proxies])")
    found = Findings()
    with clock.step("proxies"):
        attributes = _attributes(plan.proxies.attributes, protected, "proxies", frame,
                                 design.membership)
        groups = group_view(frame, [a for a in attributes if a not in design.membership],
                            plan.data.bins)
        found.proxies = [_ranking(plan, frame, a, None, label, protected, {}, groups, progress,
                                  design) for a in attributes]
    verdict = judge(measure(), plan.policy, confidence_level=plan.confidence_level)
    prov = provenance(plan, command=command, timings=clock.timings, model=None, data=data,
                      design=design)
    return assemble_report(found, verdict, prov)
