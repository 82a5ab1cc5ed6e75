"""What every flip mode needs, validated once: the attribute's levels and groups, the pairs to flip,
the model's inputs and known levels; scoring; turning per-row outcomes into a :class:`FlipRow`."""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from functools import cached_property

import numpy as np
import pandas as pd
from scipy import stats as _sps

from ..data import attribute_levels, require_finite
from ..encode import Encoding, encode_columns
from ..errors import DataError, ModelError, PlanError, ProbeError
from ..metrics import as_favorable, favorable_decision
from ..options import ModelOptions, check_option, coerce_option
from ..stats import Estimate, mean_interval, wilson_interval
from .breakdown import slice_breakdown
from .findings import FlipRow, impossible_sentence, pair_sentence
from ..design_data import resolve_design
from .weighting import FlipDesign, flip_design, weighted_mean, weighted_shares

__all__ = ["FlipContext", "flip_context", "refuse_fixed_scores", "score", "set_column"]

_THRESHOLD = next(f for f in fields(ModelOptions) if f.name == "threshold")


@dataclass
class FlipContext:
    """One attribute of one frame, ready to flip.

    ``group_rows[level]`` holds the positions of that level's rows; ``pairs`` the ``(from, to)``
    pairs in report order; ``notes`` collects what each mode adds.
    """

    model: object
    X: pd.DataFrame
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
    notes: list
    given_scores: np.ndarray | None
    given_encoding: Encoding | None
    design: FlipDesign | None = None

    def unknown(self, level) -> bool:
        """The model never saw ``level`` as a value of the attribute."""
        return self.known is not None and level not in self.known

    @property
    def features(self) -> list:
        """The model inputs present in the data, other than the attribute."""
        return [c for c in self.inputs if c != self.attribute and c in self.X.columns]

    @cached_property
    def base_scores(self) -> np.ndarray:
        """The model's scores of the rows as they are: the caller's, else one call."""
        if self.given_scores is None:
            return score(self.model, self.X, "the original rows")
        return self.given_scores

    @cached_property
    def breakdown(self) -> tuple:
        """The encoded columns the by-slice breakdown reads (all but the attribute)."""
        enc = self.given_encoding
        if enc is None:  # built at most once per flip test, and only when a row has flips
            enc = encode_columns(self.X, exclude=[self.attribute] if self.attribute in
                                 self.X.columns else [])
        return tuple(c for c in enc.columns if c.name != self.attribute)

    def rows_of(self, level) -> int:
        """The rows of a group: its rows, or the sum of their membership probabilities."""
        d, rows = self.design, self.group_rows[level]
        if d.membership is None or level not in d.membership.levels:
            return len(rows)
        j = d.membership.levels.index(level)
        return int(round(float(d.membership.probs[rows, j].sum())))

    def extent(self, level) -> dict:
        """A row's ``weight`` and ``clusters`` under a non-plain design (nothing when plain)."""
        d = self.design
        if not d.weighted:
            return {}
        rows = self.group_rows[level]
        return {"weight": float(d.of(level).sum()),
                "clusters": int(len(np.unique(d.units[rows]))) if d.clustered else None}

    def weighting(self, level):
        """``(weights, units, clustered)`` of a group's rows for the breakdown; None when plain."""
        d = self.design
        return None if not d.weighted else (d.of(level), d.unit_of(self.group_rows[level]),
                                            d.clustered)

    def decisions(self, s) -> np.ndarray:
        """Boolean: the favourable decision at these scores."""
        return favorable_decision(s >= self.threshold, self.favorable)


