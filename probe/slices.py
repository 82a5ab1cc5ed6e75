"""The slice search: where the model fails, with honest intervals.

A *slice* is a conjunction of one to ``depth`` predicates on encoded columns (``district = Harrowmere
and utilisation >= 0.75``). For a per-row outcome over a base population (an error, a false positive
among the label-negatives, a miss among the label-positives, a favourable decision) the search looks
for the slices whose rate is worst compared with the rest of the base population.

How it works
------------
1. **Encoding.** Every candidate column becomes small integer codes (:mod:`probe.encode`).
2. **Split.** By default the base rows are split, seeded and stratified by the label, into a *search*
   part and an *estimate* part (``estimate_share`` of the rows). Not by the outcome: fixing the
   outcome's total in each part makes a slice's counts in the two parts negatively dependent, so the
   estimate part's intervals would over-cover (96.5 % for a nominal 95 % in our simulation).
3. **Search** (on the search part). For one column set all its slices are counted in one pass: the
   columns' codes are combined into one integer key and a ``np.bincount`` gives every slice's rows and
   events (counts are additive, so parts of the data could be counted apart and summed). Several
   column sets share one pass: the codes of a few columns together (up to 8,192 joint cells) are
   counted at once and each set inside them is a sum over the other columns of that small table, so
   the depth-3 benchmark in tests/perf (15 columns) makes 87 passes over the rows, not 575. Column sets
   are visited level by level (depth 1, 2, 3, ...), a set only when every one of its sub-sets was
   visited and some slice of it survived. The **score** of a slice is the lower confidence bound of its
   gap to the rest (Newcombe's interval for 0/1 outcomes, a Wald interval for real-valued ones), in the
   metric's bad direction. A slice **survives** (is expanded) only if an optimistic bound on the score of
   any refinement still reaches the current ``pool``-th best score: a refinement of a slice with ``n``
   rows and ``x`` events has ``n' >= min_rows`` rows and ``x' <= min(x, n')`` events, and since
   Newcombe's lower limit is at most ``wilson_low(x', n') - (X - x') / (N - n')``, which is largest at
   ``n' = clip(x, min_rows, n)``, ``x' = min(x, n')``, that value bounds every refinement (see
   :func:`_binary_bound`). Pruning is therefore exact: the result equals exhaustive enumeration.
4. **Redundancy.** A depth-1 slice must be worse than the rest (positive gap); a refinement counts only
   if its score beats the score of *every* slice it refines (one predicate fewer) *and* it is
   confidently worse than the rest of each of those slices (the lower limit of its rate minus the rate
   of the parent's other rows, Newcombe or Wald, is above zero): adding a predicate must make the
   effect materially larger, not carve a lucky corner out of a region that is bad as a whole. Among the best ``2 * top`` slices,
   near-identical row sets (Jaccard similarity >= ``similarity`` on the estimate-part rows) are kept
   once, the higher-ranked one, and the first ``top`` remaining are *carried* to the estimate stage.
5. **Estimate** (on the estimate part only). Rate (Wilson), gap to the rest (Newcombe), the ratio to
   the rest (MOVER-R), the one-sided p-value (pooled two-proportion z test) and the Benjamini–Hochberg
   q-value over the carried slices. That multiplicity is valid because which slices were carried
   depends only on the search part (and on estimate-part row *membership*, not outcomes), so on the
   estimate part they are a fixed family of ``tested`` hypotheses.
   With ``split=False`` (small data) everything is computed on all rows and the multiplicity is every
   slice scored during the search: all slices meeting ``min_rows`` in every column set visited, counted
   exactly; BH uses that ``m`` with the p-values of the slices not carried set to 1 (conservative).
   Nothing is pruned then, so the count, and every q-value, does not depend on ``top``.
6. **Bootstrap** (``interval="bootstrap"``): the estimate-part rows are resampled (multinomial) for all
   carried slices at once; because a slice's rate and gap depend on its rows only through the counts of
   (inside/outside the slice) x (outcome value) cells, the resample is drawn on those cells, which is the
   same distribution as resampling rows, without a loop per resample. BCa (with the cell-wise
   jackknife) where defined, else the percentile interval; the method is recorded in each estimate.

This is a statistical screen, not a legal finding: a slice with a large gap points where to look. The
four-fifths rule is a rule of thumb; defer to counsel, local law and licensed practice.

References
----------
Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery rate. JRSS-B 57, 289-300.
Newcombe, R. G. (1998). Interval estimation for the difference between independent proportions.
Statistics in Medicine 17, 873-890.
Efron, B. & Tibshirani, R. (1993). An Introduction to the Bootstrap, ch. 14 (BCa).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from itertools import combinations

import numpy as np
import pandas as pd
from scipy import special

from .encode import Encoding, encode_columns
from .errors import DataError, PlanError
from .stats import (
    Estimate,
    bh_adjust,
    newcombe_interval,
    ratio_interval,
    two_proportion_pvalue,
    wilson_interval,
    z_value,
)

__all__ = ["METRICS", "Slice", "SliceFindings", "metric_outcome", "find_slices", "search_slices"]

METRICS = ("error", "fpr", "fnr", "selection")

_DEFAULT_DIRECTION = {"error": "higher", "fpr": "higher", "fnr": "higher", "selection": "lower"}
_EPS = 1e-12
_MAX_BOOT_VALUES = 1000


# --------------------------------------------------------------------------------------------------
# results


@dataclass(frozen=True)
class Slice:
    """One slice found, with its estimates on the estimate part.

    Attributes
    ----------
    rank : int
        1 for the first.
    predicates : tuple of dict
        ``{"column", "op", "value"}`` each; the slice is their conjunction.
    label : str
        The predicates' labels joined by ``and``.
    rows : int
        Base rows of the estimate part in the slice (the rows ``rate`` is computed on).
    share : float
        ``rows`` over the estimate part's base rows.
    events : float
        Sum of the outcome over those rows (the errors, false positives, ...).
    rate : Estimate
        The slice's rate (mean outcome).
    gap : Estimate
        The slice's rate minus the rate of the rest of the base population.
    effect_ratio : Estimate
        The slice's rate over the rest's (MOVER-R; NaN for real-valued outcomes).
    p_value : float
        One-sided, in the metric's bad direction.
    q_value : float
        Benjamini–Hochberg over ``SliceFindings.tested`` hypotheses.
    score : float
        The ranking score on the search part: the lower confidence bound of the gap (bad direction).
    search_rows : int
        Base rows of the search part in the slice.
    sentence : str
        The finding in one plain sentence.
    """

    rank: int
    predicates: tuple
    label: str
    rows: int
    share: float
    events: float
    rate: Estimate
    gap: Estimate
    effect_ratio: Estimate
    p_value: float
    q_value: float
    score: float
    search_rows: int
    sentence: str

    def to_dict(self) -> dict:
        """The report's found-slice object."""
        return {
            "rank": self.rank,
            "predicates": [dict(p) for p in self.predicates],
            "label": self.label,
            "rows": self.rows,
            "share": _jf(self.share),
            "events": _jf(self.events),
            "rate": self.rate.to_dict(),
            "gap": self.gap.to_dict(),
            "effect_ratio": self.effect_ratio.to_dict(),
            "p_value": _jf(self.p_value),
            "q_value": _jf(self.q_value),
            "score": _jf(self.score),
            "search_rows": self.search_rows,
            "sentence": self.sentence,
        }


