"""The search end to end on validated inputs: split, search, carry, estimate, assemble."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..design import Design
from ..encode import Encoding
from ..errors import PlanError
from ..options import SliceOptions
from .bounds import search_level
from .estimate import N_RESAMPLES, Basis, Weighting, carry, estimate, overall_estimate
from .estimate_design import counted_sums
from .findings import CANDIDATES_NOTE, SliceFindings, make_slice
from .lattice import Lattice
from .listing import listed
from .sample import sample_rows, split_mask

__all__ = ["Inputs", "run", "ESTIMATE_SHARE", "carried_pool"]

ESTIMATE_SHARE = 0.5  # share of the base rows in the estimate part


def carried_pool(top: int) -> int:
    """How many slices are carried to the estimate part: ``max(50, 5 * top)``. A real slice that
    the search half ranks below a few dozen noise slices is still carried, and ranked by the
    estimate half's evidence (tests/sim/sim_slices.py measures the power with this pool)."""
    return max(50, 5 * top)
_TAKE_ROWS = 1 << 16  # row indices gathered at a time (they and their rows stay in cache)


@dataclass(frozen=True)
class Inputs:
    """Everything the search needs, validated and normalised (see :mod:`probe.slices.api`).

    Attributes
    ----------
    y : ndarray of float64
        The outcome over the base rows.
    base_idx : ndarray or None
        The base rows' positions; None when every row is a base row.
    binary : bool
        The outcome is 0/1.
    direction : str
        ``"higher"`` or ``"lower"``: which rates are the finding.
    strata : ndarray or None
        Codes ``0 .. k-1`` over the base rows to stratify the split by.
    similarity : float or None
    confidence_level : float
    options : SliceOptions
    rng : numpy.random.Generator
    design : Design
        Weights, clusters and membership over the rows of ``X`` (:mod:`.sample`).
    """

    y: np.ndarray
    base_idx: np.ndarray | None
    binary: bool
    direction: str
    strata: np.ndarray | None
    similarity: float | None
    confidence_level: float
    options: SliceOptions
    rng: np.random.Generator
    design: Design


