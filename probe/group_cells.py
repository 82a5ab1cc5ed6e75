"""The counts behind every group rate, under the holdout's design.

For one attribute or intersection, :func:`group_cells` returns per observed group the numerator and
denominator of each rate the groups report (selection, error, TPR, FPR, FNR, PPV, and the
favourable decision among rows whose label merits it) as *effective counts* (:mod:`probe.design`):
the counts themselves for a plain sample, else the counts that carry the design-based variance of
the weighted rate, so that Wilson, Newcombe and MOVER-R apply unchanged. A protected attribute
known as probabilities counts each row in each group with its probability as weight.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .counting import cell_keys
from .design import Design, effective_counts, expand_rows
from .encode import attribute_codes
from .metrics import favorable_decision

__all__ = ["Cells", "RATE_BASES", "group_cells"]

#: Each rate as (numerator, base) of the per-row indicators below.
RATE_BASES = {
    "selection_rate": ("sel", "all"),
    "error_rate": ("err", "all"),
    "tpr": ("tp", "pos"),
    "fpr": ("fp", "neg"),
    "fnr": ("fn", "pos"),
    "ppv": ("tp", "pp"),
    "opportunity": ("opp", "merit"),
}


@dataclass(frozen=True)
class Cells:
    """The groups of one attribute or intersection.

    Attributes
    ----------
    labels : list of str
        Each group's level (``"x & y"`` for an intersection).
    pairs : dict of str to (x, m)
        Per rate of :data:`RATE_BASES`, the effective numerators and bases (arrays over groups).
    weight : ndarray
        Each group's weighted total (its rows when unweighted).
    rows : ndarray
        Each group's rows: the rows in it, or the sum of their membership probabilities.
    selected : ndarray
        The weighted favourable decisions (the impact ratio's point estimate and the four-fifths
        flag read ``selected / weight``).
    unknown : int
        Rows with a missing value (in no group).
    clusters : ndarray or None
        Clusters with a row in each group (None without clusters).
    effective : bool
        Whether the counts are effective counts (the design is not plain).
    """

    labels: list
    pairs: dict
    weight: np.ndarray
    rows: np.ndarray
    selected: np.ndarray
    unknown: int
    clusters: np.ndarray | None
    effective: bool
    _cells: dict = None  # rate -> CellEffective

    def rate_clusters(self, rate: str) -> np.ndarray:
        """Per group, the clusters with a row in the base of ``rate`` (with clusters only)."""
        return self._cells[rate].clusters

    def correlation(self, rate: str, ref: int) -> np.ndarray:
        """Per group, the correlation of its ``rate`` estimate with group ``ref``'s: 0 for
        independent groups (a plain design, or groups sharing no unit)."""
        return self._cells[rate].correlation(ref)


def _indicators(y_true, y_pred, favorable) -> dict:
    pos, neg = y_true, ~y_true
    return {"all": np.ones(len(y_true), dtype=bool), "pos": pos, "neg": neg, "pp": y_pred,
            "sel": favorable_decision(y_pred, favorable), "err": y_pred != y_true,
            "tp": pos & y_pred, "fp": neg & y_pred, "fn": pos & ~y_pred,
            "merit": pos if favorable else neg,
            "opp": (pos & y_pred) if favorable else (neg & ~y_pred)}


def level_text(value) -> str:
    if isinstance(value, (float, np.floating)) and float(value).is_integer():
        return str(int(value))
    return str(value)


def group_cells(frame: pd.DataFrame, columns, y_true, y_pred, favorable: bool,
                design: Design | None = None) -> Cells | None:
    """The effective counts of every rate in every observed group of ``columns`` (None when no
    row has a known value)."""
    design = design or Design()
    members = [design.membership.get(c) for c in columns]
    parts = [None if m is not None else attribute_codes(frame[c]) for c, m in zip(columns, members)]
    codes = [None if p is None else p[0] for p in parts]
    names = [list(m.levels) if m is not None else list(p[1]) for m, p in zip(members, parts)]
    codes, source, w, prob = expand_rows(codes, members, design.weights)
    known = np.ones(len(codes[0]), dtype=bool)
    for c in codes:
        known &= c >= 0
    # rows with a missing value (a membership column has none), each counted once, copies or not
    unknown = int(np.count_nonzero(~known) if source is None else len(np.unique(source[~known])))
    if w is not None and not np.all(w > 0):  # a row of weight 0 is in no group
        live = w > 0
        codes = [c[live] for c in codes]
        source = (np.arange(len(live)) if source is None else source)[live]
        w, prob = w[live], None if prob is None else prob[live]
    key, cells = cell_keys(codes, [len(v) for v in names])
    if len(cells) == 0:
        return None
    k = len(cells)
    ind = _indicators(np.asarray(y_true, dtype=bool), np.asarray(y_pred, dtype=bool), favorable)
    if source is not None:
        ind = {name: v[source] for name, v in ind.items()}
    plain = design.plain
    clustered = design.cluster is not None
    units = None
    if not plain:
        units = design.units(len(frame))
        units = units if source is None else units[source]

    def counts(num, base):
        eff = effective_counts(np.where(ind[base], key, -1), k, ind[num], w, units,
                               clustered=clustered, plain=plain)
        return eff

    every = counts("sel", "all")
    pairs, effs = {}, {}
    for rate, (num, base) in RATE_BASES.items():
        eff = every if (num, base) == ("sel", "all") else counts(num, base)
        pairs[rate] = (eff.x_eff, eff.n_eff)
        effs[rate] = eff
    labels = [" & ".join(level_text(names[j][code]) for j, code in enumerate(cell))
              for cell in cells]
    if prob is not None:
        rows = np.bincount(key[key >= 0], weights=prob[key >= 0], minlength=k)
    else:
        rows = every.rows
    return Cells(labels, pairs, every.weight, rows, every.events, unknown, every.clusters,
                 not plain, effs)