@dataclass(frozen=True)
class SliceFindings:
    """The result of a slice search.

    Attributes
    ----------
    metric : str
        ``"error"``, ``"fpr"``, ``"fnr"``, ``"selection"`` or a caller's name (``"custom"``).
    direction : str
        ``"higher"`` (high rates are the finding) or ``"lower"``.
    overall : Estimate
        The rate over all base rows (both parts).
    tested : int
        The number of hypotheses the q-values are taken over: the slices carried to the estimate
        stage (split), or every slice scored during the search (no split).
    search_rows, estimate_rows, base_rows : int
        Base rows in the search part, in the estimate part, and in all.
    found : tuple of Slice
        Best first.
    notes : tuple of str
        Columns left out and other remarks.
    settings : dict
        The options used (for the report's provenance).
    """

    metric: str
    direction: str
    overall: Estimate
    tested: int
    search_rows: int
    estimate_rows: int
    base_rows: int
    found: tuple
    notes: tuple
    settings: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        """The report's ``slices`` section."""
        return {
            "metric": self.metric,
            "direction": self.direction,
            "overall": self.overall.to_dict(),
            "tested": self.tested,
            "search_rows": self.search_rows,
            "estimate_rows": self.estimate_rows,
            "base_rows": self.base_rows,
            "found": [s.to_dict() for s in self.found],
            "notes": list(self.notes),
            "settings": dict(self.settings),
        }

    def to_frame(self) -> pd.DataFrame:
        """One row per slice found."""
        cols = ["rank", "label", "rows", "share", "rate", "rate_low", "rate_high", "gap", "gap_low",
                "gap_high", "effect_ratio", "p_value", "q_value", "score", "search_rows"]
        rows = [
            {"rank": s.rank, "label": s.label, "rows": s.rows, "share": s.share,
             "rate": s.rate.value, "rate_low": s.rate.low, "rate_high": s.rate.high,
             "gap": s.gap.value, "gap_low": s.gap.low, "gap_high": s.gap.high,
             "effect_ratio": s.effect_ratio.value, "p_value": s.p_value, "q_value": s.q_value,
             "score": s.score, "search_rows": s.search_rows}
            for s in self.found
        ]
        return pd.DataFrame(rows, columns=cols)

    def sentences(self) -> list:
        """One plain-language sentence per slice found."""
        return [s.sentence for s in self.found]


def _jf(x):
    x = float(x)
    return None if math.isnan(x) or math.isinf(x) else x


# --------------------------------------------------------------------------------------------------
# outcomes


def metric_outcome(y_true, y_pred, metric, *, favorable=True):
    """The per-row 0/1 outcome of a metric and the mask of its base population.

    Parameters
    ----------
    y_true : array_like of bool or 0/1, or None
        The labels (1 = positive class); not needed for ``"selection"``.
    y_pred : array_like of bool or 0/1
        The model's decisions.
    metric : {"error", "fpr", "fnr", "selection"}
        ``error``: ``y_pred != y_true`` over all rows; ``fpr``: ``y_pred`` over the label-negatives;
        ``fnr``: ``not y_pred`` over the label-positives; ``selection``: ``y_pred == favorable`` over
        all rows.
    favorable : bool or {"positive", "negative"}, default=True
        Which decision is the favourable one (only for ``selection``).

    Returns
    -------
    outcome : ndarray of uint8
    base : ndarray of bool

    Raises
    ------
    DataError
        The arrays are not binary or their lengths differ.
    PlanError
        An unknown metric.
    """
    if metric not in METRICS:
        raise PlanError(f"`metric` must be one of {', '.join(METRICS)}, got {metric!r}")
    pred = _as_binary(y_pred, "y_pred")
    if metric == "selection":
        fav = _as_favorable(favorable)
        return (pred == fav).astype(np.uint8), np.ones(len(pred), dtype=bool)
    true = _as_binary(y_true, "y_true")
    if len(true) != len(pred):
        raise DataError(f"`y_true` has {len(true)} rows but `y_pred` has {len(pred)}")
    if metric == "error":
        return (pred != true).astype(np.uint8), np.ones(len(pred), dtype=bool)
    if metric == "fpr":
        return pred.astype(np.uint8), ~true
    return (~pred).astype(np.uint8), true.copy()


def _as_favorable(favorable):
    if isinstance(favorable, str):
        if favorable not in ("positive", "negative"):
            raise PlanError(f"`favorable` must be 'positive' or 'negative', got {favorable!r}")
        return favorable == "positive"
    if favorable in (True, False, 0, 1):
        return bool(favorable)
    raise PlanError(f"`favorable` must be True/False or 'positive'/'negative', got {favorable!r}")


def _as_binary(y, name):
    if y is None:
        raise DataError(f"`{name}` is required for this metric")
    arr = np.asarray(y)
    if arr.ndim != 1:
        raise DataError(f"`{name}` must be one-dimensional, got shape {arr.shape}")
    if arr.dtype == bool:
        return arr.copy()
    if arr.dtype.kind in "iuf":
        bad = ~np.isin(arr, (0, 1))
        if bad.any():
            rows = np.flatnonzero(bad)
            raise DataError(
                f"`{name}` must be 0/1 or boolean; {len(rows)} rows are not "
                f"(first at row {rows[0]}: {arr[rows[0]]!r}); map the positive class to 1 first"
            )
        return arr == 1
    raise DataError(
        f"`{name}` must be 0/1 or boolean, got dtype {arr.dtype}; map the positive class to 1 first"
    )


# --------------------------------------------------------------------------------------------------
# public entry points


