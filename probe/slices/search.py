"""The search end to end on validated inputs: split, search, carry, estimate, assemble."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..encode import Encoding
from ..errors import PlanError
from ..options import SliceOptions
from .bounds import search_level
from .estimate import N_RESAMPLES, carry, estimate, rate_estimates
from .findings import CANDIDATES_NOTE, SliceFindings, make_slice
from .lattice import Lattice
from .listing import listed

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


def run(enc: Encoding, label: str, inp: Inputs) -> SliceFindings:
    """Split the base rows, search one part, estimate the carried slices on the other, and list
    those worse than the rest there, by the estimate part's evidence."""
    o = inp.options
    codes = [c.codes for c in enc.columns]
    if inp.base_idx is not None:
        codes = _take(codes, inp.base_idx)
    n_levels = [c.n_levels for c in enc.columns]
    n_base = len(inp.y)
    if o.split:
        est_mask = _split_mask(inp)
        est_rows, search_rows = np.flatnonzero(est_mask), np.flatnonzero(~est_mask)
        *s_codes, s_y = _take(codes + [inp.y], search_rows)
        del search_rows
    else:
        est_mask = np.ones(n_base, dtype=bool)
        s_codes, s_y = codes, inp.y
    n_search = len(s_y)
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
        prune=o.split,
    ).run()
    del s_codes, s_y
    e_codes = _Rows(codes, est_rows) if o.split else codes
    e_y = _take([inp.y], est_rows)[0] if o.split else inp.y
    carried, masks = carry(ranked, e_codes, inp.similarity, n_carry)
    family = len(carried) if o.split else n_scored  # fixed before the estimate part is looked at
    rows = estimate(carried, masks, e_y, binary=inp.binary, direction=inp.direction,
                    confidence_level=inp.confidence_level,
                    interval=o.interval, family=family, rng=inp.rng, ranked=o.split)
    worse = listed(rows, masks, e_y, binary=inp.binary, direction=inp.direction,
                   confidence_level=inp.confidence_level, top=o.top)
    found = tuple(
        make_slice(rank, carried[k], rows[k], enc, label, inp.confidence_level, inp.binary)
        for rank, k in enumerate(worse, start=1)
    )
    alpha = 1.0 - inp.confidence_level
    significant = sum(s.q_value <= alpha for s in found)
    y = inp.y
    overall = rate_estimates(np.array([y.sum()]), np.array([float(n_base)]),
                             np.array([(y * y).sum()]), inp.binary, inp.confidence_level,
                             (float(y.min()), float(y.max())) if len(y) else None)
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
    return SliceFindings(
        metric=label, direction=inp.direction, overall=overall[0], family=int(family),
        significant=int(significant), selected=not o.split,
        search_rows=n_search, estimate_rows=int(est_mask.sum()), base_rows=n_base, found=found,
        notes=tuple(notes), settings=settings,
    )


def _split_mask(inp: Inputs) -> np.ndarray:
    """Seeded stratified split of the base rows: True = estimate part."""
    n = len(inp.y)
    est = np.zeros(n, dtype=bool)
    if inp.strata is None:  # a simple random split: the draw of one stratum holding every row
        est[inp.rng.permutation(n)[: int(round(ESTIMATE_SHARE * n))]] = True
        return est
    strata = inp.strata
    for stratum in range(int(strata.max()) + 1 if len(strata) else 0):
        rows = np.flatnonzero(strata == stratum)
        take = int(round(ESTIMATE_SHARE * len(rows)))
        est[rows[inp.rng.permutation(len(rows))[:take]]] = True
    return est


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