def run(enc: Encoding, label: str, inp: Inputs) -> SliceFindings:
    """Split the base rows, search one part, estimate the carried slices on the other, and list
    those worse than the rest there, by the estimate part's evidence."""
    o = inp.options
    codes = [c.codes for c in enc.columns]
    if inp.base_idx is not None:
        codes = _take(codes, inp.base_idx)
    n_levels = [c.n_levels for c in enc.columns]
    n_base = len(inp.y)
    rows = sample_rows(enc, codes, inp.y, inp.design, inp.base_idx)
    del codes
    cluster = rows.units if rows.clustered else None
    if o.split:
        base_est = split_mask(n_base, inp.strata, None if cluster is None else _per_base(
            cluster, rows.source, n_base), ESTIMATE_SHARE, inp.rng)
        est_mask = base_est if rows.source is None else base_est[rows.source]
        est_rows, search_rows = np.flatnonzero(est_mask), np.flatnonzero(~est_mask)
        *s_codes, s_y = _take(rows.codes + [rows.y], search_rows)
        s_w = rows.take(search_rows)[0]
        n_search = int(n_base - base_est.sum())
        del search_rows
    else:
        base_est, est_mask = np.ones(n_base, dtype=bool), np.ones(len(rows.y), dtype=bool)
        s_codes, s_y, s_w = rows.codes, rows.y, rows.weights
        n_search = n_base
    min_rows = o.min_rows if o.min_rows is not None else max(30, math.ceil(0.005 * n_search))
    if n_search < min_rows:
        raise PlanError(
            f"the search part has {n_search} rows, fewer than `min_rows` = {min_rows}; lower "
            f"`min_rows`" + (" or search without a split (`split=False`)" if o.split else "")
        )
    if o.split and len(est_rows) < 2:
        raise PlanError(f"the estimate part has {len(est_rows)} rows; search without a split "
                        "(`split=False`)")
    # internally "higher is worse"; the reported figures are on the original outcome
    if inp.binary:
        s_y = s_y.astype(np.uint8) if inp.direction == "higher" else (1.0 - s_y).astype(np.uint8)
    elif inp.direction == "lower":
        s_y = -s_y
    n_carry = carried_pool(o.top)
    pool = 2 * n_carry if inp.similarity is not None else n_carry
    level = search_level(inp.confidence_level, n_levels, o.depth)
    # without a split the q-values are taken over every slice scored, so nothing may be pruned:
    # otherwise the count (and every q-value) would depend on `top`
    ranked, n_scored, n_candidates = Lattice(
        s_codes, n_levels, s_y, inp.binary, depth=o.depth, min_rows=min_rows, pool=pool,
        confidence_level=inp.confidence_level, score_level=level, max_share=o.max_share,
        prune=o.split, weights=s_w,
    ).run()
    del s_codes, s_y, s_w
    e_codes = _Rows(rows.codes, est_rows) if o.split else rows.codes
    e_y = _take([rows.y], est_rows)[0] if o.split else rows.y
    e_design = None if rows.weights is None else Basis(e_y, Weighting(
        *(rows.take(est_rows) if o.split else (rows.weights, rows.units)), rows.clustered),
        inp.binary)
    carried, masks = carry(ranked, e_codes, inp.similarity, n_carry)
    family = len(carried) if o.split else n_scored  # fixed before the estimate part is looked at
    sums = None  # weighted 0/1 with rows as units: the carried slices counted in shared passes
    if e_design is not None and e_design.additive and inp.binary and carried:
        sums = counted_sums(carried, e_codes, n_levels, e_y, e_design.wt.weights)
    ests = estimate(carried, masks, e_y, binary=inp.binary, direction=inp.direction,
                    confidence_level=inp.confidence_level, interval=o.interval, family=family,
                    rng=inp.rng, ranked=o.split, design=e_design, sums=sums)
    worse = listed(ests, masks, e_y, binary=inp.binary, direction=inp.direction,
                   confidence_level=inp.confidence_level, top=o.top, design=e_design, sums=sums)
    found = tuple(
        make_slice(rank, carried[k], ests[k], enc, label, inp.confidence_level, inp.binary)
        for rank, k in enumerate(worse, start=1)
    )
    alpha = 1.0 - inp.confidence_level
    significant = sum(s.q_value <= alpha for s in found)
    all_design = None if rows.weights is None else Basis(
        rows.y, Weighting(rows.weights, rows.units, rows.clustered), inp.binary)
    overall = overall_estimate(rows.y, inp.binary, inp.confidence_level, all_design)
    notes = list(enc.notes)
    if not found:
        notes.append(f"no slice with at least {min_rows} rows is worse than the rest")
    elif not significant:
        notes.append(CANDIDATES_NOTE.format(alpha=f"{alpha:g}"))
    settings = {
        "depth": o.depth, "min_rows": min_rows, "top": o.top, "max_share": o.max_share,
        "bins": o.bins, "split": o.split, "carried": len(carried), "search_level": level,
        "estimate_share": ESTIMATE_SHARE if o.split else 0.0,
        "confidence_level": inp.confidence_level, "interval": o.interval,
        "n_resamples": N_RESAMPLES if o.interval == "bootstrap" else None,
        "similarity": inp.similarity, "columns": list(enc.names),
        "outcome": "binary" if inp.binary else "real",
        "slices_scored": n_scored, "slices_not_pruned": n_candidates,
        "multiplicity": "slices carried to the estimate part" if o.split
        else "every slice scored during the search",
    }
    if e_design is not None:  # a plain design adds no key
        settings["units"] = "clusters" if rows.clustered else (
            "rows" if rows.source is None else "rows (membership copies together)")
        if rows.clustered:
            settings["clusters_estimated"] = int(len(np.unique(e_design.wt.units)))
    return SliceFindings(
        metric=label, direction=inp.direction, overall=overall, family=int(family),
        significant=int(significant), selected=not o.split,
        search_rows=n_search, estimate_rows=int(base_est.sum()), base_rows=n_base, found=found,
        notes=tuple(notes), settings=settings,
    )


def _per_base(values, source, n_base):
    """Per base row, the value of its copies (copies of one row share their unit)."""
    if source is None:
        return values
    out = np.empty(n_base, dtype=values.dtype)
    out[source] = values
    return out


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