def find_slices(
    X: pd.DataFrame,
    y_true,
    y_pred,
    *,
    metric: str = "error",
    favorable=True,
    direction: str | None = None,
    depth: int = 3,
    min_rows: int | None = None,
    columns=None,
    exclude=(),
    bins: int = 5,
    top: int = 10,
    split: bool = True,
    estimate_share: float = 0.5,
    confidence_level: float = 0.95,
    interval: str = "wilson",
    n_resamples: int = 2000,
    similarity: float | None = 0.9,
    rng=0,
) -> SliceFindings:
    """Find the slices of ``X`` where a classifier's error, FPR, FNR or selection rate is worst.

    Parameters
    ----------
    X : pandas.DataFrame
        The candidate slice columns (protected attributes may be among them; they need not be model
        inputs). Not modified.
    y_true : array_like of bool or 0/1, or str
        The labels (1 = positive), or the name of the label column in ``X`` (it is then not sliced).
    y_pred : array_like of bool or 0/1, or str
        The model's decisions, or the name of their column in ``X`` (not sliced either).
    metric : {"error", "fpr", "fnr", "selection"}, default="error"
        See :func:`metric_outcome`.
    favorable : bool or {"positive", "negative"}, default=True
        The favourable decision, for ``selection``.
    direction : {"higher", "lower"}, optional
        Which rates are the finding; default ``"higher"`` for error/fpr/fnr and ``"lower"`` for
        selection (a slice denied the favourable decision).
    depth : int, default=3
        Most predicates per slice.
    min_rows : int, optional
        Least base rows a slice needs in the part searched; default ``max(30, ceil(0.5 % of them))``.
    columns, exclude : sequence of str, optional
        Which columns to slice on (default all) and which never to.
    bins : int, default=5
        Quantile bins per numeric column.
    top : int, default=10
        Most slices reported.
    split : bool, default=True
        Search on one part of the rows and estimate on the other. ``False`` for small data.
    estimate_share : float, default=0.5
        Share of the base rows in the estimate part.
    confidence_level : float, default=0.95
    interval : {"wilson", "bootstrap"}, default="wilson"
        Closed-form intervals (Wilson / Newcombe) or a seeded vectorised bootstrap (BCa where defined).
    n_resamples : int, default=2000
        Bootstrap resamples.
    similarity : float or None, default=0.9
        Slices whose estimate-part rows overlap with Jaccard similarity at least this are reported
        once; ``None`` keeps them all.
    rng : None, int or numpy.random.Generator, default=0
        Seeds the split and the bootstrap.

    Returns
    -------
    SliceFindings

    Raises
    ------
    DataError
        Bad data (not binary, wrong lengths, unknown columns).
    PlanError
        Bad options.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> r = np.random.default_rng(0)
    >>> X = pd.DataFrame({"a": r.choice(list("xyz"), 4000), "b": r.choice(list("uv"), 4000)})
    >>> y = r.random(4000) < 0.5
    >>> wrong = r.random(4000) < np.where((X.a == "x") & (X.b == "u"), 0.4, 0.1)
    >>> res = find_slices(X, y, y ^ wrong, depth=2)
    >>> res.found[0].label
    'a = x and b = u'
    """
    auto_exclude = []
    if isinstance(y_true, str):
        auto_exclude.append(y_true)
        y_true = _column(X, y_true, "y_true")
    if isinstance(y_pred, str):
        auto_exclude.append(y_pred)
        y_pred = _column(X, y_pred, "y_pred")
    for y in (y_true, y_pred):
        name = getattr(y, "name", None)
        if isinstance(y, pd.Series) and name is not None and name in X.columns:
            auto_exclude.append(name)
    outcome, base = metric_outcome(
        y_true, y_pred, metric,
        favorable=favorable,
    )
    if len(outcome) != len(X):
        raise DataError(f"`X` has {len(X)} rows but the labels/decisions have {len(outcome)}")
    # stratified by the label only: fixing the outcome's total in each part would make the two parts'
    # counts in a slice negatively dependent (a finite-population effect), and the estimate part's
    # intervals too wide (measured: 96.5 % coverage for a nominal 95 %)
    strata = None if y_true is None else _as_binary(y_true, "y_true").astype(np.int64)
    excl = [exclude] if isinstance(exclude, str) else list(exclude)
    excl += [c for c in auto_exclude if c not in excl]
    return search_slices(
        X, outcome, base=base, metric=metric,
        direction=direction or _DEFAULT_DIRECTION[metric], depth=depth, min_rows=min_rows,
        columns=columns, exclude=excl, bins=bins, top=top, split=split,
        estimate_share=estimate_share, confidence_level=confidence_level, interval=interval,
        n_resamples=n_resamples, similarity=similarity, strata=strata, rng=rng,
    )


def _column(X, name, what):
    if name not in X.columns:
        raise DataError(f"`{what}` names column `{name}`, which is not in the data")
    return X[name].to_numpy()


def search_slices(
    X: pd.DataFrame,
    outcome,
    *,
    base=None,
    metric: str = "custom",
    direction: str = "higher",
    depth: int = 3,
    min_rows: int | None = None,
    columns=None,
    exclude=(),
    bins: int = 5,
    top: int = 10,
    split: bool = True,
    estimate_share: float = 0.5,
    confidence_level: float = 0.95,
    interval: str = "wilson",
    n_resamples: int = 2000,
    similarity: float | None = 0.9,
    strata=None,
    rng=0,
) -> SliceFindings:
    """The slice search on any per-row outcome over a base mask.

    ``outcome`` may be 0/1 (a rate; Wilson / Newcombe intervals, pooled z test) or real-valued, e.g.
    the paired difference ``candidate_error - baseline_error`` in {-1, 0, 1}: the rate is then the
    slice mean and the closed-form intervals are normal-theory (Wald) from the additive sums of the
    outcome and of its square, with a one-sided z test; method ``"wald"``.

    Parameters
    ----------
    X : pandas.DataFrame
    outcome : array_like of float
        One value per row of ``X``; NaN is allowed only outside ``base``.
    base : array_like of bool, optional
        The rows the metric is defined on (default all).
    metric : str, default="custom"
        Its name, for the report and the sentences.
    strata : array_like of int, optional
        Groups to stratify the split by (``find_slices`` passes the label). Default: a simple random
        split. Stratifying by the outcome itself is a bad idea: fixing its total in each part makes
        the parts' counts in a slice negatively dependent and the intervals too wide.
    Other parameters
        As in :func:`find_slices`.

    Returns
    -------
    SliceFindings
    """
    opts = _search_iv(
        X, outcome, base, direction, depth, min_rows, top, split, estimate_share, confidence_level,
        interval, n_resamples, similarity, strata, rng,
    )
    enc = encode_columns(X, columns=columns, exclude=exclude, bins=bins)
    if not enc.columns:
        raise DataError("no column is left to slice on" + (f" ({'; '.join(enc.notes)})" if enc.notes else ""))
    return _run(enc, metric, opts, bins)


# --------------------------------------------------------------------------------------------------
# validation


@dataclass(frozen=True)
class _Opts:
    y: np.ndarray  # outcome over the base rows (float64)
    base_idx: np.ndarray | None  # None: every row is a base row
    binary: bool
    direction: str
    depth: int
    min_rows: int | None
    top: int
    split: bool
    estimate_share: float
    confidence_level: float
    interval: str
    n_resamples: int
    similarity: float | None
    strata: np.ndarray | None
    rng: np.random.Generator