def flip_context(model, X, attribute, *, reference, threshold, favorable, confidence_level,
                 scores, encoding, sample_weight=None, design=None) -> FlipContext:
    """Check every input of a flip test once and build its :class:`FlipContext`.

    A plain design keeps the rows of weight 1 (a row of weight 0 is in no group); otherwise every
    row of positive weight is in its group with its weight (:mod:`.weighting`)."""
    if not callable(getattr(model, "scores", None)):
        raise ModelError(f"the model ({type(model).__name__}) has no `scores(frame)` method")
    refuse_fixed_scores(model)
    if not isinstance(X, pd.DataFrame):
        raise DataError(f"`X` must be a pandas DataFrame, got {type(X).__name__}")
    design = resolve_design(sample_weight, design, len(X))
    member = design.membership.get(attribute)
    if member is not None and attribute in X.columns:
        raise DataError(f"protected attribute `{attribute}` is both a column of the data and "
                        "known as membership probabilities; name the two differently")
    if attribute not in X.columns and member is None:
        raise DataError(f"protected attribute `{attribute}` is not a column of the data")
    threshold = coerce_option(_THRESHOLD, threshold, "threshold")
    check_option(_THRESHOLD, threshold, "threshold")
    favorable = as_favorable(favorable)
    if not 0.0 < confidence_level < 1.0:
        raise PlanError("`confidence_level` must lie strictly between 0 and 1, "
                        f"got {confidence_level!r}")
    if encoding is not None and (not isinstance(encoding, Encoding) or encoding.n_rows != len(X)):
        raise DataError(f"`encoding` must be an Encoding of the {len(X)} rows of `X`")
    names = getattr(model, "feature_names", None)
    inputs = tuple(names) if names is not None else tuple(X.columns)
    cats = getattr(model, "categories", None) or {}
    known = tuple(cats[attribute]) if cats.get(attribute) is not None else None
    notes = []
    levels, group_rows = _groups(X, attribute, member, design, notes)
    if len(levels) < 2 and reference is None:
        raise DataError(f"protected attribute `{attribute}` needs at least two observed levels, "
                        f"got {list(levels)}")
    if reference is not None:
        if reference not in levels and (known is None or reference not in known):
            raise PlanError(f"`reference` {reference!r} is not an observed level of `{attribute}` "
                            f"(levels: {', '.join(map(str, levels))})")
        pairs = [(lv, reference) for lv in levels if lv != reference]
        group_rows.setdefault(reference, np.empty(0, dtype=np.int64))
    else:
        pairs = [(a, b) for a in levels for b in levels if a != b]
    if not pairs:
        raise DataError(f"nothing to flip: `{attribute}` has only the level {reference!r}")
    if known is not None:
        unseen = [lv for lv in levels if lv not in known]
        if unseen:
            notes.append(f"the data hold levels of `{attribute}` the model never saw: "
                         + ", ".join(map(repr, unseen)))
    require_finite(X, [c for c in inputs if c in X.columns])
    if scores is not None:
        scores = np.asarray(scores, dtype=float)
        if scores.shape != (len(X),) or not np.all(np.isfinite(scores) & (scores >= 0)
                                                    & (scores <= 1)):
            raise DataError(f"`scores` must be {len(X)} probabilities in [0, 1], one per row "
                            "of `X`")
    flips_design = flip_design(design, group_rows, attribute, len(X))
    return FlipContext(model, X, attribute, inputs, attribute in inputs and member is None, known,
                       levels, pairs, group_rows, float(threshold), favorable, confidence_level,
                       notes, scores, encoding, flips_design)


def _groups(X, attribute, member, design, notes):
    """The levels and each level's row positions: a recorded column's rows (missing left out, a
    note says so), or every row of positive probability for a membership attribute; rows of
    weight 0 are in no group."""
    weights = design.weights
    live = np.ones(len(X), dtype=bool) if weights is None else weights > 0
    if member is not None:
        levels = tuple(member.levels)
        return levels, {lv: np.flatnonzero(live & (member.probs[:, j] > 0))
                        for j, lv in enumerate(levels)}
    col = X[attribute]
    missing = col.isna().to_numpy()
    if missing.any():
        notes.append(f"{int(missing.sum())} rows with missing `{attribute}` were left out")
    levels = attribute_levels(col[live] if not live.all() else col, attribute)
    codes = pd.Categorical(col, categories=list(levels)).codes
    codes = np.where(live, codes, -1)
    order = np.argsort(codes, kind="stable")
    bounds = np.searchsorted(codes[order], np.arange(len(levels) + 1))
    return levels, {lv: order[bounds[i]:bounds[i + 1]] for i, lv in enumerate(levels)}


