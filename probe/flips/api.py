"""The flip test's one entry point: validate, seed, dispatch to a mode."""

from __future__ import annotations

from dataclasses import fields, replace

import pandas as pd

from ..errors import PlanError
from ..options import FlipOptions, check_option
from ..values import as_rng
from .context import flip_context
from .direct import direct_flips
from .findings import FlipFindings
from .transport import transport_flips
from .twins import twin_flips

__all__ = ["flip_test"]

_MODES = next(f for f in fields(FlipOptions) if f.name == "modes")


def flip_test(model, X: pd.DataFrame, attribute: str, *, options: FlipOptions | None = None,
              mode: str | None = None, threshold: float = 0.5, favorable=True,
              confidence_level: float = 0.95, rng=0, scores=None, encoding=None,
              proxy_ranking=None, sample_weight=None, design=None, **kwargs) -> FlipFindings:
    """Counterfactual flip test of ``model`` on ``X`` for one protected ``attribute`` in one mode.

    Each mode is reported per ``(from, to)`` pair of the attribute's observed levels (or only into
    ``options.reference``):

    - **direct** (:mod:`probe.flips.direct`): change only the attribute, all else equal;
    - **transport** (:mod:`probe.flips.transport`): move the attribute's proxies to where they sit
      in the ``to`` group (quantile mapping, fewest-changes coupling of levels), and the attribute
      too when it is a model input;
    - **twins** (:mod:`probe.flips.twins`): compare with the ``k`` nearest people of the other
      group, against the ``k`` nearest of their own group as a control (situation testing).

    Direct shares have Wilson intervals, the mean score change a t interval. Transport also maps
    the source group onto a random part of itself (the placebo) and reports the excess over it;
    its intervals come from a bootstrap over both groups that re-estimates the map
    (:mod:`probe.flips.transport_boot`). Twins report the excess over own-group twins, its interval
    from subsamples of both groups with the pools re-drawn. :meth:`FlipRow.judged_at` gives the
    judged estimate (direct: the flip rate; transport and twins: the excess) at any level. The
    largest absolute score change is a plain number (the bootstrap is not consistent for a
    maximum). Where the flips concentrate is shown by
    slice (:mod:`probe.flips.breakdown`). A target level the model never saw (absent from
    ``model.categories[attribute]``) is not scored: the row carries ``impossible=True`` and a note.

    Parameters
    ----------
    model : object
        Anything with ``scores(frame) -> array`` of positive-class probabilities; optional
        ``feature_names`` (tuple of the columns it reads, or None: every column of ``X``) and
        ``categories`` (dict column -> tuple of levels it knows).
    X : pandas.DataFrame
        The rows to test, including ``attribute``. Not modified.
    attribute : str
    options : FlipOptions, optional
        ``modes``, ``reference``, ``proxies``, ``n_proxies``, ``k`` (see :class:`probe.options.
        FlipOptions`); default its defaults. Any of them may also be given as a keyword argument,
        which replaces the option's value (and is checked by the same rule).
    mode : {"direct", "transport", "twins"}, optional
        The mode to run, one of ``options.modes`` (default: the first of them).
    threshold : float, default=0.5
        Decision = ``scores >= threshold``.
    favorable : bool or {"positive", "negative"}, default=True
        Whether the positive decision is the favourable one.
    confidence_level : float, default=0.95
    rng : None, int or numpy.random.Generator, default=0
        Seeds the categorical transport, the placebo and the bootstrap, the proxy ranking (when
        probe makes it), the twins' size-matched pools and subsamples.
    scores : array_like, optional
        The model's scores of ``X`` as it is, when the caller has them (saves one model call).
    encoding : Encoding, optional
        The encoded columns of ``X`` for the by-slice breakdown (the pipeline's, built once per run
        with the slice options); default ``encode_columns(X, exclude=[attribute])``, built once.
    proxy_ranking : ProxyFindings, optional
        Transport: the attribute's proxy ranking (the one the report's proxies table shows); the
        proxies moved are its top ``n_proxies`` model inputs. Default: :func:`probe.proxies.
        find_proxies` over the model inputs with its defaults, seeded by ``rng`` (for an
        attribute known as membership probabilities: against each row's most probable group).
    sample_weight : array_like, optional
        Row weights (non-negative, not all zero); the same as ``design=Design(weights=...)``.
    design : probe.design.Design, optional
        Row weights, clusters and attributes known as membership probabilities (not with
        ``sample_weight``). ``attribute`` may then be one of ``design.membership`` rather than a
        column of ``X``. See :mod:`probe.flips.weighting` and the package notes.

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
    gen = as_rng(rng)
    opts = _options(options, kwargs)
    if mode is None:
        mode = opts.modes[0]
    check_option(_MODES, mode, "mode")
    if mode not in opts.modes:
        raise PlanError(f"`mode` {mode!r} is not among the options' modes "
                        f"({', '.join(opts.modes)})")
    ctx = flip_context(model, X, attribute, reference=opts.reference, threshold=threshold,
                       favorable=favorable, confidence_level=confidence_level, scores=scores,
                       encoding=encoding, sample_weight=sample_weight, design=design)
    pair_seeds = [int(s) for s in gen.integers(0, 2**31 - 1, size=len(ctx.pairs))]
    if mode == "direct":
        return direct_flips(ctx)
    if mode == "transport":
        return transport_flips(ctx, proxies=opts.proxies, n_proxies=opts.n_proxies,
                               proxy_ranking=proxy_ranking, pair_seeds=pair_seeds, rng=rng)
    return twin_flips(ctx, k=opts.k, pair_seeds=pair_seeds)


def _options(options, kwargs) -> FlipOptions:
    if options is not None and not isinstance(options, FlipOptions):
        raise PlanError(f"`options` must be a FlipOptions, got {type(options).__name__}")
    names = [f.name for f in fields(FlipOptions)]
    unknown = [k for k in kwargs if k not in names]
    if unknown:
        raise PlanError(f"flip_test got unknown option{'s' if len(unknown) > 1 else ''} "
                        + ", ".join(f"`{k}`" for k in unknown) + "; the options are "
                        + ", ".join(f"`{n}`" for n in names))
    return replace(options or FlipOptions(), **kwargs)