def _search_iv(X, outcome, base, direction, depth, min_rows, top, split, estimate_share,
               confidence_level, interval, n_resamples, similarity, strata, rng):
    """Validate and normalise every input of the search, so the body never re-checks."""
    if not isinstance(X, pd.DataFrame):
        raise DataError(f"`X` must be a pandas DataFrame, got {type(X).__name__}")
    n = len(X)
    y = np.asarray(outcome, dtype=float) if np.asarray(outcome).dtype != object else None
    if y is None or y.ndim != 1:
        raise DataError("`outcome` must be a one-dimensional numeric array")
    if len(y) != n:
        raise DataError(f"`X` has {n} rows but `outcome` has {len(y)}")
    if base is None:
        base_mask = np.ones(n, dtype=bool)
    else:
        base_mask = np.asarray(base)
        if base_mask.dtype != bool or base_mask.shape != (n,):
            raise DataError(f"`base` must be a boolean mask of {n} rows")
    if base_mask.all():  # no index array and no copy of the outcome (it is only read)
        base_idx, yb = None, y
    else:
        base_idx = np.flatnonzero(base_mask)
        yb = y[base_idx]
    bad = ~np.isfinite(yb)
    if bad.any():
        first = np.flatnonzero(bad)[0] if base_idx is None else base_idx[np.flatnonzero(bad)[0]]
        raise DataError(f"`outcome` has {int(bad.sum())} missing or infinite values in the base rows (first at row {first})")
    if len(yb) == 0:
        raise DataError("the base population is empty (no rows to search)")
    if direction not in ("higher", "lower"):
        raise PlanError(f"`direction` must be 'higher' or 'lower', got {direction!r}")
    if not (isinstance(depth, (int, np.integer)) and 1 <= depth <= 6):
        raise PlanError(f"`depth` must be an integer from 1 to 6, got {depth!r}")
    if min_rows is not None and not (isinstance(min_rows, (int, np.integer)) and min_rows >= 2):
        raise PlanError(f"`min_rows` must be an integer of at least 2, got {min_rows!r}")
    if not (isinstance(top, (int, np.integer)) and top >= 1):
        raise PlanError(f"`top` must be a positive integer, got {top!r}")
    if not 0.0 < estimate_share < 1.0:
        raise PlanError(f"`estimate_share` must lie strictly between 0 and 1, got {estimate_share!r}")
    if not 0.0 < confidence_level < 1.0:
        raise PlanError(f"`confidence_level` must lie strictly between 0 and 1, got {confidence_level!r}")
    if interval not in ("wilson", "bootstrap"):
        raise PlanError(f"`interval` must be 'wilson' or 'bootstrap', got {interval!r}")
    if not (isinstance(n_resamples, (int, np.integer)) and n_resamples >= 100):
        raise PlanError(f"`n_resamples` must be an integer of at least 100, got {n_resamples!r}")
    if similarity is not None and not 0.0 < similarity <= 1.0:
        raise PlanError(f"`similarity` must lie in (0, 1] or be None, got {similarity!r}")
    binary = bool(np.all((yb == 0) | (yb == 1)))
    if interval == "bootstrap" and not binary and len(np.unique(yb)) > _MAX_BOOT_VALUES:
        raise PlanError(
            f"`interval='bootstrap'` needs an outcome with at most {_MAX_BOOT_VALUES} distinct values; "
            "use the Wald intervals (interval='wilson') for a continuous outcome"
        )
    st = None
    if strata is not None:
        st = np.asarray(strata)
        if st.shape != (n,):
            raise DataError(f"`strata` must have one value per row ({n}), got shape {st.shape}")
        st = _group_codes(st if base_idx is None else st[base_idx])
    return _Opts(
        yb, base_idx, binary, direction, int(depth), None if min_rows is None else int(min_rows),
        int(top), bool(split), float(estimate_share), float(confidence_level), interval,
        int(n_resamples), similarity, st, np.random.default_rng(rng),
    )


def _group_codes(values):
    """``np.unique(values, return_inverse=True)[1]``; by counting when they are small integers."""
    if values.dtype.kind in "biu" and len(values):
        low, high = int(values.min()), int(values.max())
        if high - low < 1 << 16:
            shifted = values.astype(np.intp) - low if low else values.astype(np.intp)
            rank = np.cumsum(np.bincount(shifted, minlength=high - low + 1) > 0) - 1
            return rank[shifted]
    return np.unique(values, return_inverse=True)[1]


_TAKE_ROWS = 1 << 16  # row indices gathered at a time (they and their rows stay in cache)


def _take(arrays, rows):
    """``[a[rows] for a in arrays]`` for sorted ``rows``, a chunk at a time across all arrays."""
    out = [np.empty(len(rows), dtype=a.dtype) for a in arrays]
    for start in range(0, len(rows), _TAKE_ROWS):
        chunk = rows[start: start + _TAKE_ROWS]
        for a, o in zip(arrays, out):
            a.take(chunk, out=o[start: start + len(chunk)])
    return out


class _Rows:
    """Column codes restricted to some rows, taken on first use (only the columns asked for)."""

    def __init__(self, codes, rows):
        self.codes, self.rows, self.cache = codes, rows, {}

    def __getitem__(self, c):
        if c not in self.cache:
            self.cache[c] = _take([self.codes[c]], self.rows)[0]
        return self.cache[c]


# --------------------------------------------------------------------------------------------------
# the body


def _run(enc: Encoding, metric: str, o: _Opts, bins: int) -> SliceFindings:
    codes = [c.codes for c in enc.columns]
    if o.base_idx is not None:
        codes = _take(codes, o.base_idx)
    n_levels = [c.n_levels for c in enc.columns]
    n_base = len(o.y)
    if o.split:
        est_mask = _split_mask(o)
        est_rows, search_rows = np.flatnonzero(est_mask), np.flatnonzero(~est_mask)
        *s_codes, s_y = _take(codes + [o.y], search_rows)
        del search_rows
    else:
        est_mask = np.ones(n_base, dtype=bool)
        s_codes, s_y = codes, o.y
    n_search = len(s_y)
    min_rows = o.min_rows if o.min_rows is not None else max(30, math.ceil(0.005 * n_search))
    # internally "higher is worse"; the reported figures are on the original outcome
    if o.binary:
        s_y = s_y.astype(np.uint8) if o.direction == "higher" else (1.0 - s_y).astype(np.uint8)
    elif o.direction == "lower":
        s_y = -s_y
    pool = 2 * o.top if o.similarity is not None else o.top
    if n_search < min_rows:
        raise PlanError(
            f"the search part has {n_search} rows, fewer than `min_rows` = {min_rows}; lower "
            f"`min_rows`" + (" or `estimate_share`, or search without a split" if o.split else "")
        )
    if o.split and len(est_rows) < 2:
        raise PlanError(f"the estimate part has {len(est_rows)} rows; raise `estimate_share`")
    # without a split the q-values are taken over every slice scored, so nothing may be pruned:
    # otherwise the count (and every q-value) would depend on `top`
    ranked, n_scored, n_candidates = _lattice_search(
        s_codes, n_levels, s_y, o.binary, o.depth, min_rows, pool, o.confidence_level,
        prune=o.split,
    )
    del s_codes, s_y
    e_codes = _Rows(codes, est_rows) if o.split else codes
    e_y = _take([o.y], est_rows)[0] if o.split else o.y
    carried, masks = _dedupe(ranked, e_codes, o.similarity, o.top)
    tested = len(carried) if o.split else n_scored
    rows = _estimate(carried, masks, e_y, o, tested)
    found = tuple(
        _make_slice(rank, cand, est, enc, metric, o)
        for rank, (cand, est) in enumerate(zip(carried, rows), start=1)
    )
    overall = _rate_estimates(np.array([o.y.sum()]), np.array([float(n_base)]),
                              np.array([(o.y * o.y).sum()]), o.binary, o.confidence_level,
                              (float(o.y.min()), float(o.y.max())) if len(o.y) else None)
    notes = list(enc.notes)
    if not found:
        notes.append(f"no slice with at least {min_rows} rows is worse than the rest")
    settings = {
        "depth": o.depth, "min_rows": min_rows, "top": o.top, "bins": bins, "split": o.split,
        "estimate_share": o.estimate_share if o.split else 0.0,
        "confidence_level": o.confidence_level, "interval": o.interval,
        "n_resamples": o.n_resamples if o.interval == "bootstrap" else None,
        "similarity": o.similarity, "columns": list(enc.names), "outcome": "binary" if o.binary else "real",
        "slices_scored": n_scored, "slices_not_pruned": n_candidates,
        "multiplicity": "slices carried to the estimate part" if o.split
        else "every slice scored during the search",
    }
    return SliceFindings(
        metric=metric, direction=o.direction, overall=overall[0], tested=int(tested),
        search_rows=n_search, estimate_rows=int(est_mask.sum()), base_rows=n_base, found=found,
        notes=tuple(notes), settings=settings,
    )


