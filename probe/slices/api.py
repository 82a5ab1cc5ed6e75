"""The public entry points of the slice search: validate, seed, encode, search, assemble."""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd

from ..data import close_names
from ..design_data import resolve_design
from ..design import Design
from ..encode import Encoding, encode_columns
from ..errors import DataError, PlanError
from ..metrics import as_binary, get_metric
from ..options import SliceOptions, check_option, coerce_option, option_fields
from ..values import as_rng
from .findings import SliceFindings
from .sample import membership_column
from .search import Inputs, run

__all__ = ["find_slices", "search_slices"]

_MAX_BOOT_VALUES = 1000  # distinct outcome values the cell-wise bootstrap handles


def find_slices(X: pd.DataFrame, y_true, y_pred, *, options: SliceOptions | None = None,
                favorable=True, confidence_level: float = 0.95, rng=0,
                encoding: Encoding | None = None, sample_weight=None,
                design: Design | None = None, **kwargs) -> SliceFindings:
    """Find the slices of ``X`` where a classifier's error, FPR, FNR or selection rate is worst.

    Parameters
    ----------
    X : pandas.DataFrame
        The candidate slice columns (protected attributes may be among them; they need not be model
        inputs). Not modified. The label is never sliced on: a column of ``X`` that holds it (two
        values matching ``y_true`` on every row, whatever they are called) is left out with a note.
    y_true : array_like of bool or 0/1, or str, or None
        The labels (1 = positive), or the name of the label column in ``X``.
        Not needed for ``metric="selection"``.
    y_pred : array_like of bool or 0/1, or str
        The model's decisions, or the name of their column in ``X`` (not sliced either).
    options : SliceOptions, optional
        The search's options (:class:`probe.options.SliceOptions`: ``metric``, ``depth``,
        ``min_rows``, ``bins``, ``top``, ``max_share``, ``split``, ``columns``, ``exclude``,
        ``interval``); default
        its defaults. The metric decides which rates are the finding: high error, FPR and FNR, low
        selection (a slice denied the favourable decision), as :mod:`probe.metrics` says.
    favorable : bool or {"positive", "negative"}, default=True
        The favourable decision, for ``selection``.
    confidence_level : float, default=0.95
    rng : None, int or numpy.random.Generator, default=0
        Seeds the split and the bootstrap.
    encoding : Encoding, optional
        ``X`` already encoded (:func:`probe.encode.encode_columns`), used as it is instead of encoding
        again (its columns in ``exclude``, or not in ``columns``, are left out).
    sample_weight : array_like of float, optional
        Non-negative row weights (not all zero); the same as ``design=Design(weights=...)``.
    design : probe.design.Design, optional
        Row weights, clusters and attributes known as membership probabilities
        (:mod:`probe.design`); not with ``sample_weight``. Unless the design is plain, rates,
        shares and the search's scores are weighted, ``min_rows`` counts rows, ``max_share`` caps
        the weighted share, the split keeps clusters whole, the estimates' intervals and tests
        use effective counts and record ``n_effective`` (:mod:`probe.slices.estimate_design`).
        An attribute known as probabilities is a slice column (``race = b``) unless excluded.
    **kwargs
        Fields of :class:`~probe.options.SliceOptions`, replacing those of ``options``
        (``find_slices(X, y, pred, depth=2)``); each is checked by the option's own rule.

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
    opts = _slice_options(options, kwargs)
    metric = get_metric(opts.metric)
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
    outcome, base = metric.outcome(y_true, y_pred, favorable=favorable)
    if len(outcome) != len(X):
        raise DataError(f"`X` has {len(X)} rows but the labels/decisions have {len(outcome)}")
    # stratified by the label only: fixing the outcome's total in each part would make the two parts'
    # counts in a slice negatively dependent (a finite-population effect), and the estimate part's
    # intervals too wide (measured: 96.5 % coverage for a nominal 95 %)
    strata = None if y_true is None else as_binary(y_true, "y_true").astype(np.int64)
    exclude = opts.exclude + tuple(c for c in dict.fromkeys(auto_exclude) if c not in opts.exclude)
    opts = dataclasses.replace(opts, exclude=exclude)
    return _search(X, outcome, base, metric.name, metric.worse, opts, confidence_level, rng,
                   encoding, _SIMILARITY, strata, sample_weight, design)


_SIMILARITY = 0.9  # find_slices reports near-identical slices (Jaccard >= this) once


def search_slices(X: pd.DataFrame, outcome, *, base=None, direction: str = "higher",
                  label: str = "custom", options: SliceOptions | None = None,
                  confidence_level: float = 0.95, similarity: float | None = _SIMILARITY, rng=0,
                  encoding: Encoding | None = None, sample_weight=None,
                  design: Design | None = None, **kwargs) -> SliceFindings:
    """The slice search on any per-row outcome over a base mask.

    ``outcome`` may be 0/1 (a rate; Wilson / Newcombe intervals, Fisher's exact test) or
    real-valued, e.g. the paired difference ``candidate_error - baseline_error`` in {-1, 0, 1}: the
    rate is then the slice mean (Wald interval) and the gap a Welch interval, from the additive
    sums of the outcome and of its square; the one-sided test is exact for {-1, 0, 1} and Welch's
    otherwise (:mod:`probe.slices.pvalues`). The split is a simple random one.

    Parameters
    ----------
    X : pandas.DataFrame
    outcome : array_like of float
        One value per row of ``X``; NaN is allowed only outside ``base``.
    base : array_like of bool, optional
        The rows the outcome is defined on (default all).
    direction : {"higher", "lower"}, default="higher"
        Which rates are the finding.
    label : str, default="custom"
        The outcome's name, for the report and the sentences (``"selection"`` words them as the
        selection rate's).
    options : SliceOptions, optional
        As in :func:`find_slices`; its ``metric`` is not used (the outcome is given).
    confidence_level : float, default=0.95
    similarity : float or None, default=0.9
        Slices whose estimate-part rows overlap with Jaccard similarity at least this are reported
        once; ``None`` keeps them all.
    rng : None, int or numpy.random.Generator, default=0
    encoding : Encoding, optional
        As in :func:`find_slices`.
    sample_weight, design : optional
        As in :func:`find_slices`; under a design that is not plain a real outcome's test is
        Welch's on the effective counts (the {-1, 0, 1} exact test is not exact under weights).
    **kwargs
        Fields of :class:`~probe.options.SliceOptions` but ``metric``.

    Returns
    -------
    SliceFindings
    """
    if "metric" in kwargs:
        raise PlanError("`metric` is not an option of search_slices: the outcome is given; name it "
                        "with `label`")
    opts = _slice_options(options, kwargs)
    return _search(X, outcome, base, label, direction, opts, confidence_level, rng, encoding,
                   similarity, None, sample_weight, design)


def _search(X, outcome, base, label, direction, opts, confidence_level, rng, encoding, similarity,
            strata, sample_weight, design) -> SliceFindings:
    inputs = _search_iv(X, outcome, base, direction, opts, confidence_level, similarity, strata,
                        rng, sample_weight, design)
    enc = _encoding(X, opts, encoding, inputs.design)
    if strata is not None:
        enc = _without_label(enc, np.asarray(strata) == 1)
    return run(enc, label, inputs)


def _without_label(enc: Encoding, y: np.ndarray) -> Encoding:
    """``enc`` without the columns that hold the label: two levels that match ``y`` (or its
    opposite) on every row, whatever the label's values are called. A slice on the label would
    only restate the metric's definition (every error of a 0/1 label among its positives)."""
    copies = [c.name for c in enc.columns if c.n_levels == 2 and c.kind != "membership"
              and ((c.codes == 1) == y).all() | ((c.codes == 1) == ~y).all()]
    if not copies:
        return enc
    keep = tuple(c for c in enc.columns if c.name not in copies)
    notes = tuple(f"`{name}` left out: it holds the label" for name in copies)
    if not keep:
        raise DataError("no column is left to slice on (" + "; ".join(notes) + ")")
    return Encoding(keep, enc.n_rows, enc.notes + notes)


def _slice_options(options, kwargs) -> SliceOptions:
    """``options`` (default :class:`SliceOptions`) with the keyword arguments replacing its fields,
    each checked by its field's rule and named in a message as the caller wrote it."""
    if options is None:
        options = SliceOptions()
    elif not isinstance(options, SliceOptions):
        raise PlanError(f"`options` must be a SliceOptions, got {type(options).__name__}")
    if not kwargs:
        return options
    known = {f.name: f for f in option_fields(SliceOptions)}
    values = {}
    for name, value in kwargs.items():
        if name not in known:
            raise PlanError(f"`{name}` is not an option of the slice search; the options are "
                            f"{', '.join(known)}" + close_names(name, list(known)))
        if isinstance(value, np.generic):
            value = value.item()
        value = coerce_option(known[name], value, name)
        check_option(known[name], value, name)
        values[name] = value
    return dataclasses.replace(options, **values)


def _column(X, name, what):
    if name not in X.columns:
        raise DataError(f"`{what}` names column `{name}`, which is not in the data")
    return X[name].to_numpy()


def _encoding(X, opts: SliceOptions, encoding, design: Design) -> Encoding:
    """The slice columns: ``encoding`` restricted to the options' columns, else ``X`` encoded;
    then the attributes known as membership probabilities (:func:`.sample.membership_column`)."""
    members = [m for a, m in design.membership.items() if a not in opts.exclude
               and (opts.columns is None or a in opts.columns)]
    if encoding is None:
        columns = None if opts.columns is None else [c for c in opts.columns
                                                     if c not in design.membership]
        enc = encode_columns(X, columns=columns, exclude=opts.exclude, bins=opts.bins) \
            if columns is None or columns else Encoding((), len(X), ())
    else:
        if not isinstance(encoding, Encoding):
            raise DataError(f"`encoding` must be an Encoding of `X` (probe.encode.encode_columns), "
                            f"got {type(encoding).__name__}")
        if encoding.n_rows != len(X):
            raise DataError(f"`encoding` has {encoding.n_rows} rows but `X` has {len(X)}")
        keep = tuple(c for c in encoding.columns if c.name not in opts.exclude
                     and (opts.columns is None or c.name in opts.columns))
        enc = Encoding(keep, encoding.n_rows, encoding.notes)
    if members:
        enc = Encoding(enc.columns + tuple(membership_column(m) for m in members), enc.n_rows,
                       enc.notes)
    if not enc.columns:
        raise DataError("no column is left to slice on"
                        + (f" ({'; '.join(enc.notes)})" if enc.notes else ""))
    return enc


def _search_iv(X, outcome, base, direction, opts, confidence_level, similarity, strata,
               rng, sample_weight, design) -> Inputs:
    """Validate and normalise every input of the search, so the body never re-checks."""
    if not isinstance(X, pd.DataFrame):
        raise DataError(f"`X` must be a pandas DataFrame, got {type(X).__name__}")
    n = len(X)
    design = resolve_design(sample_weight, design, n)
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
    if design.weights is not None and not (design.weights > 0).all():
        # rows of weight 0 carry nothing: out of the base rows (a new mask; `base` is not modified)
        base_mask = base_mask & (design.weights > 0)
    if base_mask.all():  # no index array and no copy of the outcome (it is only read)
        base_idx, yb = None, y
    else:
        base_idx = np.flatnonzero(base_mask)
        yb = y[base_idx]
    bad = ~np.isfinite(yb)
    if bad.any():
        first = np.flatnonzero(bad)[0] if base_idx is None else base_idx[np.flatnonzero(bad)[0]]
        raise DataError(f"`outcome` has {int(bad.sum())} missing or infinite values in the base "
                        f"rows (first at row {first})")
    if len(yb) == 0:
        raise DataError("the base population is empty (no rows to search)")
    if direction not in ("higher", "lower"):
        raise PlanError(f"`direction` must be 'higher' or 'lower', got {direction!r}")
    if not (isinstance(confidence_level, (int, float)) and 0.0 < confidence_level < 1.0):
        raise PlanError(f"`confidence_level` must lie strictly between 0 and 1, got "
                        f"{confidence_level!r}")
    if similarity is not None and not (isinstance(similarity, (int, float))
                                       and 0.0 < similarity <= 1.0):
        raise PlanError(f"`similarity` must lie in (0, 1] or be None, got {similarity!r}")
    binary = bool(np.all((yb == 0) | (yb == 1)))
    if opts.interval == "bootstrap" and not binary and len(np.unique(yb)) > _MAX_BOOT_VALUES:
        raise PlanError(
            f"`interval='bootstrap'` needs an outcome with at most {_MAX_BOOT_VALUES} distinct "
            "values; use the Wald intervals (interval='wilson') for a continuous outcome"
        )
    st = None
    if strata is not None:
        st = _group_codes(strata if base_idx is None else strata[base_idx])
    return Inputs(yb, base_idx, binary, direction, st, similarity, float(confidence_level), opts,
                  as_rng(rng), design)


def _group_codes(values):
    """``np.unique(values, return_inverse=True)[1]``; by counting when they are small integers."""
    if values.dtype.kind in "biu" and len(values):
        low, high = int(values.min()), int(values.max())
        if high - low < 1 << 16:
            shifted = values.astype(np.intp) - low if low else values.astype(np.intp)
            rank = np.cumsum(np.bincount(shifted, minlength=high - low + 1) > 0) - 1
            return rank[shifted]
    return np.unique(values, return_inverse=True)[1]

