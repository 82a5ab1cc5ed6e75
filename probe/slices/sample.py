"""The rows the slice search runs on under a sampling design, and their split by unit.

A :class:`~probe.design.Design` brings three things to the search (:mod:`probe.design`):

- **row weights**: every count becomes a weighted count (rates, shares, the bound and the scores);
  rows of weight 0 carry nothing and are left out of the base rows first;
- **clusters**: the split into the search and estimate parts is drawn by cluster, so a cluster's
  rows are all on one side and the estimate part stays independent of the rows searched; the
  estimate part's effective counts use the clusters as units;
- **membership probabilities**: an attribute known as probabilities is a slice column like any
  other (``race = b``): the rows are expanded (:func:`probe.design.expand_rows`), a row once per
  group of positive probability with weight ``w * pi`` and its original row (or its cluster) as its
  unit, so the copies of one row are split together and counted as one unit.

A plain design (:attr:`~probe.design.Design.plain`) takes the unweighted path: no weights, the
label-stratified split of rows, the exact tests.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..design import Design, Membership, expand_rows
from ..encode import EncodedColumn, Encoding

__all__ = ["Sample", "membership_column", "sample_rows", "split_mask"]


def membership_column(m: Membership) -> EncodedColumn:
    """An attribute known as probabilities as an encoded column: one level per group, worded as
    any column's level (``race = b``). Its codes are placeholders (every row 0, read-only): the
    search replaces them by the expanded rows' groups (:func:`sample_rows`)."""
    codes = np.zeros(len(m.probs), dtype=np.uint8 if len(m.levels) <= 255 else np.uint16)
    codes.setflags(write=False)
    labels = tuple(f"{m.attribute} = {lv}" for lv in m.levels)
    preds = tuple({"column": m.attribute, "op": "==", "value": lv} for lv in m.levels)
    return EncodedColumn(m.attribute, "membership", codes, labels, preds)


@dataclass(frozen=True)
class Sample:
    """The base rows as the search sees them (expanded when a slice column is a membership).

    Attributes
    ----------
    codes : list of ndarray
        Per encoded column, the codes of the rows.
    y : ndarray
        The outcome of the rows.
    weights : ndarray or None
        The rows' weights (``w * pi`` for copies); None for a plain design.
    units : ndarray or None
        Each row's unit for the variance (its cluster, or its original row for copies); None
        when the rows are the units.
    clustered : bool
        The units are clusters.
    source : ndarray or None
        The base row each row copies (None when nothing was expanded).
    """

    codes: list
    y: np.ndarray
    weights: np.ndarray | None
    units: np.ndarray | None
    clustered: bool
    source: np.ndarray | None

    def take(self, rows):
        """The rows ``rows`` of the weights and units (None stays None)."""
        return tuple(None if a is None else a[rows] for a in (self.weights, self.units))


def sample_rows(enc: Encoding, codes, y, design: Design, base_idx) -> Sample:
    """The search's rows: ``codes`` and ``y`` over the base rows, the membership columns of
    ``enc`` filled by expansion, with the weights and units of a design that is not plain."""
    base = (lambda a: a) if base_idx is None else (lambda a: a[base_idx])
    members = [design.membership.get(c.name) if c.kind == "membership" else None
               for c in enc.columns]
    plain = design.plain
    weights = None if design.weights is None else base(design.weights)
    cluster = None if design.cluster is None else base(design.cluster)
    source = None
    if any(m is not None for m in members):
        members = [None if m is None else _base_membership(m, base) for m in members]
        codes, source, weights, _ = expand_rows(codes, members, weights)
        dtypes = [c.codes.dtype for c in enc.columns]
        codes = [c.astype(t, copy=False) for c, t in zip(codes, dtypes)]
        y = y[source]
        if cluster is not None:
            cluster = cluster[source]
    if plain:
        return Sample(list(codes), y, None, None, False, source)
    if weights is None:
        weights = np.ones(len(y))
    units = cluster if cluster is not None else source
    return Sample(list(codes), y, weights, units, cluster is not None, source)


def _base_membership(m: Membership, base) -> Membership:
    return Membership(m.attribute, m.levels, m.columns, base(m.probs))


def split_mask(n: int, strata, cluster, share: float, rng) -> np.ndarray:
    """Seeded split of the ``n`` base rows: True = estimate part.

    Without clusters a row split, stratified by ``strata`` when given; with clusters (``cluster``
    over the base rows) a simple random split of the clusters, so each cluster's rows are on one
    side (a stratum per label would cut clusters whose rows differ in label)."""
    est = np.zeros(n, dtype=bool)
    if cluster is not None:
        ids, inv = np.unique(cluster, return_inverse=True)
        chosen = np.zeros(len(ids), dtype=bool)
        chosen[rng.permutation(len(ids))[: int(round(share * len(ids)))]] = True
        return chosen[inv.reshape(-1)]
    if strata is None:  # a simple random split: the draw of one stratum holding every row
        est[rng.permutation(n)[: int(round(share * n))]] = True
        return est
    for stratum in range(int(strata.max()) + 1 if len(strata) else 0):
        rows = np.flatnonzero(strata == stratum)
        take = int(round(share * len(rows)))
        est[rows[rng.permutation(len(rows))[:take]]] = True
    return est