def _split_mask(o: _Opts) -> np.ndarray:
    """Seeded stratified split of the base rows: True = estimate part."""
    n = len(o.y)
    est = np.zeros(n, dtype=bool)
    if o.strata is None:  # a simple random split: the draw of one stratum holding every row
        est[o.rng.permutation(n)[: int(round(o.estimate_share * n))]] = True
        return est
    strata = o.strata
    for stratum in range(int(strata.max()) + 1 if len(strata) else 0):
        rows = np.flatnonzero(strata == stratum)
        take = int(round(o.estimate_share * len(rows)))
        est[rows[o.rng.permutation(len(rows))[:take]]] = True
    return est


# --------------------------------------------------------------------------------------------------
# the lattice search


# joint cells counted in one pass (measured best: the histogram stays in cache and its sums over
# axes stay cheap)
_BLOCK_CELLS = 1 << 13
_CHUNK_ROWS = 1 << 16  # rows keyed at a time
_WINDOW_CELLS = 1 << 20  # slice counts held at once: column sets are counted this far ahead


class _Counter:
    """Per column set, every slice's rows and outcome sums, counted in shared passes.

    One pass over the rows counts a *block* of several columns at once (their codes combined into
    one ``uint16`` key, the 0/1 outcome as its last digit, then one ``np.bincount``); the counts of
    any column set inside the block are then sums over the block's other axes of that small
    histogram, with no further pass over the rows. A pass costs about the same for a block as for
    one column set, so grouping the column sets of a depth into few blocks divides the row passes.
    The marginal sums are exact for counts and for integer-valued outcomes; for any other outcome
    every column set is counted on its own, in row order, so two slices holding the same rows get
    bitwise the same sums (a refinement that keeps every row of its parent never beats it).
    """

    def __init__(self, codes, n_levels, y, binary):
        self.codes = codes
        self.n_levels = n_levels
        self.binary = binary
        self.mult = 2 if binary else 1
        if binary:
            self.y = y.astype(np.uint8)
            self.blocks = True
        else:
            self.y = y
            self.y_sq = y * y
            self.y_pos = np.maximum(y, 0.0)
            self.blocks = bool(np.all(y == np.round(y))) and float(self.y_sq.sum()) < 2.0**52
        self.passes = 0  # passes over the rows (for the benchmarks)

    def cells(self, cols):
        return int(np.prod([self.n_levels[c] for c in cols])) * self.mult

    def count(self, sets):
        """``{cols: stats}`` for every column set in ``sets`` (all of one size); ``stats`` is
        ``(n, x)`` for a 0/1 outcome, else ``(n, sum, sum of squares, sum of positive parts)``,
        float arrays over the set's slices in key order."""
        out = {}
        if not sets:
            return out
        bits = np.array([sum(1 << c for c in cols) for cols in sets], dtype=np.int64)
        pending = np.ones(len(sets), dtype=bool)
        log_levels = np.log2(np.asarray(self.n_levels, dtype=float))
        for i, cols in enumerate(sets):
            if not pending[i]:
                continue
            block = self._grow(cols, bits, pending, log_levels) if self.blocks else cols
            hist = self._histogram(block)
            mask = sum(1 << c for c in block)
            inside = np.flatnonzero(pending & ((bits & ~mask) == 0))
            for j in inside:
                out[sets[j]] = self._marginal(hist, block, sets[j])
            pending[inside] = False
        return out

    def _grow(self, cols, bits, pending, log_levels):
        """Add columns to ``cols`` while the block stays within ``_BLOCK_CELLS``, each time the one
        completing the most pending column sets (fewest levels first on ties)."""
        block = set(cols)
        mask = sum(1 << c for c in cols)
        room = math.log2(_BLOCK_CELLS / self.cells(cols)) + 1e-9
        todo = bits[pending]
        while True:
            miss = todo & ~mask
            single = (miss != 0) & ((miss & (miss - 1)) == 0)  # one column short of the block
            if not single.any():
                break
            col = np.frexp(miss[single].astype(float))[1] - 1  # the missing column's index
            gain = np.bincount(col, minlength=len(log_levels)).astype(float)
            gain[log_levels > room] = 0
            if gain.max() <= 0:
                break
            # most sets completed; ties to the fewest levels, then the lowest index
            best = int(np.lexsort((np.arange(len(gain)), log_levels, -gain))[0])
            block.add(best)
            mask |= 1 << best
            room -= log_levels[best]
        return tuple(sorted(block))

    def _histogram(self, block):
        """The block's joint histogram, counted in chunks of rows so the key and bincount's own
        copy of it stay in cache (time linear in the rows)."""
        self.passes += 1
        cells = self.cells(block)
        dtype = np.uint16 if cells <= 1 << 16 else np.uint32 if cells <= 1 << 32 else np.int64
        N = len(self.y)
        buf = np.empty(min(N, _CHUNK_ROWS), dtype=dtype)
        hist = [np.zeros(cells, dtype=np.int64 if self.binary or i == 0 else float)
                for i in range(1 if self.binary else 4)]
        for start in range(0, N, _CHUNK_ROWS):
            rows = slice(start, min(start + _CHUNK_ROWS, N))
            key = buf[: rows.stop - start]
            key[:] = self.codes[block[0]][rows]
            for c in block[1:]:  # Horner: key = (.. (k0 * n1 + k1) * n2 + k2 ..)
                key *= self.n_levels[c]
                key += self.codes[c][rows]
            if self.binary:
                key *= 2
                key += self.y[rows]
                hist[0] += np.bincount(key, minlength=cells)
            else:
                hist[0] += np.bincount(key, minlength=cells)
                for h, w in zip(hist[1:], (self.y, self.y_sq, self.y_pos)):
                    h += np.bincount(key, weights=w[rows], minlength=cells)
        return hist[0] if self.binary else tuple(hist)

    def _marginal(self, hist, block, cols):
        shape = [self.n_levels[c] for c in block]
        axes = tuple(i for i, c in enumerate(block) if c not in cols)
        if self.binary:
            h = hist.reshape(shape + [2])
            if axes:
                h = h.sum(axis=axes)
            h = h.reshape(-1, 2)
            return h.sum(axis=1).astype(float), h[:, 1].astype(float)
        parts = []
        for arr in hist:
            h = arr.reshape(shape)
            parts.append((h.sum(axis=axes) if axes else h).ravel().astype(float))
        return tuple(parts)


