"""Counterfactual flip tests: does the decision change when a protected attribute (or what stands in
for it) changes?

Three modes, each reported per ``(from, to)`` pair of the attribute's observed levels (or only into a
named ``reference`` level):

- **direct** — set the attribute of every row of the ``from`` group to ``to``, all else equal, and
  re-score (one batched model call per pair). Applies only when the attribute is a model input; it
  measures *direct* dependence, not disparate impact (:data:`DIRECT_FLIP_CAUTION`).
- **transport** — also move the attribute's proxies to where they would sit in the ``to`` group.
  A numeric proxy is *quantile-mapped*: a row at mid-rank ``r`` among the ``n`` non-missing values of
  its group sits at ``q = (r - 1/2) / n`` and moves to the ``to`` group's empirical quantile at ``q``
  (the same ``(k - 1/2) / n`` plotting position, linearly interpolated; integer columns take the
  nearest order statistic so values stay in the observed support). Ties share a mid-rank and so move
  together; mapping a group onto itself is the identity. A categorical proxy is moved by the coupling
  of the two level distributions that changes the fewest rows (optimal transport with a 0-1 cost):
  the target counts are the ``to`` group's shares times the group size (largest-remainder rounding,
  so the shares are preserved exactly up to whole rows); each level keeps ``min(have, need)`` of its
  rows, the surplus rows (chosen by a seeded permutation) are dealt to the levels in deficit in a fixed
  level order. Missing proxy values stay missing. The attribute itself is changed too when it is a
  model input; when it is not (the common case) only the proxies move.
- **twins** (situation testing) — for each person, the ``k`` nearest neighbours in the other group on
  the non-protected model features (numerics standardised with the pooled mean and standard deviation
  of the two groups, missing values set to that mean; categoricals one-hot with each indicator scaled
  by ``1/sqrt(2)`` so that a level mismatch costs the same as one standard deviation — the 20 most
  frequent levels are kept, the rest share one indicator, missing is a level). Neighbours come from
  scikit-learn's ``NearestNeighbors`` fitted on the other group: a k-d tree up to 8 encoded
  dimensions, beyond that its brute-force search, which sklearn runs in chunks under a working-memory
  bound (on 20 dimensions it is about 20 times faster than a tree). Reported: the share of people
  whose decision differs from that of most of their twins (a tie among an even ``k`` counts as
  no difference), split by direction, and the mean of (twins' mean score − own score). Near the
  decision boundary neighbours disagree whatever the group, so that share is well above zero even
  for a model blind to the group; the *control* repeats the search in the person's own group
  (themselves excluded), on a pool of the same size as the cross-group one (the larger is
  subsampled, seeded: a k-NN search reaches farther in a smaller pool and finds more disagreement),
  and the *excess* — the mean per-person paired difference of the cross-group and own-group flip
  indicators (and of the twins' scores) — is the part attributable to the group, with a Wald
  interval on the paired differences. Queries go in chunks of 20,000 rows, so memory stays
  bounded.

Every share has a Wilson interval; the mean score change a t interval (method ``"t"``); the twins'
excess a Wald interval on the per-person paired differences (method ``"paired-wald"``). Twins are
shared between people, so twins intervals are approximate. The largest
absolute score change is reported as a plain number: the bootstrap is not consistent for a maximum.
Where the flips concentrate is shown by slice: single-column levels and two-column conjunctions of
the other columns (numerics in quartile bins), the top few by flip rate among slices with at least
30 rows and at least one flip, with Wilson intervals.

A target level that the model never saw (absent from ``model.categories[attribute]``) is not scored:
the row carries ``impossible=True`` and a note.

References
----------
Wilson, E. B. (1927). Probable inference, the law of succession, and statistical inference. JASA 22.
Bendick, M. (2007). Situation testing for employment discrimination in the United States. Horizons
stratégiques 5 (paired testing, the idea behind the twins mode).
Villani, C. (2009). Optimal Transport, Old and New, ch. 2 (monotone rearrangement on the line).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field, replace
from itertools import combinations

import numpy as np
import pandas as pd
from scipy import stats as _sps

from .data import require_finite
from .errors import DataError, DegenerateWarning, ModelError, PlanError, ProbeError
from .proxies import MAX_LEVELS, attribute_levels, find_proxies, is_numeric
from .stats import Estimate, wilson_interval, z_value

__all__ = [
    "flip_test",
    "direct_flips",
    "transport_flips",
    "twin_flips",
    "FlipFindings",
    "FlipRow",
    "FlipSlice",
    "DIRECT_FLIP_CAUTION",
    "SCREEN_CAUTION",
    "quantile_map",
    "transport_categorical",
]

DIRECT_FLIP_CAUTION = (
    "A direct flip changes only the protected attribute, all else equal: it measures the model's "
    "direct dependence on that input, not disparate impact. A model that never reads the attribute "
    "can still treat groups very differently through features that stand in for it (see the "
    "transport and twins modes and the group metrics)."
)
SCREEN_CAUTION = (
    "These figures are a statistical screen, not a legal finding; defer to counsel, local law and "
    "licensed practice."
)
MODES = ("direct", "transport", "twins")

_MIN_SLICE_ROWS = 30
_TOP_SLICES = 5
_SLICE_LEVELS = 8      # most frequent levels per categorical column in the breakdown
_TWIN_LEVELS = 20      # most frequent levels one-hot encoded per categorical in twins
_TWIN_CHUNK = 20_000   # query rows per nearest-neighbour call
_KD_TREE_MAX_DIM = 8   # above this many encoded dimensions, brute (chunked) search is faster
_TWIN_CONTROL_KEYS = ("control_rate", "matched_rate", "excess", "excess_to_favorable",
                      "excess_to_unfavorable", "excess_score_change")


# ---------------------------------------------------------------------------------------------
# results


@dataclass(frozen=True)
class FlipSlice:
    """Where flips concentrate: one slice of the ``from`` group.

    Attributes
    ----------
    predicates : tuple of dict
        ``{"column", "op", "value"}`` with op ``"=="`` (a level), ``"in"`` (a numeric bin
        ``[low, high)``, None for an open end), ``"missing"`` or ``"other"`` (any level outside the
        column's most frequent ones).
    label : str
    rows : int
    flip_rate : Estimate
    """

    predicates: tuple
    label: str
    rows: int
    flip_rate: Estimate

    def to_dict(self) -> dict:
        return {"predicates": [dict(p) for p in self.predicates], "label": self.label,
                "rows": self.rows, "flip_rate": self.flip_rate.to_dict()}


@dataclass(frozen=True)
class FlipRow:
    """One ``(from, to)`` pair of one mode.

    Attributes
    ----------
    attribute, mode : str
    from_, to : object
        The source and target levels (``"from"`` in the report).
    rows : int
        Rows of the source group (non-missing attribute).
    flip_rate, to_favorable, to_unfavorable : Estimate
        Shares of the source group's decisions that change, that become favourable, that become
        unfavourable (Wilson). For twins: the share whose decision differs from most of their twins',
        and the two directions ("to favourable": the twins' decision is favourable and theirs is not).
    mean_score_change : Estimate
        Mean of counterfactual minus actual score (twins: twins' mean score minus own), t interval.
    max_score_change : float
        The largest absolute score change.
    impossible : bool
        The target level is unknown to the model; nothing was scored and the estimates are NaN.
    moved : tuple of str
        The columns changed (the attribute when it is an input, plus any proxies moved).
    by_slice : tuple of FlipSlice
    sentence : str
        The finding in plain language.
    control_rate : Estimate or None
        Twins only: the share of the same people whose decision differs from most of their ``k``
        nearest twins in their *own* group (themselves excluded), on a pool of the same size as the
        cross-group one (Wilson). None for the other modes, or when the group is too small.
    matched_rate : Estimate or None
        Twins only: the cross-group share on the size-matched pool (equal to ``flip_rate`` unless
        the other group was larger and was subsampled; Wilson).
    excess, excess_to_favorable, excess_to_unfavorable : Estimate or None
        Twins only: the mean per-person paired difference of the cross-group (matched) and
        own-group flip indicators, overall and by direction: the part of the discordance
        attributable to the group (Wald interval on the paired differences, ``"paired-wald"``).
    excess_score_change : Estimate or None
        Twins only: mean of (cross-group twins' mean score − own-group twins' mean score).
    twin_pool : int or None
        Twins only: the number of candidate twins each search draws from (both pools).
    """

    attribute: str
    mode: str
    from_: object
    to: object
    rows: int
    flip_rate: Estimate
    to_favorable: Estimate
    to_unfavorable: Estimate
    mean_score_change: Estimate
    max_score_change: float
    impossible: bool
    moved: tuple
    by_slice: tuple
    sentence: str
    control_rate: Estimate | None = None
    matched_rate: Estimate | None = None
    excess: Estimate | None = None
    excess_to_favorable: Estimate | None = None
    excess_to_unfavorable: Estimate | None = None
    excess_score_change: Estimate | None = None
    twin_pool: int | None = None

    def to_dict(self) -> dict:
        out = {
            "attribute": self.attribute,
            "mode": self.mode,
            "from": _plain(self.from_),
            "to": _plain(self.to),
            "rows": self.rows,
            "flip_rate": self.flip_rate.to_dict(),
            "to_favorable": self.to_favorable.to_dict(),
            "to_unfavorable": self.to_unfavorable.to_dict(),
            "mean_score_change": self.mean_score_change.to_dict(),
            "max_score_change": _json(self.max_score_change),
            "impossible": self.impossible,
            "moved": list(self.moved),
            "by_slice": [s.to_dict() for s in self.by_slice],
            "sentence": self.sentence,
        }
        if self.mode == "twins":  # the own-group control; None when it could not be formed
            for name in _TWIN_CONTROL_KEYS:
                e = getattr(self, name)
                out[name] = None if e is None else e.to_dict()
            out["twin_pool"] = self.twin_pool
        return out


@dataclass(frozen=True)
class FlipFindings:
    """The flip test of one attribute in one mode.

    Attributes
    ----------
    attribute, mode : str
    rows : tuple of FlipRow
        Empty when the mode does not apply (see ``notes``).
    notes : tuple of str
        What was not applicable, dropped, chosen or impossible.
    caution : str
        :data:`DIRECT_FLIP_CAUTION` (direct mode) and :data:`SCREEN_CAUTION`.
    """

    attribute: str
    mode: str
    rows: tuple
    notes: tuple
    caution: str
    threshold: float = 0.5
    favorable: bool = True
    extras: dict = field(default_factory=dict, compare=False)

    def to_dict(self) -> list:
        """The report's ``flips`` entries: one dict per row."""
        return [r.to_dict() for r in self.rows]

    def to_frame(self) -> pd.DataFrame:
        recs = []
        for r in self.rows:
            rec = {"attribute": r.attribute, "mode": r.mode, "from": r.from_, "to": r.to,
                   "rows": r.rows}
            for name in ("flip_rate", "to_favorable", "to_unfavorable", "mean_score_change"):
                e = getattr(r, name)
                rec[name], rec[name + "_low"], rec[name + "_high"] = e.value, e.low, e.high
            if r.mode == "twins":
                for name in ("control_rate", "excess"):
                    e = getattr(r, name)
                    rec[name], rec[name + "_low"], rec[name + "_high"] = (
                        (math.nan,) * 3 if e is None else (e.value, e.low, e.high))
            rec["max_score_change"] = r.max_score_change
            rec["impossible"] = r.impossible
            rec["sentence"] = r.sentence
            recs.append(rec)
        return pd.DataFrame(recs)


# ---------------------------------------------------------------------------------------------
# public entry points


def flip_test(model, X: pd.DataFrame, attribute: str, *, mode: str = "direct", reference=None,
              proxies=None, n_proxies: int = 3, threshold: float = 0.5, favorable: bool = True,
              k: int = 5, confidence_level: float = 0.95, rng=0,
              breakdown_columns=None, scores=None) -> FlipFindings:
    """Counterfactual flip test of ``model`` on ``X`` for one protected ``attribute``.

    Parameters
    ----------
    model : object
        Anything with ``scores(frame) -> array`` of positive-class probabilities; optional
        ``feature_names`` (tuple of the columns it reads, or None: every column of ``X``) and
        ``categories`` (dict column -> tuple of levels it knows).
    X : pandas.DataFrame
        The rows to test, including ``attribute``. Not modified.
    attribute : str
    mode : {"direct", "transport", "twins"}, default="direct"
    reference : object, optional
        Flip only into this level (default: every other observed level).
    proxies : sequence of str, optional
        Transport: the columns to move; default the top ``n_proxies`` model inputs by
        :func:`probe.proxies.find_proxies` (single-feature measures).
    scores : array_like, optional
        The model's scores of ``X`` as it is, when the caller has them already (saves one model
        call over all rows).
    n_proxies : int, default=3
        At most this many proxies are moved when probe chooses them, and only those whose
        cross-fitted single-feature AUC for the attribute is at least ``MIN_PROXY_AUC`` (0.55).
    threshold : float, default=0.5
        Decision = ``scores >= threshold``.
    favorable : bool, default=True
        Whether the positive decision is the favourable one.
    k : int, default=5
        Twins per person.
    confidence_level : float, default=0.95
    rng : None, int or numpy.random.Generator, default=0
        Seeds the categorical transport, the proxy search and the twins' size-matched pools.
    breakdown_columns : sequence of str, optional
        Columns for the by-slice breakdown (default: the other model inputs present in ``X``).

    Returns
    -------
    FlipFindings

    Raises
    ------
    DataError, PlanError, ModelError

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> class Model:
    ...     feature_names = ("sex", "income")
    ...     def scores(self, f):
    ...         return np.clip(f["income"].to_numpy() / 100 + 0.1 * (f["sex"] == "M"), 0, 1)
    >>> X = pd.DataFrame({"sex": ["F", "M"] * 50, "income": np.linspace(0, 99, 100)})
    >>> res = flip_test(Model(), X, "sex", reference="M")
    >>> print(res.rows[0].sentence)  # doctest: +NORMALIZE_WHITESPACE
    Changing sex from F to M, all else equal, changes 10.0 % of decisions
    (95 % interval 4.3–21.4 %): 10.0 % become favourable, 0.0 % unfavourable.
    """
    if mode not in MODES:
        raise PlanError(f"`mode` must be one of {', '.join(MODES)}, got {mode!r}")
    fn = {"direct": direct_flips, "transport": transport_flips, "twins": twin_flips}[mode]
    kwargs = dict(reference=reference, threshold=threshold, favorable=favorable,
                  confidence_level=confidence_level, breakdown_columns=breakdown_columns,
                  scores=scores)
    if mode == "transport":
        kwargs.update(proxies=proxies, n_proxies=n_proxies, rng=rng)
    elif mode == "twins":
        kwargs.update(k=k, rng=rng)
    return fn(model, X, attribute, **kwargs)


def direct_flips(model, X, attribute, *, reference=None, threshold=0.5, favorable=True,
                 confidence_level=0.95, breakdown_columns=None, scores=None) -> FlipFindings:
    """Direct flips: change only ``attribute``; see :func:`flip_test`."""
    ctx = _flip_iv(model, X, attribute, reference, threshold, favorable, confidence_level,
                   breakdown_columns)
    notes = list(ctx.notes)
    caution = DIRECT_FLIP_CAUTION + " " + SCREEN_CAUTION
    if not ctx.is_input:
        notes.append(f"`{attribute}` is not a model input, so a direct flip does not apply "
                     "(use the transport or twins mode)")
        return FlipFindings(attribute, "direct", (), tuple(notes), caution, threshold, favorable)
    base = _original_scores(model, X, scores)
    rows = []
    for src, dst in ctx.pairs:
        idx = ctx.group_rows[src]
        if ctx.unknown(dst):
            rows.append(_impossible_row(ctx, "direct", src, dst, notes))
            continue
        # a positional take is already a new frame; the shallow copy only drops pandas' "is a
        # copy" flag, so setting a column never warns and never touches X
        cf = _set_column(X.iloc[idx].copy(deep=False), attribute, dst)
        new = _scores(model, cf, f"the {len(idx)} rows of `{attribute}` = {src!r} set to {dst!r}")
        rows.append(_pair_row(ctx, "direct", src, dst, idx, base[idx], new, (attribute,)))
    return FlipFindings(attribute, "direct", tuple(rows), tuple(notes), caution, threshold,
                        favorable)


def transport_flips(model, X, attribute, *, reference=None, proxies=None, n_proxies=3,
                    threshold=0.5, favorable=True, confidence_level=0.95, rng=0,
                    breakdown_columns=None, scores=None) -> FlipFindings:
    """Transport flips: move ``attribute`` (if an input) and its proxies; see :func:`flip_test`."""
    ctx = _flip_iv(model, X, attribute, reference, threshold, favorable, confidence_level,
                   breakdown_columns)
    notes = list(ctx.notes)
    gen = np.random.default_rng(rng)
    proxy_seed, *pair_seeds = (int(s) for s in gen.integers(0, 2**31 - 1, size=1 + len(ctx.pairs)))
    proxies = _choose_proxies(ctx, X, attribute, proxies, n_proxies, proxy_seed, notes)
    if not proxies and not ctx.is_input:
        notes.append(f"`{attribute}` is not a model input and no proxies were found to move; "
                     "transport does not apply")
        return FlipFindings(attribute, "transport", (), tuple(notes), SCREEN_CAUTION, threshold,
                            favorable)
    moved = ((attribute,) if ctx.is_input else ()) + tuple(proxies)
    prepared = {p: _prepare_proxy(X[p]) for p in proxies}
    base = _original_scores(model, X, scores)
    rows = []
    for (src, dst), seed in zip(ctx.pairs, pair_seeds):
        idx = ctx.group_rows[src]
        if ctx.is_input and ctx.unknown(dst):
            rows.append(_impossible_row(ctx, "transport", src, dst, notes, moved))
            continue
        cf = X.iloc[idx].copy(deep=False)  # a new frame (see direct_flips); X is never touched
        if ctx.is_input:
            cf = _set_column(cf, attribute, dst)
        tgt = ctx.group_rows[dst]
        pgen = np.random.default_rng(seed)
        for p in proxies:
            cf[p] = _move_proxy(X[p], prepared[p], idx, tgt, pgen)
        new = _scores(model, cf, f"the {len(idx)} rows of `{attribute}` = {src!r} transported "
                                 f"to {dst!r}")
        rows.append(_pair_row(ctx, "transport", src, dst, idx, base[idx], new, moved))
    return FlipFindings(attribute, "transport", tuple(rows), tuple(notes), SCREEN_CAUTION,
                        threshold, favorable, {"proxies": tuple(proxies)})


def twin_flips(model, X, attribute, *, reference=None, k=5, threshold=0.5, favorable=True,
               confidence_level=0.95, breakdown_columns=None, rng=0,
               n_jobs=None, scores=None) -> FlipFindings:
    """Twins (situation testing): compare with the ``k`` nearest people of the other group, and
    with the ``k`` nearest of their own group as a control.

    Near the decision boundary a person's nearest neighbours often disagree with them whatever
    their group, so the raw cross-group share (``flip_rate``) is well above zero even for a model
    that never sees the group. The control repeats the search among the same people's own group
    (each person excluded from their own twins) and reports the share that disagrees with most of
    those (``control_rate``). The part attributable to the group is the per-person paired
    difference ``excess_i = flip_i(other group) - flip_i(own group)`` (likewise for each direction,
    and for the twins' mean score), averaged over the source group.

    The reach of a k-nearest-neighbour search shrinks as the pool grows, and with it the share of
    disagreeing twins; so both searches behind the excess draw from pools of the same size,
    ``m = min(n_other, n_own - 1)``: the larger of the two is a seeded random subsample (the other
    group is subsampled only for the excess; ``flip_rate`` always uses all of it, and
    ``matched_rate`` is the cross-group share on the matched pool, so
    ``excess = matched_rate - control_rate`` exactly).

    Self-exclusion: the own-group search asks for ``k + 1`` neighbours and drops the person
    themself; when exact duplicates crowd the person out of their own ``k + 1`` nearest, the
    farthest of the ``k + 1`` is dropped instead (deterministic, and every remaining twin is another
    person at distance zero).

    Intervals: the raw shares and ``control_rate`` are Wilson; each excess is the mean of the
    per-person paired differences (in ``{-1, 0, 1}``, or real for scores) with a Wald interval
    ``mean ± z · sd / sqrt(n)`` (method ``"paired-wald"``). The same twins serve several people, and
    the subsampled pool is one draw, so the differences are not independent and the intervals are
    approximate — more so when the source group is much larger than the pools (a note says so).
    In a simulation (a group-blind model, two groups with identical feature distributions, 8,000
    rows split 50/50 or 25/75, 128 rows of results) the 95 % interval of ``excess`` covered zero
    92 % of the time and the by-direction intervals 80–85 %: read them as guides, not exact levels.

    What the control removes is the disagreement found near the decision boundary whatever the
    group. It does not remove imperfect matching: when the groups' feature distributions differ,
    a person's nearest twins in the other group sit systematically towards that group's bulk,
    and a model can show an excess through the features that differ (a proxy at work, or a
    mismatch the features cannot resolve) even when it never reads the group.

    Parameters
    ----------
    model, X, attribute, reference, threshold, favorable, confidence_level, breakdown_columns
        As for :func:`flip_test`.
    k : int, default=5
        Twins per person, in each search.
    rng : None, int or numpy.random.Generator, default=0
        Seeds the subsample that matches the two pools in size.
    n_jobs : int, optional
        Passed to scikit-learn's ``NearestNeighbors``.

    Returns
    -------
    FlipFindings
        Rows carry ``control_rate``, ``matched_rate``, ``excess``, ``excess_to_favorable``,
        ``excess_to_unfavorable``, ``excess_score_change`` and ``twin_pool`` (None when the source
        group has ``k`` rows or fewer, so no own-group control can be formed; a note says so).

    References
    ----------
    Bendick, M. (2007), situation testing (see the module docstring).
    """
    ctx = _flip_iv(model, X, attribute, reference, threshold, favorable, confidence_level,
                   breakdown_columns)
    if not isinstance(k, (int, np.integer)) or isinstance(k, bool) or k < 1:
        raise PlanError(f"`k` must be a positive integer, got {k!r}")
    k = int(k)
    notes = list(ctx.notes)
    features = [c for c in ctx.inputs if c != attribute and c in X.columns]
    if not features:
        raise DataError(f"twins need model features besides `{attribute}`; none are in the data")
    notes.append("twins matched on " + ", ".join(f"`{c}`" for c in features)
                 + " (numerics standardised, categoricals one-hot)")
    gen = np.random.default_rng(rng)
    pair_seeds = [int(s) for s in gen.integers(0, 2**31 - 1, size=len(ctx.pairs))]
    base = _original_scores(model, X, scores)
    fav = _favorable(base >= threshold, favorable)
    z = z_value(confidence_level)
    rows = []
    for (src, dst), seed in zip(ctx.pairs, pair_seeds):
        idx, tgt = ctx.group_rows[src], ctx.group_rows[dst]
        if len(tgt) < k:
            notes.append(f"twins {src!r} -> {dst!r} skipped: the {dst!r} group has {len(tgt)} rows, "
                         f"fewer than k={k}")
            continue
        Zs, Zt = _twin_design(X, features, idx, tgt)
        n_src, n_dst = len(idx), len(tgt)
        m = min(n_dst, n_src - 1)
        control = m >= k
        pgen = np.random.default_rng(seed)
        # the other group's pool for the excess: all of it, or m of its rows
        sub = np.sort(pgen.choice(n_dst, m, replace=False)) if control and n_dst > m else None
        raw_nb, matched_nb = _cross_twins(Zt, Zs, k, sub, n_jobs)
        own = fav[idx]
        raw = _twin_outcomes(own, fav, base, tgt[raw_nb])
        row = _row_from_outcomes(ctx, "twins", src, dst, idx, raw[0], raw[1], raw[2] - base[idx],
                                 ())
        if not control:
            notes.append(f"twins {src!r} -> {dst!r}: no own-group control, the {src!r} group has "
                         f"{n_src} rows (k={k} twins need at least {k + 1})")
            rows.append(replace(row, sentence=_twin_sentence(row, k, None, confidence_level)))
            continue
        own_nb = _own_twins(Zs, k, m, pgen, n_jobs)
        matched = raw if sub is None else _twin_outcomes(own, fav, base, tgt[sub[matched_nb]])
        ctrl = _twin_outcomes(own, fav, base, idx[own_nb])
        if sub is not None or n_src - 1 > m:
            which = f"{dst!r} group" if sub is not None else f"own {src!r} group"
            notes.append(f"twins {src!r} -> {dst!r}: the excess compares pools of equal size, "
                         f"{m} rows (the {which} subsampled)")
        if n_src > 2 * m:
            notes.append(f"twins {src!r} -> {dst!r}: each candidate twin serves about "
                         f"{n_src / m:.1f} people of the {src!r} group, so the excess interval "
                         "understates its uncertainty")
        counts = np.array([(ctrl[0] | ctrl[1]).sum(), (matched[0] | matched[1]).sum()], float)
        lo, hi = wilson_interval(counts, np.full(2, float(n_src)),
                                 confidence_level=confidence_level)
        rate_c, rate_m = (Estimate(c / n_src, float(a), float(b), "wilson")
                          for c, a, b in zip(counts, lo, hi))
        d_fav = matched[0].astype(float) - ctrl[0]
        d_unfav = matched[1].astype(float) - ctrl[1]
        row = replace(
            row, control_rate=rate_c, matched_rate=rate_m,
            excess=_paired_wald(d_fav + d_unfav, z),  # to_fav and to_unfav are disjoint
            excess_to_favorable=_paired_wald(d_fav, z),
            excess_to_unfavorable=_paired_wald(d_unfav, z),
            excess_score_change=_paired_wald(matched[2] - ctrl[2], z), twin_pool=int(m))
        rows.append(replace(row, sentence=_twin_sentence(row, k, sub is not None,
                                                         confidence_level)))
    return FlipFindings(attribute, "twins", tuple(rows), tuple(notes), SCREEN_CAUTION, threshold,
                        favorable, {"k": k, "features": tuple(features),
                                    "control": "own-group twins, self excluded, pools matched "
                                               "in size",
                                    "excess_interval": "paired-wald"})


# ---------------------------------------------------------------------------------------------
# validation and context


@dataclass
class _Context:
    attribute: str
    inputs: tuple
    is_input: bool
    known: tuple | None
    levels: tuple
    pairs: list
    group_rows: dict
    threshold: float
    favorable: bool
    confidence_level: float
    breakdown: dict
    notes: list

    def unknown(self, level) -> bool:
        return self.known is not None and level not in self.known


def _flip_iv(model, X, attribute, reference, threshold, favorable, confidence_level,
             breakdown_columns) -> _Context:
    if not callable(getattr(model, "scores", None)):
        raise ModelError(f"the model ({type(model).__name__}) has no `scores(frame)` method")
    if not isinstance(X, pd.DataFrame):
        raise DataError(f"`X` must be a pandas DataFrame, got {type(X).__name__}")
    if attribute not in X.columns:
        raise DataError(f"protected attribute `{attribute}` is not a column of the data")
    if isinstance(threshold, bool) or not isinstance(threshold, (int, float, np.floating)) \
            or not 0.0 <= float(threshold) <= 1.0:
        raise PlanError(f"`threshold` must be a number in [0, 1], got {threshold!r}")
    if not isinstance(favorable, (bool, np.bool_)):
        raise PlanError(f"`favorable` must be True (positive decision is favourable) or False, "
                        f"got {favorable!r}")
    if not 0.0 < confidence_level < 1.0:
        raise PlanError(f"`confidence_level` must lie strictly between 0 and 1, got {confidence_level!r}")
    names = getattr(model, "feature_names", None)
    inputs = tuple(names) if names is not None else tuple(X.columns)
    is_input = attribute in inputs
    cats = getattr(model, "categories", None) or {}
    known = tuple(cats[attribute]) if attribute in cats and cats[attribute] is not None else None
    notes = []
    col = X[attribute]
    missing = col.isna().to_numpy()
    if missing.any():
        notes.append(f"{int(missing.sum())} rows with missing `{attribute}` were left out")
    levels = attribute_levels(col)
    if len(levels) > MAX_LEVELS:
        raise DataError(f"protected attribute `{attribute}` has {len(levels)} levels (at most "
                        f"{MAX_LEVELS} are flipped between); bin it first, e.g. ages into bands")
    if len(levels) < 2 and reference is None:
        raise DataError(f"protected attribute `{attribute}` needs at least two observed levels, "
                        f"got {list(levels)}")
    codes = pd.Categorical(col, categories=list(levels)).codes
    order = np.argsort(codes, kind="stable")
    bounds = np.searchsorted(codes[order], np.arange(len(levels) + 1))
    group_rows = {lv: order[bounds[i]:bounds[i + 1]] for i, lv in enumerate(levels)}
    if reference is not None:
        if reference not in levels and (known is None or reference not in known):
            raise PlanError(f"`reference` {reference!r} is not an observed level of `{attribute}` "
                            f"(levels: {', '.join(map(str, levels))})")
        pairs = [(lv, reference) for lv in levels if lv != reference]
        if reference not in group_rows:
            group_rows[reference] = np.empty(0, dtype=np.int64)
    else:
        pairs = [(a, b) for a in levels for b in levels if a != b]
    if not pairs:
        raise DataError(f"nothing to flip: `{attribute}` has only the level {reference!r}")
    if known is not None:
        unseen = [lv for lv in levels if lv not in known]
        if unseen:
            notes.append(f"the data hold levels of `{attribute}` the model never saw: "
                         + ", ".join(map(repr, unseen)))
    if breakdown_columns is None:
        breakdown_columns = [c for c in inputs if c != attribute and c in X.columns]
    else:
        if isinstance(breakdown_columns, str):
            breakdown_columns = [breakdown_columns]
        bad = [c for c in breakdown_columns if c not in X.columns]
        if bad:
            raise DataError(f"`breakdown_columns` names columns not in the data: {', '.join(bad)}")
        breakdown_columns = [c for c in breakdown_columns if c != attribute]
    require_finite(X, [c for c in inputs if c in X.columns])
    breakdown = {c: _encode_slice_column(X[c]) for c in breakdown_columns}
    return _Context(attribute, inputs, is_input, known, levels, pairs, group_rows, float(threshold),
                    bool(favorable), confidence_level, breakdown, notes)


def _original_scores(model, X, scores) -> np.ndarray:
    """The model's scores of the rows as they are: the caller's, when it has them, else one call."""
    if scores is None:
        return _scores(model, X, "the original rows")
    s = np.asarray(scores, dtype=float)
    if s.shape != (len(X),) or not np.all(np.isfinite(s) & (s >= 0) & (s <= 1)):
        raise DataError(f"`scores` must be {len(X)} probabilities in [0, 1], one per row of `X`")
    return s


def _scores(model, frame, what) -> np.ndarray:
    try:
        s = model.scores(frame)
    except ProbeError:
        raise
    except Exception as exc:  # the model's own failure, turned into one line
        raise ModelError(f"scoring {what} failed: {type(exc).__name__}: {exc}") from exc
    try:
        s = np.asarray(s, dtype=float)
    except (TypeError, ValueError) as exc:
        raise ModelError(f"scoring {what}: scores are not numbers ({exc})") from exc
    if s.shape != (len(frame),):
        raise ModelError(f"scoring {what}: expected {len(frame)} scores, got shape {np.shape(s)}")
    bad = ~np.isfinite(s) | (s < 0) | (s > 1)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise ModelError(f"scoring {what}: scores must be probabilities in [0, 1]; "
                         f"row {i} got {s[i]!r} ({int(bad.sum())} bad scores)")
    return s


def _set_column(frame, column, value):
    out = frame
    s = out[column]
    if isinstance(s.dtype, pd.CategoricalDtype):
        cats = s.cat.categories
        if value not in cats:
            s = s.cat.add_categories([value])
        out[column] = pd.Categorical([value] * len(out), categories=s.cat.categories,
                                     ordered=s.cat.ordered)
    else:
        out[column] = pd.Series([value] * len(out), index=out.index).astype(s.dtype) \
            if len(out) else s
    return out


def _favorable(decision, favorable):
    return decision if favorable else ~decision


# ---------------------------------------------------------------------------------------------
# assembling rows


def _pair_row(ctx, mode, src, dst, idx, old, new, moved):
    fav_old = _favorable(old >= ctx.threshold, ctx.favorable)
    fav_new = _favorable(new >= ctx.threshold, ctx.favorable)
    return _row_from_outcomes(ctx, mode, src, dst, idx, ~fav_old & fav_new, fav_old & ~fav_new,
                              new - old, moved)


def _row_from_outcomes(ctx, mode, src, dst, idx, to_fav, to_unfav, change, moved):
    n = len(idx)
    flip = to_fav | to_unfav
    counts = np.array([flip.sum(), to_fav.sum(), to_unfav.sum()], dtype=float)
    lo, hi = wilson_interval(counts, np.full(3, float(n)), confidence_level=ctx.confidence_level)
    ests = [Estimate(c / n, float(a), float(b), "wilson") for c, a, b in zip(counts, lo, hi)]
    mean = _mean_t(change, ctx.confidence_level)
    largest = float(np.max(np.abs(change))) if n else math.nan
    slices = _slice_breakdown(ctx, idx, flip) if counts[0] > 0 else ()
    sentence = _sentence(ctx.attribute, mode, src, dst, ests, ctx.confidence_level, moved,
                         ctx.is_input)
    return FlipRow(ctx.attribute, mode, src, dst, n, ests[0], ests[1], ests[2], mean, largest,
                   False, tuple(moved), slices, sentence)


def _impossible_row(ctx, mode, src, dst, notes, moved=None):
    nan = Estimate(math.nan, math.nan, math.nan, "wilson")
    notes.append(f"{mode}: `{ctx.attribute}` = {dst!r} is a level the model never saw; "
                 f"flips from {src!r} into it were not scored")
    sentence = (f"Changing {ctx.attribute} from {src} to {dst} is not possible: the model has never "
                f"seen {dst} as a value of {ctx.attribute}, so these rows were not scored.")
    return FlipRow(ctx.attribute, mode, src, dst, len(ctx.group_rows[src]), nan, nan, nan,
                   Estimate(math.nan, math.nan, math.nan, "t"), math.nan, True,
                   tuple(moved or (ctx.attribute,)), (), sentence)


def _mean_t(change, confidence_level) -> Estimate:
    n = len(change)
    if n < 2:
        warnings.warn("a mean score change needs at least two rows for an interval",
                      DegenerateWarning, stacklevel=3)
        return Estimate(float(change.mean()) if n else math.nan, math.nan, math.nan, "t")
    mean = float(change.mean())
    sd = float(change.std(ddof=1))
    half = float(_sps.t.ppf(0.5 + confidence_level / 2, n - 1)) * sd / math.sqrt(n)
    # a difference of two probabilities lies in [-1, 1], and so does its mean
    return Estimate(mean, max(mean - half, -1.0), min(mean + half, 1.0), "t")


def _pct(p) -> str:
    if p is None or math.isnan(p):
        return "n/a"
    v = 100.0 * p
    return f"{v:.2f}" if 0 < v < 0.1 else f"{v:.1f}"


def _sentence(attribute, mode, src, dst, ests, confidence_level, moved, is_input):
    flip, fav, unfav = ests
    cl = f"{100 * confidence_level:g} % interval {_pct(flip.low)}–{_pct(flip.high)} %"
    tail = f"({cl}): {_pct(fav.value)} % become favourable, {_pct(unfav.value)} % unfavourable."
    if mode == "direct":
        return (f"Changing {attribute} from {src} to {dst}, all else equal, changes "
                f"{_pct(flip.value)} % of decisions {tail}")
    if mode == "transport":
        proxies = [m for m in moved if m != attribute]
        what = ", ".join(proxies)
        if is_input:
            lead = (f"Changing {attribute} from {src} to {dst} and moving its proxies ({what}) to "
                    f"where they sit in the {dst} group")
        else:
            lead = (f"Moving the proxies of {attribute} ({what}) of the {src} group to where they "
                    f"sit in the {dst} group ({attribute} itself is not a model input)")
        return f"{lead} changes {_pct(flip.value)} % of decisions {tail}"
    return ""  # twins rows get their sentence from _twin_sentence, which also states the control


# ---------------------------------------------------------------------------------------------
# transport


def quantile_map(source, target, *, integer=False) -> np.ndarray:
    """Map each source value to the target's empirical quantile at its mid-rank plotting position.

    ``q = (r - 1/2) / n`` with ``r`` the mid-rank (ties averaged) among the ``n`` non-missing source
    values; the result is the target's quantile at ``q`` with the same plotting position
    (``numpy.quantile(..., method="hazen")``), or the nearest order statistic when ``integer``.
    Missing source values stay missing.
    """
    source = np.asarray(source, dtype=float)
    target = np.asarray(target, dtype=float)
    target = np.sort(target[~np.isnan(target)])
    out = np.full(len(source), np.nan)
    ok = ~np.isnan(source)
    if not ok.any() or len(target) == 0:
        return out
    q = (_sps.rankdata(source[ok], method="average") - 0.5) / ok.sum()
    if integer:
        pos = np.clip(np.round(q * len(target) - 0.5).astype(np.int64), 0, len(target) - 1)
        out[ok] = target[pos]
    else:
        # numpy's "hazen" quantile (virtual index n q - 1/2, clipped, linear), via one interp call:
        # np.quantile partitions once per q, far too slow for a whole column of q values
        out[ok] = np.interp(q * len(target) - 0.5, np.arange(len(target)), target)
    return out


def transport_categorical(source_codes, target_counts, rng) -> np.ndarray:
    """Reassign levels so their counts match ``target_counts``, changing the fewest rows.

    ``source_codes`` are level codes ``0..L-1`` (``-1`` missing, left as is); ``target_counts`` the
    desired count of each level among the non-missing rows (summing to their number). Each level
    keeps ``min(have, need)`` rows; the surplus rows (picked by a permutation from ``rng``) are dealt
    to the levels in deficit in level order.
    """
    codes = np.asarray(source_codes, dtype=np.int64)
    out = codes.copy()
    need = np.asarray(target_counts, dtype=np.int64)
    ok = np.flatnonzero(codes >= 0)
    have = np.bincount(codes[ok], minlength=len(need))
    perm = ok[rng.permutation(len(ok))]
    perm = perm[np.argsort(codes[perm], kind="stable")]  # by level, permuted within a level
    starts = np.concatenate([[0], np.cumsum(have)])
    surplus = [perm[starts[lv] + need[lv]:starts[lv + 1]]
               for lv in range(len(need)) if have[lv] > need[lv]]
    surplus = np.concatenate(surplus) if surplus else np.empty(0, dtype=np.int64)
    deficit = np.maximum(need - have, 0)
    out[surplus] = np.repeat(np.arange(len(need)), deficit)
    return out


def _largest_remainder(shares, total) -> np.ndarray:
    raw = shares * total
    base = np.floor(raw).astype(np.int64)
    rest = int(total - base.sum())
    if rest > 0:
        order = np.lexsort((np.arange(len(raw)), -(raw - base)))
        base[order[:rest]] += 1
    return base


def _prepare_proxy(col: pd.Series):
    """Once per proxy: float values (numeric) or level codes in a fixed order plus, for each level,
    one row holding it (categorical), so moved values are taken from the column itself and keep its
    dtype exactly."""
    if is_numeric(col):
        return ("numeric", col.to_numpy(dtype=float, na_value=np.nan))
    codes, uniques = pd.factorize(col, sort=False, use_na_sentinel=True)
    levels = list(uniques)
    try:
        order = sorted(range(len(levels)), key=lambda i: levels[i])
    except TypeError:
        order = sorted(range(len(levels)), key=lambda i: str(levels[i]))
    rank = np.empty(len(levels), dtype=np.int64)
    rank[order] = np.arange(len(levels))
    codes = np.where(codes >= 0, rank[np.maximum(codes, 0)], -1)
    first = np.full(len(levels), -1, dtype=np.int64)
    ok = np.flatnonzero(codes >= 0)
    first[codes[ok]] = ok  # some row holding each level (which one does not matter)
    return ("categorical", codes, first)


def _move_proxy(col: pd.Series, prepared, idx, tgt, gen):
    if prepared[0] == "numeric":
        v = prepared[1]
        if not np.isfinite(v[tgt]).any():
            raise DataError(f"proxy `{col.name}` has no known value in the target group, so it "
                            "cannot be moved there; leave it out of `proxies`")
        integer = pd.api.types.is_integer_dtype(col.dtype)
        mapped = quantile_map(v[idx], v[tgt], integer=integer)
        index = col.index[idx]
        if integer and not np.isnan(mapped).any():
            return pd.Series(mapped, index=index).astype(col.dtype)
        return pd.Series(mapped, index=index)
    _, codes, first = prepared
    src, tcodes = codes[idx], codes[tgt]
    tgt_counts = np.bincount(tcodes[tcodes >= 0], minlength=len(first))
    n_ok = int((src >= 0).sum())
    if tgt_counts.sum() == 0 or n_ok == 0:
        return col.iloc[idx]
    need = _largest_remainder(tgt_counts / tgt_counts.sum(), n_ok)
    new_codes = transport_categorical(src, need, gen)
    rows = np.where(new_codes >= 0, first[np.maximum(new_codes, 0)], idx)
    out = col.iloc[rows]
    out.index = col.index[idx]
    return out


MIN_PROXY_AUC = 0.55
"""A feature is moved as a proxy (when probe chooses them) only if it alone predicts the attribute
with a cross-fitted AUC of at least this (0.5 is chance)."""


def _choose_proxies(ctx, X, attribute, proxies, n_proxies, seed, notes):
    candidates = [c for c in ctx.inputs if c != attribute and c in X.columns]
    if proxies is not None:
        if isinstance(proxies, str):
            proxies = [proxies]
        proxies = list(dict.fromkeys(proxies))
        bad = [p for p in proxies if p not in X.columns]
        if bad:
            raise DataError(f"`proxies` names columns not in the data: {', '.join(map(str, bad))}")
        if attribute in proxies:
            raise DataError(f"`proxies` must not include the protected attribute `{attribute}`")
        unused = [p for p in proxies if p not in ctx.inputs]
        if unused:
            notes.append("proxies that are not model inputs change nothing: "
                         + ", ".join(f"`{p}`" for p in unused))
        notes.append("proxies moved (given): " + ", ".join(f"`{p}`" for p in proxies))
        return proxies
    if not isinstance(n_proxies, (int, np.integer)) or isinstance(n_proxies, bool) or n_proxies < 0:
        raise PlanError(f"`n_proxies` must be a non-negative integer, got {n_proxies!r}")
    if not candidates or n_proxies == 0:
        return []
    # the ranking only chooses which columns to move; 20,000 rows rank strong proxies reliably and
    # keep this step small next to the model calls it serves
    found = find_proxies(X, attribute, features=candidates, multivariate=False, rng=seed,
                         max_rows=20_000)
    # only features that do stand in for the attribute are moved: a feature whose cross-fitted AUC
    # is at chance would be shuffled between two near-identical distributions for nothing
    rows = [r for r in found.rows[:n_proxies] if np.isfinite(r.auc) and r.auc >= MIN_PROXY_AUC]
    if not rows:
        notes.append(f"no feature predicts `{attribute}` with a cross-fitted AUC of at least "
                     f"{MIN_PROXY_AUC}: nothing but the attribute is moved")
        return []
    notes.append(f"proxies moved (top {n_proxies} by cross-fitted single-feature AUC, "
                 f"those at or above {MIN_PROXY_AUC}): "
                 + ", ".join(f"`{r.feature}` (AUC {r.auc:.3f})" for r in rows))
    return [r.feature for r in rows]


# ---------------------------------------------------------------------------------------------
# twins


def _twin_design(X, features, idx, tgt):
    both = np.concatenate([idx, tgt])
    blocks_s, blocks_t = [], []
    for c in features:
        col = X[c]
        if is_numeric(col):
            v = col.to_numpy(dtype=float, na_value=np.nan)
            pooled = v[both]
            mu = np.nanmean(pooled) if (~np.isnan(pooled)).any() else 0.0
            sd = np.nanstd(pooled)
            sd = sd if sd > 0 and np.isfinite(sd) else 1.0
            z = np.where(np.isnan(v), 0.0, (v - mu) / sd)
            blocks_s.append(z[idx, None])
            blocks_t.append(z[tgt, None])
        else:
            codes, uniques = pd.factorize(col, use_na_sentinel=True)
            m = len(uniques)
            codes = np.where(codes < 0, m, codes)
            freq = np.bincount(codes[both], minlength=m + 1)
            keep = np.argsort(-freq, kind="stable")[:_TWIN_LEVELS]
            remap = np.full(m + 1, len(keep))
            remap[keep] = np.arange(len(keep))
            width = len(keep) + 1
            eye = np.eye(width) / math.sqrt(2.0)
            blocks_s.append(eye[remap[codes[idx]]])
            blocks_t.append(eye[remap[codes[tgt]]])
    return np.hstack(blocks_s), np.hstack(blocks_t)


def _kneighbors(pool, queries, n_neighbors, n_jobs) -> np.ndarray:
    """Positions in ``pool`` of each query row's ``n_neighbors`` nearest, nearest first; queried in
    chunks so memory stays bounded (never a queries x pool matrix)."""
    from sklearn.neighbors import NearestNeighbors

    # a k-d tree wins in few dimensions; beyond that sklearn's brute search (computed in chunks
    # under its working-memory bound, never an n x n matrix) is several times faster
    algorithm = "kd_tree" if pool.shape[1] <= _KD_TREE_MAX_DIM else "brute"
    nn = NearestNeighbors(n_neighbors=n_neighbors, algorithm=algorithm, n_jobs=n_jobs).fit(pool)
    out = np.empty((len(queries), n_neighbors), dtype=np.int64)
    for start in range(0, len(queries), _TWIN_CHUNK):
        stop = min(start + _TWIN_CHUNK, len(queries))
        out[start:stop] = nn.kneighbors(queries[start:stop], return_distance=False)
    return out


def _query_depth(k, p, n) -> int:
    """How many neighbours in the full pool to ask for so that, with probability at least 0.999,
    ``k`` of them fall in a random subsample holding a share ``p`` of it."""
    depth = k
    while depth < n and _sps.binom.sf(k - 1, depth, p) < 0.999:
        depth += 1
    return depth


def _cross_twins(Zt, Zs, k, sub, n_jobs):
    """The ``k`` nearest other-group twins of each source row: in the whole group (positions in
    ``Zt``) and in the subsample ``sub`` (positions in ``sub``; the same array when ``sub`` is
    None)."""
    if sub is None:
        nb = _kneighbors(Zt, Zs, k, n_jobs)
        return nb, nb
    p = len(sub) / len(Zt)
    if p < 0.5:  # a small subsample: its own search is cheap
        return _kneighbors(Zt, Zs, k, n_jobs), _kneighbors(Zt[sub], Zs, k, n_jobs)
    # most of the group is kept: one deeper search in the whole group serves both; the nearest k
    # of it that lie in the subsample are its nearest k there (rows short of k are searched again)
    full = _kneighbors(Zt, Zs, _query_depth(k, p, len(Zt)), n_jobs)
    pos = np.full(len(Zt), -1, dtype=np.int64)
    pos[sub] = np.arange(len(sub))
    in_sub = pos[full]
    hit = in_sub >= 0
    order = np.argsort(~hit, axis=1, kind="stable")[:, :k]
    matched = np.take_along_axis(in_sub, order, axis=1)
    short = np.flatnonzero(hit.sum(axis=1) < k)
    if len(short):
        matched[short] = _kneighbors(Zt[sub], Zs[short], k, n_jobs)
    return full[:, :k], matched


def _own_twins(Zs, k, m, gen, n_jobs) -> np.ndarray:
    """Each source row's ``k`` nearest other members of its own group (positions in ``Zs``), drawn
    from a pool of ``m`` others: all of the group when it has ``m + 1`` rows, else a random
    ``m + 1`` of them (a row outside that subsample draws from all ``m + 1``, one more; immaterial).

    Asks for ``k + 1`` and drops the row itself; when exact duplicates crowd it out of its own
    ``k + 1`` nearest, the farthest is dropped instead."""
    n = len(Zs)
    pool = np.sort(gen.choice(n, m + 1, replace=False)) if n - 1 > m else np.arange(n)
    pos = np.full(n, -1, dtype=np.int64)
    pos[pool] = np.arange(len(pool))
    nb = _kneighbors(Zs[pool] if len(pool) < n else Zs, Zs, k + 1, n_jobs)
    is_self = nb == pos[:, None]
    drop = np.where(is_self.any(axis=1), is_self.argmax(axis=1), k)
    keep = np.ones(nb.shape, dtype=bool)
    keep[np.arange(n), drop] = False
    return pool[nb[keep].reshape(n, k)]


def _twin_outcomes(own_fav, fav, base, twin_rows):
    """Per person: (twins favourable by majority and the person not, the reverse, twins' mean
    score); a tie among an even number of twins counts as no difference."""
    share = fav[twin_rows].mean(axis=1)
    return ~own_fav & (share > 0.5), own_fav & (share < 0.5), base[twin_rows].mean(axis=1)


def _paired_wald(d, z) -> Estimate:
    """Mean of per-person paired differences with the Wald interval ``mean ± z sd / sqrt(n)``."""
    n = len(d)
    if n < 2:
        warnings.warn("a paired difference needs at least two rows for an interval",
                      DegenerateWarning, stacklevel=3)
        return Estimate(float(d.mean()) if n else math.nan, math.nan, math.nan, "paired-wald")
    mean = float(d.mean())
    half = z * float(d.std(ddof=1)) / math.sqrt(n)
    return Estimate(mean, max(mean - half, -1.0), min(mean + half, 1.0), "paired-wald")


def _points(x) -> str:
    v = 100.0 * x
    text = f"{v:.2f}" if 0 < abs(v) < 0.1 else f"{v:.1f}"
    return "0.0" if text in ("-0.0", "-0.00") else text


def _twin_sentence(row, k, subsampled, confidence_level) -> str:
    flip, fav, unfav = row.flip_rate, row.to_favorable, row.to_unfavorable
    cl = f"{100 * confidence_level:g} % interval"
    head = (f"Of the {row.from_} group, {_pct(flip.value)} % get a different decision from most of "
            f"their {k} nearest twins in the {row.to} group ({cl} {_pct(flip.low)}–"
            f"{_pct(flip.high)} %)")
    tail = (f"For {_pct(fav.value)} % the twins' decision is favourable and theirs is not, for "
            f"{_pct(unfav.value)} % the reverse.")
    if row.excess is None:
        return (f"{head}. {tail} No own-group control could be formed (the {row.from_} group is "
                "too small), so this share also holds the disagreement found near the decision "
                "boundary whatever the group.")
    ex = row.excess
    sep = "–" if ex.low >= 0 else " to "
    sample = (f" ({_pct(row.matched_rate.value)} % with twins drawn from {row.twin_pool:,} rows of "
              f"the {row.to} group, the size of the own-group pool)" if subsampled else "")
    return (f"{head}, against {_pct(row.control_rate.value)} % for twins in their own group"
            f"{sample}: an excess of {_points(ex.value)} points ({cl} {_points(ex.low)}{sep}"
            f"{_points(ex.high)}). {tail}")


# ---------------------------------------------------------------------------------------------
# by-slice breakdown


def _encode_slice_column(s: pd.Series):
    """Codes and predicate dicts: numerics in quartile bins, categoricals' top levels + other."""
    if is_numeric(s):
        v = s.to_numpy(dtype=float, na_value=np.nan)
        ok = ~np.isnan(v)
        w = v[ok]
        # quartile edges from an evenly strided sample of at most 50,000 rows: deterministic, and
        # plenty for bin edges that only label where flips concentrate
        w = w[:: max(1, len(w) // 50_000)]
        edges = np.unique(np.quantile(w, [0.25, 0.5, 0.75])) if len(w) else np.empty(0)
        uniq = np.unique(v[ok]) if len(edges) < 3 else edges  # only sort a column with few values
        codes = np.empty(len(v), dtype=np.int64)
        preds = []
        if len(uniq) <= 4 and len(edges) < 3:
            codes[ok] = np.searchsorted(uniq, v[ok])
            preds = [{"column": s.name, "op": "==", "value": _plain(u)} for u in uniq]
        else:
            codes[ok] = np.searchsorted(edges, v[ok], side="right")
            bounds = [None] + [float(e) for e in edges] + [None]
            preds = [{"column": s.name, "op": "in", "value": [bounds[i], bounds[i + 1]]}
                     for i in range(len(edges) + 1)]
        if not ok.all():
            codes[~ok] = len(preds)
            preds.append({"column": s.name, "op": "missing", "value": None})
        return codes, preds
    codes, uniques = pd.factorize(s, use_na_sentinel=True)
    m = len(uniques)
    freq = np.bincount(codes[codes >= 0], minlength=m)
    keep = np.argsort(-freq, kind="stable")[:_SLICE_LEVELS]
    keep = keep[np.argsort([str(uniques[i]) for i in keep], kind="stable")]
    remap = np.full(m, len(keep), dtype=np.int64)
    remap[keep] = np.arange(len(keep))
    preds = [{"column": s.name, "op": "==", "value": _plain(uniques[i])} for i in keep]
    out = np.where(codes >= 0, remap[np.maximum(codes, 0)], len(keep) + 1)
    preds.append({"column": s.name, "op": "other", "value": None})
    preds.append({"column": s.name, "op": "missing", "value": None})
    return out.astype(np.int64), preds


def _pred_label(p) -> str:
    if p["op"] == "==":
        return f"{p['column']} = {p['value']}"
    if p["op"] == "missing":
        return f"{p['column']} missing"
    if p["op"] == "other":
        return f"{p['column']} = (other)"
    lo, hi = p["value"]
    if lo is None:
        return f"{p['column']} < {hi:g}"
    if hi is None:
        return f"{p['column']} >= {lo:g}"
    return f"{p['column']} in [{lo:g}, {hi:g})"


def _slice_breakdown(ctx, idx, flip):
    """Top single-column levels and two-column conjunctions of the group by flip rate."""
    if not ctx.breakdown:
        return ()
    cols = list(ctx.breakdown)
    f = flip.astype(np.int64)
    cands = []  # (rate, rows, label, predicates, flips)
    sub = {c: ctx.breakdown[c][0][idx] for c in cols}
    for combo in [(c,) for c in cols] + list(combinations(cols, 2)):
        sizes = [len(ctx.breakdown[c][1]) for c in combo]
        key = sub[combo[0]]
        for c, m in zip(combo[1:], sizes[1:]):
            key = key * m + sub[c]
        total = int(np.prod(sizes))
        n = np.bincount(key, minlength=total)
        x = np.bincount(key, weights=f, minlength=total)
        for cell in np.flatnonzero((n >= _MIN_SLICE_ROWS) & (x > 0)):
            parts, rem = [], int(cell)
            for m in reversed(sizes):
                parts.append(rem % m)
                rem //= m
            parts.reverse()
            preds = tuple(ctx.breakdown[c][1][p] for c, p in zip(combo, parts))
            label = " & ".join(_pred_label(p) for p in preds)
            cands.append((x[cell] / n[cell], int(n[cell]), label, preds, float(x[cell])))
    cands.sort(key=lambda t: (-t[0], -t[1], t[2]))
    top = cands[:_TOP_SLICES]
    if not top:
        return ()
    xs = np.array([t[4] for t in top])
    ns = np.array([t[1] for t in top], dtype=float)
    lo, hi = wilson_interval(xs, ns, confidence_level=ctx.confidence_level)
    return tuple(FlipSlice(t[3], t[2], t[1], Estimate(float(t[0]), float(a), float(b), "wilson"))
                 for t, a, b in zip(top, lo, hi))


def _json(x):
    x = float(x)
    return None if math.isnan(x) or math.isinf(x) else x


def _plain(v):
    return v.item() if isinstance(v, np.generic) else v