def refuse_fixed_scores(model) -> None:
    """A ``column:`` model reads fixed scores from the data: no flip mode can re-score a changed
    row, so a flip test of it would report no flips whatever the real model does."""
    if getattr(model, "kind", None) == "column":
        raise PlanError(f"flips need a model that scores changed rows; `{model.spec}` reads fixed "
                        "scores from the data, so no flip mode applies (name the model file or "
                        "py:/cmd:/http: model, or leave flips out)")


def score(model, frame, what) -> np.ndarray:
    """The model's scores of ``frame``, checked; any failure is one :class:`ModelError` line."""
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


def set_column(frame, column, value):
    """Set every row of ``column`` to ``value`` in place, keeping the column's dtype."""
    s = frame[column]
    if isinstance(s.dtype, pd.CategoricalDtype):
        if value not in s.cat.categories:
            s = s.cat.add_categories([value])
        frame[column] = pd.Categorical([value] * len(frame), categories=s.cat.categories,
                                       ordered=s.cat.ordered)
    elif len(frame):
        frame[column] = pd.Series([value] * len(frame), index=frame.index).astype(s.dtype)
    return frame


# ---------------------------------------------------------------------------------------------
# assembling rows


def pair_row(ctx: FlipContext, mode, src, dst, idx, old, new, moved) -> FlipRow:
    """A direct or transport row from the source group's scores before and after."""
    fav_old, fav_new = ctx.decisions(old), ctx.decisions(new)
    return outcome_row(ctx, mode, src, dst, idx, ~fav_old & fav_new, fav_old & ~fav_new,
                       new - old, moved)


def outcome_row(ctx: FlipContext, mode, src, dst, idx, to_fav, to_unfav, change, moved) -> FlipRow:
    """A row from per-person outcomes: Wilson shares, a t interval for the mean change, the
    breakdown by slice."""
    n = len(idx)
    flip = to_fav | to_unfav
    cl, d = ctx.confidence_level, ctx.design
    w = d.of(src)
    if w is None:
        counts = np.array([flip.sum(), to_fav.sum(), to_unfav.sum()], dtype=float)
        lo, hi = wilson_interval(counts, np.full(3, float(n)), confidence_level=cl)
        ests = [Estimate(c / n, float(a), float(b), "wilson") for c, a, b in zip(counts, lo, hi)]
        mean = _mean_t(change, cl)
    else:
        units = d.unit_of(idx)
        ests = weighted_shares((flip, to_fav, to_unfav), w, units, d.clustered, cl)
        mean = weighted_mean(change, w, units, d.clustered, cl)
    largest = float(np.max(np.abs(change))) if n else math.nan
    slices = (slice_breakdown(ctx.breakdown, idx, flip, cl, weighting=ctx.weighting(src))
              if flip.any() else ())
    sentence = pair_sentence(ctx.attribute, mode, src, dst, ests, cl, moved, ctx.is_input)
    return FlipRow(ctx.attribute, mode, src, dst, ctx.rows_of(src), ests[0], ests[1], ests[2],
                   mean, largest, False, tuple(moved), slices, sentence, **ctx.extent(src))


def impossible_row(ctx: FlipContext, mode, src, dst, moved=None) -> FlipRow:
    """A row for a target level the model never saw: noted, not scored, estimates NaN."""
    nan = Estimate(math.nan, math.nan, math.nan, "wilson")
    ctx.notes.append(f"{mode}: `{ctx.attribute}` = {dst!r} is a level the model never saw; "
                     f"flips from {src!r} into it were not scored")
    return FlipRow(ctx.attribute, mode, src, dst, ctx.rows_of(src), nan, nan, nan,
                   Estimate(math.nan, math.nan, math.nan, "t"), math.nan, True,
                   tuple(moved or (ctx.attribute,)), (),
                   impossible_sentence(ctx.attribute, src, dst), **ctx.extent(src))


def _mean_t(change, confidence_level) -> Estimate:
    # a difference of two probabilities lies in [-1, 1], and so does its mean
    df = max(len(change) - 1, 1)
    return mean_interval(change, float(_sps.t.ppf(0.5 + confidence_level / 2, df)), "t",
                         what="a mean score change")