def _lattice_search(codes, n_levels, y, binary, depth, min_rows, pool, confidence_level, *,
                    prune=True):
    """Best ``pool`` eligible slices by score, pruned exactly; returns (ranked, n_scored, n_candidates).

    Each ranked entry is ``(score, cols, levels, search_rows)`` with ``cols`` and ``levels`` tuples.
    Column sets are taken in ``combinations`` order; those that can still be visited are counted
    ahead in windows (:class:`_Counter`), then walked one by one in that order.
    """
    n_cols = len(codes)
    N = len(y)
    z = z_value(confidence_level)
    total = float(y.sum())
    if not binary:
        total_sq = float((y * y).sum())
        y_max = float(y.max()) if N else 0.0
    counter = _Counter(codes, n_levels, y, binary)
    visited = {}  # cols -> (score, bound, candidate) arrays over the column set's keys
    best = []  # sorted list of (rank_key, entry), best first, at most `pool`
    n_scored = 0
    n_candidates = 0  # slices whose every parent survived: the ones the pruning could not rule out

    def threshold():
        return best[-1][1][0] if prune and len(best) >= pool else -np.inf

    def candidates(dims, parents, thr):
        cand = np.ones(int(np.prod(dims)), dtype=bool)
        for s, pk in parents:
            _, p_bound, p_cand, _ = visited[s]
            cand &= p_cand[pk] & (p_bound[pk] >= thr - _EPS)
        return cand

    def walk(window, d):
        nonlocal n_scored, n_candidates
        stats = counter.count([w[0] for w in window])
        scores, bounds = _window_scores(
            [stats[w[0]] for w in window], binary, d < depth, min_rows, N, total,
            confidence_level, z, None if binary else (total_sq, y_max))
        for (cols, dims, parents), st, (supported, score_all), bound_all in zip(
                window, (stats[w[0]] for w in window), scores, bounds):
            size = len(supported)
            if d == 1:
                cand = np.ones(size, dtype=bool)
            else:
                cand = candidates(dims, parents, threshold())
                if not cand.any():
                    continue
            n, x = st[0], st[1]
            n_scored += int(supported.sum())
            ok = supported & cand
            n_candidates += int(ok.sum())
            score = np.where(ok, score_all, -np.inf)
            bound = (np.full(size, -np.inf) if bound_all is None
                     else np.where(ok, bound_all, -np.inf))
            if d == 1:
                with np.errstate(invalid="ignore", divide="ignore"):
                    gap = x / n - (total - x) / (N - n)
                eligible = ok & (gap > 0)
            else:
                # a material refinement: more certainly worse than the rest than every parent, and
                # confidently worse than the rest of each parent (the parent's other rows), so an
                # extra predicate that only carves a lucky corner out of a bad region is dropped
                eligible = ok.copy()
                for s, pk in parents:
                    eligible &= score > visited[s][0][pk]
                    eligible &= _within_parent_low(st, visited[s][3], pk, binary, z,
                                                   confidence_level) > 0
            eligible &= np.isfinite(score)
            visited[cols] = (score, bound, ok, st)
            keys = np.flatnonzero(eligible & (score >= threshold()))
            if len(keys):
                _merge(best, keys, score, n, cols, dims, d, pool)

    for d in range(1, depth + 1):
        window, cells = [], 0
        for cols in combinations(range(n_cols), d):
            dims = tuple(n_levels[c] for c in cols)
            parents = []
            if d > 1:
                subsets = [cols[:i] + cols[i + 1:] for i in range(d)]
                if any(s not in visited for s in subsets):
                    continue
                levels = np.unravel_index(np.arange(int(np.prod(dims))), dims)
                parents = [
                    (s, np.ravel_multi_index(levels[:i] + levels[i + 1:], dims[:i] + dims[i + 1:]))
                    for i, s in enumerate(subsets)
                ]
                # the threshold only rises, so a set with no candidate now has none when walked
                if not candidates(dims, parents, threshold()).any():
                    continue
            size = counter.cells(cols)
            if window and cells + size > _WINDOW_CELLS:
                walk(window, d)
                window, cells = [], 0
            window.append((cols, dims, parents))
            cells += size
        if window:
            walk(window, d)
    ranked = [entry for _, entry in best]
    return ranked, n_scored, n_candidates


def _within_parent_low(st, parent_st, pk, binary, z, confidence_level):
    """Lower limit of (slice rate - rate of the parent's other rows), per slice: Newcombe for 0/1
    outcomes, Wald from the sums otherwise; -inf where the parent has no other rows."""
    n, x = st[0].astype(float), st[1].astype(float)
    rn, rx = parent_st[0][pk] - n, parent_st[1][pk] - x
    empty = (n < 2) | (rn < 2)
    with np.errstate(invalid="ignore", divide="ignore"):
        if binary:
            low, _ = newcombe_interval(x, np.maximum(n, 1), np.clip(rx, 0, None),
                                       np.maximum(rn, 1), confidence_level=confidence_level)
        else:
            sq, rsq = st[2], parent_st[2][pk] - st[2]
            m1, m2 = x / n, rx / rn
            v1 = np.maximum(sq - x * m1, 0.0) / (n - 1)
            v2 = np.maximum(rsq - rx * m2, 0.0) / (rn - 1)
            low = (m1 - m2) - z * np.sqrt(v1 / n + v2 / rn)
    return np.where(empty | np.isnan(low), -np.inf, low)


def _window_scores(stats, binary, need_bound, min_rows, N, total, confidence_level, z, real):
    """Scores (and refinement bounds) of the supported slices of many column sets in one vectorised
    call; each value depends only on its own slice's counts. Per set ``(supported, score)`` with
    ``-inf`` for unsupported or undefined scores, and the bound (or None)."""
    n = np.concatenate([st[0] for st in stats])
    sup = (n >= min_rows) & (n < N)
    score = np.full(len(n), -np.inf)
    bound = np.full(len(n), -np.inf) if need_bound else None
    if sup.any():
        ns = n[sup]
        xs = np.concatenate([st[1] for st in stats])[sup]
        if binary:
            score[sup] = _binary_score(xs, ns, total, N, confidence_level)
            if need_bound:
                bound[sup] = _binary_bound(xs, ns, total, N, min_rows, confidence_level)
        else:
            total_sq, y_max = real
            sq = np.concatenate([st[2] for st in stats])[sup]
            score[sup] = _wald_score(xs, sq, ns, total, total_sq, N, z)
            if need_bound:
                pos = np.concatenate([st[3] for st in stats])[sup]
                bound[sup] = _real_bound(pos, ns, total, N, min_rows, y_max)
    score[np.isnan(score)] = -np.inf
    if need_bound:
        bound[np.isnan(bound)] = -np.inf
    cuts = np.cumsum([len(st[0]) for st in stats])[:-1]
    sups, scores = np.split(sup, cuts), np.split(score, cuts)
    bounds = np.split(bound, cuts) if need_bound else [None] * len(stats)
    return list(zip(sups, scores)), bounds


def _merge(best, keys, score, n, cols, dims, d, pool):
    if len(keys) > pool:  # keep the pool best, with every tie at the cut
        cut = np.sort(score[keys])[-pool]
        keys = keys[score[keys] >= cut]
    levels = np.unravel_index(keys, dims)
    for j, k in enumerate(keys):
        lv = tuple(int(level[j]) for level in levels)
        entry = (float(score[k]), cols, lv, int(n[k]))
        best.append(((-entry[0], d, cols, lv), entry))
    best.sort(key=lambda t: t[0])
    del best[pool:]


