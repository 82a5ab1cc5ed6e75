"""Direct flips: set the attribute of every row of the ``from`` group to ``to``, all else equal, and
re-score (one batched model call per pair). Applies only when the attribute is a model input; it
measures *direct* dependence, not disparate impact (:data:`~probe.flips.DIRECT_FLIP_CAUTION`)."""

from __future__ import annotations

import warnings
from dataclasses import replace

from ..errors import ProbeWarning
from .context import FlipContext, impossible_row, pair_row, score, set_column
from .findings import DIRECT_FLIP_CAUTION, SCREEN_CAUTION, FlipFindings

__all__ = ["direct_flips"]


def direct_flips(ctx: FlipContext) -> FlipFindings:
    """The direct mode of :func:`probe.flips.flip_test` on a validated context."""
    attribute, X = ctx.attribute, ctx.X
    caution = DIRECT_FLIP_CAUTION + " " + SCREEN_CAUTION
    if not ctx.is_input:
        reason = (f"`{attribute}` is not a model input, so a direct flip does not apply "
                  "(use the transport or twins mode)")
        warnings.warn(reason, ProbeWarning, stacklevel=3)
        ctx.notes.append(reason)
        return replace(_findings(ctx, (), caution), not_applicable=reason)
    base = ctx.base_scores
    rows = []
    for src, dst in ctx.pairs:
        idx = ctx.group_rows[src]
        if ctx.unknown(dst):
            rows.append(impossible_row(ctx, "direct", src, dst))
            continue
        # a positional take is already a new frame; the shallow copy only drops pandas' "is a
        # copy" flag, so setting a column never warns and never touches X
        cf = set_column(X.iloc[idx].copy(deep=False), attribute, dst)
        new = score(ctx.model, cf, f"the {len(idx)} rows of `{attribute}` = {src!r} set to {dst!r}")
        rows.append(pair_row(ctx, "direct", src, dst, idx, base[idx], new, (attribute,)))
    return _findings(ctx, tuple(rows), caution)


def _findings(ctx, rows, caution):
    return FlipFindings(ctx.attribute, "direct", rows, tuple(ctx.notes), caution, ctx.threshold,
                        ctx.favorable)