def _binary_score(x, n, total, N, confidence_level):
    """Newcombe's lower limit of (slice rate - rest rate)."""
    return newcombe_interval(x, n, total - x, N - n, confidence_level=confidence_level)[0]


def _binary_bound(x, n, total, N, min_rows, confidence_level):
    """An upper bound on the score of any refinement (>= ``min_rows`` rows) of a slice (n, x).

    Newcombe's lower limit ``d - sqrt((p1 - l1)² + (u2 - p2)²)`` is at most ``l1 - p2``. Over the
    refinements (n' in [min_rows, n], x' <= min(x, n')), the Wilson limit ``l1(x', n')`` grows with
    ``x'`` and, for fixed ``x'``, falls with ``n'``; for a pure slice (x' = n') it grows with ``n'``.
    The rest's rate ``(X - x') / (N - n')`` behaves the opposite way in each case, so both terms are
    best at ``n' = clip(x, min_rows, n)``, ``x' = min(x, n')``.
    """
    n_star = np.clip(x, min_rows, n)
    x_star = np.minimum(x, n_star)
    low, _ = wilson_interval(x_star, n_star, confidence_level=confidence_level)
    with np.errstate(invalid="ignore", divide="ignore"):
        rest = np.where(N - n_star > 0, (total - x_star) / (N - n_star), 0.0)
    return low - rest


def _wald_score(s, sq, n, total, total_sq, N, z):
    """Lower Wald limit of (slice mean - rest mean), variances from the sums (ddof 1)."""
    nr = N - n
    sr = total - s
    sqr = total_sq - sq
    with np.errstate(invalid="ignore", divide="ignore"):
        m1, m2 = s / n, sr / nr
        v1 = np.maximum(sq - s * m1, 0.0) / (n - 1)
        v2 = np.maximum(sqr - sr * m2, 0.0) / (nr - 1)
        return (m1 - m2) - z * np.sqrt(v1 / n + v2 / nr)


def _real_bound(pos, n, total, N, min_rows, y_max):
    """Upper bound on the Wald score of any refinement: mean' - rest_mean' with the sum of a refinement
    at most ``pos`` (the slice's sum of positive parts), so mean' <= min(y_max, pos / min_rows) and
    rest_mean' >= (total - pos) / (N - min_rows) (or / (N - n) when that numerator is negative)."""
    top = np.minimum(y_max, pos / min_rows)
    num = total - pos
    rest = np.where(num >= 0, num / np.maximum(N - min_rows, 1), num / np.maximum(N - n, 1))
    return top - rest


# --------------------------------------------------------------------------------------------------
# the estimate stage


def _member(codes, cols, levels):
    mask = codes[cols[0]] == levels[0]
    for c, lv in zip(cols[1:], levels[1:]):
        mask &= codes[c] == lv
    return mask


def _dedupe(ranked, codes, similarity, top):
    """Greedy by rank: drop a slice whose rows overlap a kept one with Jaccard >= similarity."""
    kept, masks, sizes = [], [], []
    for entry in ranked:
        if len(kept) >= top:
            break
        mask = _member(codes, entry[1], entry[2])
        size = int(mask.sum())
        if similarity is not None:
            dup = False
            for m, s in zip(masks, sizes):
                inter = int(np.count_nonzero(mask & m))
                union = size + s - inter
                if union > 0 and inter / union >= similarity:
                    dup = True
                    break
            if dup:
                continue
        kept.append(entry)
        masks.append(mask)
        sizes.append(size)
    return kept, masks


def _rate_estimates(s, n, sq, binary, cl, limits=None):
    """Rate estimates: Wilson for 0/1, Wald for real-valued (vectorised), the Wald limits clipped to
    the outcome's range ``limits`` (a mean of values in [-1, 1] cannot exceed 1)."""
    if binary:
        low, high = wilson_interval(s, n, confidence_level=cl)
        method = "wilson"
    else:
        z = z_value(cl)
        with np.errstate(invalid="ignore", divide="ignore"):
            m = s / n
            v = np.maximum(sq - s * m, 0.0) / (n - 1)
            half = z * np.sqrt(v / n)
        low, high, method = m - half, m + half, "wald"
        if limits is not None:
            low, high = np.clip(low, *limits), np.clip(high, *limits)
    with np.errstate(invalid="ignore", divide="ignore"):
        value = s / n
    return [Estimate(float(a), float(b), float(c), method) for a, b, c in zip(value, low, high)]


def _estimate(carried, masks, y, o: _Opts, tested):
    """Per carried slice: rates, gap, ratio, p-value and q-value on the estimate part."""
    K = len(carried)
    if K == 0:
        return []
    cl = o.confidence_level
    # per slice, with no K x rows float matrix: counts for a 0/1 outcome, else one float row buffer
    n1 = np.array([np.count_nonzero(m) for m in masks], dtype=float)
    if o.binary:
        events = y == 1
        s1 = np.array([np.count_nonzero(m & events) for m in masks], dtype=float)
        sq1 = s1.copy()  # y * y = y
        del events
    else:
        s1, sq1 = np.empty(K), np.empty(K)
        y_sq = y * y
        buf = np.empty(len(y))
        for k, mask in enumerate(masks):
            np.copyto(buf, mask)
            s1[k] = buf @ y
            sq1[k] = buf @ y_sq
        del buf, y_sq
    N, S, SQ = float(len(y)), float(y.sum()), float((y * y).sum())
    n2, s2, sq2 = N - n1, S - s1, SQ - sq1
    alt = "greater" if o.direction == "higher" else "less"
    with np.errstate(invalid="ignore", divide="ignore"):
        gap_val = s1 / n1 - s2 / n2
    if o.binary:
        rate = _rate_estimates(s1, n1, sq1, True, cl)
        g_low, g_high = newcombe_interval(s1, n1, s2, n2, confidence_level=cl)
        gap = [Estimate(float(v), float(a), float(b), "newcombe") for v, a, b in zip(gap_val, g_low, g_high)]
        r_low, r_high = ratio_interval(s1, n1, s2, n2, confidence_level=cl)
        with np.errstate(invalid="ignore", divide="ignore"):
            r_val = np.where(s2 > 0, (s1 / n1) / (s2 / np.where(n2 > 0, n2, 1)), np.nan)
        ratio = [Estimate(float(v), float(a), float(b), "mover-wilson") for v, a, b in zip(r_val, r_low, r_high)]
        p = two_proportion_pvalue(s1, n1, s2, n2, alternative=alt)
    else:
        limits = (float(y.min()), float(y.max())) if len(y) else None
        rate = _rate_estimates(s1, n1, sq1, False, cl, limits)
        z = z_value(cl)
        with np.errstate(invalid="ignore", divide="ignore"):
            v1 = np.maximum(sq1 - s1 * s1 / n1, 0.0) / (n1 - 1)
            v2 = np.maximum(sq2 - s2 * s2 / n2, 0.0) / (n2 - 1)
            se = np.sqrt(v1 / n1 + v2 / n2)
            zstat = gap_val / se
        span = (limits[1] - limits[0]) if limits else np.inf
        gap = [Estimate(float(v), float(max(v - z * e, -span)), float(min(v + z * e, span)), "wald")
               for v, e in zip(gap_val, se)]
        ratio = [Estimate(math.nan, math.nan, math.nan, "none")] * K
        p = special.ndtr(-zstat) if alt == "greater" else special.ndtr(zstat)
        p = np.where(se > 0, p, 1.0)  # no spread at all: no evidence either way
    if o.interval == "bootstrap":
        rate, gap = _bootstrap_estimates(masks, y, o, rate, gap)
    p = np.where(np.isnan(p), 1.0, p)
    # BH over `tested` hypotheses; those not carried are set aside with p = 1 (conservative)
    padded = np.concatenate([p, np.ones(max(int(tested) - K, 0))])
    q = bh_adjust(padded)[:K]
    return [
        {"rows": int(n1[k]), "share": n1[k] / N if N else math.nan, "events": float(s1[k]),
         "rate": rate[k], "gap": gap[k], "ratio": ratio[k], "p": float(p[k]), "q": float(q[k]),
         "rest_rate": s2[k] / n2[k] if n2[k] else math.nan}
        for k in range(K)
    ]


def _bootstrap_estimates(masks, y, o: _Opts, rate, gap):
    """Bootstrap rate and gap intervals for every carried slice at once.

    A slice's rate and gap depend on the rows only through the counts in the cells (inside, outside)
    x (distinct outcome value), so resampling the N rows with replacement is drawing the cell counts
    from a multinomial(N, cell shares): one call for all slices and resamples. The BCa acceleration
    comes from the jackknife, which is also cell-wise (leaving out any row of a cell gives the same
    value), weighted by the cell counts.
    """
    values, inv = np.unique(y, return_inverse=True)
    J = len(values)
    N = len(y)
    K = len(masks)
    cells = np.empty((K, 2 * J))
    for k, mask in enumerate(masks):
        cells[k, :J] = np.bincount(inv[mask], minlength=J)
        cells[k, J:] = np.bincount(inv[~mask], minlength=J)
    probs = cells / N
    B = o.n_resamples
    draws = o.rng.multinomial(N, probs, size=(B, K)).astype(float)  # (B, K, 2J)

    def stats(c):
        n_in = c[..., :J].sum(axis=-1)
        n_out = c[..., J:].sum(axis=-1)
        with np.errstate(invalid="ignore", divide="ignore"):
            r_in = (c[..., :J] @ values) / n_in
            r_out = (c[..., J:] @ values) / n_out
        return r_in, r_in - r_out

    boot_rate, boot_gap = stats(draws)  # (B, K)
    obs_rate, obs_gap = stats(cells)  # (K,)
    # jackknife: drop one row from cell j -> counts - e_j; shape (K, 2J)
    jack = cells[:, None, :] - np.eye(2 * J)[None, :, :]
    jack_rate, jack_gap = stats(jack)
    alpha = (1 - o.confidence_level) / 2
    out_rate, out_gap = [], []
    for k in range(K):
        for dist, obs, jv, prior, out in (
            (boot_rate[:, k], obs_rate[k], jack_rate[k], rate[k], out_rate),
            (boot_gap[:, k], obs_gap[k], jack_gap[k], gap[k], out_gap),
        ):
            if np.ptp(dist) == 0:
                # every resample gives the same value (e.g. a slice with no events): the bootstrap
                # has no spread to offer, so the closed-form interval stands
                out.append(prior)
                continue
            lo, hi, method = _boot_interval(dist, obs, jv, cells[k], alpha)
            out.append(Estimate(prior.value, lo, hi, method))
    return out_rate, out_gap


def _boot_interval(dist, obs, jack_values, weights, alpha):
    """Percentile or BCa interval; BCa when z0 and the acceleration are finite (Efron & Tibshirani
    1993, ch. 14), with the jackknife values given per cell and weighted by the cell counts."""
    dist = dist[np.isfinite(dist)]
    if len(dist) == 0 or not np.isfinite(obs):
        return math.nan, math.nan, "bootstrap-percentile"
    lo_q, hi_q, method = alpha, 1 - alpha, "bootstrap-percentile"
    below = np.mean(dist < obs) + 0.5 * np.mean(dist == obs)
    w = np.where(weights > 0, weights, 0.0)
    jv = np.where(w > 0, jack_values, 0.0)
    if 0.0 < below < 1.0 and np.all(np.isfinite(jv)):
        z0 = special.ndtri(below)
        mean_j = np.sum(w * jv) / np.sum(w)
        dj = np.where(w > 0, mean_j - jv, 0.0)
        denom = 6.0 * np.sum(w * dj * dj) ** 1.5
        if denom > 0 and np.isfinite(denom):
            a = np.sum(w * dj**3) / denom
            qs = []
            for zq in (special.ndtri(alpha), special.ndtri(1 - alpha)):
                qs.append(float(special.ndtr(z0 + (z0 + zq) / (1 - a * (z0 + zq)))))
            lo_q, hi_q, method = qs[0], qs[1], "bootstrap-bca"
    low, high = np.quantile(dist, [lo_q, hi_q])
    return float(low), float(high), method


# --------------------------------------------------------------------------------------------------
# assembling


_WORDING = {
    "error": ("Rows with {s}", "misclassified"),
    "fpr": ("Among true negatives, rows with {s}", "wrongly flagged positive"),
    "fnr": ("Among true positives, rows with {s}", "missed"),
    "selection": ("Rows with {s}", "given the favourable decision"),
}


def _make_slice(rank, cand, est, enc: Encoding, metric, o: _Opts) -> Slice:
    score, cols, levels, search_rows = cand
    columns = [enc.columns[c] for c in cols]
    preds = tuple(dict(col.predicates[lv]) for col, lv in zip(columns, levels))
    label = " and ".join(col.labels[lv] for col, lv in zip(columns, levels))
    return Slice(
        rank=rank, predicates=preds, label=label, rows=est["rows"], share=float(est["share"]),
        events=est["events"], rate=est["rate"], gap=est["gap"], effect_ratio=est["ratio"],
        p_value=est["p"], q_value=est["q"], score=score, search_rows=search_rows,
        sentence=_sentence(label, metric, est, o.confidence_level, o.binary),
    )


def _fmt_ratio(v):
    return f"{v:.0f}" if v >= 10 else f"{v:.1f}" if v >= 1 else f"{v:.2f}"


def _sentence(label, metric, est, cl, binary):
    level = f"{cl * 100:g} %"
    rate, rest = est["rate"].value, est["rest_rate"]
    subject, verb = _WORDING.get(metric, ("Rows with {s}", None))
    subject = subject.format(s=label)
    ratio = est["ratio"]
    if binary and verb and np.isfinite(ratio.value) and np.isfinite(ratio.low) and np.isfinite(ratio.high):
        return (
            f"{subject} are {verb} {_fmt_ratio(ratio.value)} times as often as the rest "
            f"({level} interval {_fmt_ratio(ratio.low)}–{_fmt_ratio(ratio.high)}; "
            f"{rate:.1%} against {rest:.1%})"
        )
    gap = est["gap"]
    what = "rate" if binary else "mean outcome"
    return (
        f"{subject} have a {what} of {rate:.3g} against {rest:.3g} for the rest "
        f"(difference {gap.value:+.3g}, {level} interval {gap.low:+.3g} to {gap.high:+.3g})"
    )
