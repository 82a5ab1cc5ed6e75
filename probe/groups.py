"""Group and intersectional metrics: rates with Wilson intervals, impact ratios and differences.

For each protected attribute, and for each requested intersection of columns, every observed group gets
its rows, share, selection rate (the favourable decision), error rate, TPR, FPR, FNR and PPV with Wilson
intervals; the impact ratio against the most-favoured group (MOVER-R interval); the statistical parity
difference and the equal opportunity difference against the same group (Newcombe intervals); and the
four-fifths flag (impact ratio strictly below 0.8, 29 CFR 1607.4(D) and its Q&A 11, where exactly 0.80
is not flagged). Groups under 2 % of the rows are flagged ``small`` and still reported; they are not
eligible as the reference group unless every group is small. Rows whose value is missing are counted
as unknown.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
import pandas as pd

from .counting import CellCounts, count_cells
from .encode import attribute_codes
from .errors import DataError, DegenerateWarning
from .metrics import FOUR_FIFTHS, as_favorable, favorable_decision
from .stats import Estimate, newcombe_interval, ratio_interval, wilson_interval

__all__ = ["GroupRow", "GroupMetrics", "group_metrics", "four_fifths_flag"]
_RATES = ("selection_rate", "error_rate", "tpr", "fpr", "fnr", "ppv")


@dataclass(frozen=True)
class GroupRow:
    """One group of one attribute (or intersection).

    Attributes
    ----------
    attribute : str
        The column, or ``"a & b"`` for an intersection.
    group : str
        The level, or ``"x & y"``.
    rows, share, small
        Row count, share of all rows with a known value, and whether the share is under ``min_share``.
    selection_rate, error_rate, tpr, fpr, fnr, ppv : Estimate
        Wilson intervals. TPR/FNR are over label-positives, FPR over label-negatives, PPV over
        positive decisions; ``selection_rate`` is the share given the favourable decision.
    impact_ratio : Estimate
        Selection rate over the reference group's (MOVER-R).
    reference_group : str
        The most-favoured group (highest selection rate among groups that are not small).
    four_fifths_flag : bool
        impact ratio strictly below four-fifths, decided on the counts (:func:`four_fifths_flag`).
    spd : Estimate
        Statistical parity difference: selection rate minus the reference's (Newcombe).
    eod : Estimate
        Equal opportunity difference: the favourable-decision rate among rows whose label merits it
        (TPR when the favourable decision is positive, TNR otherwise) minus the reference's (Newcombe).
    """

    attribute: str
    group: str
    rows: int
    share: float
    small: bool
    selection_rate: Estimate
    error_rate: Estimate
    tpr: Estimate
    fpr: Estimate
    fnr: Estimate
    ppv: Estimate
    impact_ratio: Estimate
    reference_group: str
    four_fifths_flag: bool
    spd: Estimate
    eod: Estimate

    def to_dict(self) -> dict:
        out = {"attribute": self.attribute, "group": self.group, "rows": self.rows,
               "share": self.share, "small": self.small}
        for name in _RATES:
            out[name] = getattr(self, name).to_dict()
        out.update(impact_ratio=self.impact_ratio.to_dict(), reference_group=self.reference_group,
                   four_fifths_flag=self.four_fifths_flag, spd=self.spd.to_dict(),
                   eod=self.eod.to_dict())
        return out


@dataclass(frozen=True)
class GroupMetrics:
    """All groups of all requested attributes and intersections.

    Attributes
    ----------
    rows : tuple of GroupRow
        Ordered by attribute (as requested), then group level.
    unknown : dict
        Per attribute (or intersection), rows whose value is missing (not in any group).
    favorable : bool
        Whether the positive decision is the favourable one.
    confidence_level : float
    notes : tuple of str
        Degenerate cases (e.g. a group with no label-positives has no TPR).
    """

    rows: tuple[GroupRow, ...]
    unknown: dict = field(default_factory=dict)
    favorable: bool = True
    confidence_level: float = 0.95
    notes: tuple[str, ...] = ()

    def to_dict(self) -> list[dict]:
        """The report's ``groups`` list."""
        return [row.to_dict() for row in self.rows]

    def to_frame(self) -> pd.DataFrame:
        """One row per group; estimates spread into ``<name>``, ``<name>_low``, ``<name>_high``."""
        records = []
        for row in self.rows:
            rec = {"attribute": row.attribute, "group": row.group, "rows": row.rows,
                   "share": row.share, "small": row.small, "reference_group": row.reference_group,
                   "four_fifths_flag": row.four_fifths_flag}
            for name in (*_RATES, "impact_ratio", "spd", "eod"):
                est = getattr(row, name)
                rec[name], rec[f"{name}_low"], rec[f"{name}_high"] = est.value, est.low, est.high
            records.append(rec)
        return pd.DataFrame.from_records(records)

    def flagged(self) -> tuple[GroupRow, ...]:
        """Groups whose impact ratio is below four-fifths."""
        return tuple(r for r in self.rows if r.four_fifths_flag)


def _level_text(value) -> str:
    if isinstance(value, (float, np.floating)) and float(value).is_integer():
        return str(int(value))
    return str(value)


_SUMS = ("sel", "err", "pos", "neg", "tp", "fp", "pp", "tn")


def _per_row(y_true, y_pred, favorable) -> dict:
    """The per-row 0/1 values whose sums per group make every rate."""
    pos, neg = y_true, ~y_true
    return {"sel": favorable_decision(y_pred, favorable), "err": y_pred != y_true, "pos": pos,
            "neg": neg, "tp": pos & y_pred, "fp": neg & y_pred, "pp": y_pred, "tn": neg & ~y_pred}


def _rates(counts: CellCounts, favorable: bool) -> dict:
    c = {"n": counts.n, **{k: counts.sums[k] for k in _SUMS}}
    c["fn"] = c["pos"] - c["tp"]
    # the favourable decision among rows whose label merits it (TPR, or TNR when favourable = negative)
    c["opp_x"] = c["tp"] if favorable else c["tn"]
    c["opp_n"] = c["pos"] if favorable else c["neg"]
    return c


def four_fifths_flag(x, n, x_ref, n_ref) -> bool:
    """Impact ratio strictly below :data:`~probe.metrics.FOUR_FIFTHS`, decided on the counts:
    ``5 x n_ref < 4 x_ref n``.

    Comparing the float ratio with 0.8 flags 60/100 against 75/100, whose ratio is exactly 4/5
    (0.6 / 0.75 = 0.7999999999999999 in floating point); the rule does not flag exactly 0.80.
    """
    return bool(FOUR_FIFTHS.denominator * x * n_ref < FOUR_FIFTHS.numerator * x_ref * n)


def group_metrics(
    frame: pd.DataFrame,
    y_true,
    y_pred,
    *,
    attributes: Sequence[str],
    intersections: Sequence[Sequence[str]] = (),
    favorable: bool = True,
    confidence_level: float = 0.95,
    min_share: float = 0.02,
) -> GroupMetrics:
    """Rates, impact ratios and differences for every group of every attribute and intersection.

    Parameters
    ----------
    frame : pandas.DataFrame
        Holds the attribute columns (other columns are ignored).
    y_true, y_pred : array_like of bool
        Label-positive and positive-decision indicators, one per row of ``frame``.
    attributes : sequence of str
        Columns reported one at a time.
    intersections : sequence of sequences of str, default=()
        Column combinations reported as joint groups (``"a & b"``).
    favorable : bool, default=True
        True when the positive decision is the favourable outcome (approve, hire, fast-track);
        False when it is unfavourable (flag as fraud, decline).
    confidence_level : float, default=0.95
    min_share : float, default=0.02
        Groups with a smaller share of the known rows are flagged ``small``.

    Returns
    -------
    GroupMetrics

    Examples
    --------
    >>> import pandas as pd
    >>> f = pd.DataFrame({"g": ["a"] * 80 + ["b"] * 40})
    >>> sel = [True] * 48 + [False] * 32 + [True] * 12 + [False] * 28
    >>> m = group_metrics(f, sel, sel, attributes=["g"])
    >>> round(m.rows[1].impact_ratio.value, 2), m.rows[1].four_fifths_flag
    (0.5, True)
    """
    y_true = np.asarray(y_true, dtype=bool)
    y_pred = np.asarray(y_pred, dtype=bool)
    if y_true.shape != (len(frame),) or y_pred.shape != (len(frame),):
        raise DataError(
            f"`y_true` and `y_pred` must have one value per row ({len(frame)}), "
            f"got shapes {y_true.shape} and {y_pred.shape}"
        )
    favorable = as_favorable(favorable)
    per_row = _per_row(y_true, y_pred, favorable)
    specs = [(a, (a,)) for a in attributes] + [(" & ".join(c), tuple(c)) for c in intersections]
    rows: list[GroupRow] = []
    unknown: dict[str, int] = {}
    notes: list[str] = []
    for name, columns in specs:
        missing = [c for c in columns if c not in frame.columns]
        if missing:
            raise DataError(f"attribute column `{missing[0]}` is not in the data")
        parts = [attribute_codes(frame[col]) for col in columns]
        codes = [p[0] for p in parts]
        counts = count_cells(codes, values=per_row, n_levels=[len(p[1]) for p in parts])
        known = np.ones(len(frame), dtype=bool)
        for c in codes:
            known &= c >= 0
        unknown[name] = int((~known).sum())
        if len(counts) == 0:
            notes.append(f"`{name}` has no rows with a known value")
            continue
        labels = [" & ".join(_level_text(parts[j][1][code]) for j, code in enumerate(cell))
                  for cell in counts.cells]
        c = _rates(counts, favorable)
        rows.extend(_attribute_rows(name, labels, c, min_share, confidence_level, notes))
    return GroupMetrics(tuple(rows), unknown, favorable, confidence_level, tuple(notes))


def _attribute_rows(name, labels, c, min_share, confidence_level, notes):
    n = c["n"]
    share = n / n.sum()
    small = share < min_share
    cl = confidence_level
    pairs = {
        "selection_rate": (c["sel"], n),
        "error_rate": (c["err"], n),
        "tpr": (c["tp"], c["pos"]),
        "fpr": (c["fp"], c["neg"]),
        "fnr": (c["fn"], c["pos"]),
        "ppv": (c["tp"], c["pp"]),
    }
    est = {}
    for key, (x, m) in pairs.items():
        low, high = wilson_interval(x, m, confidence_level=cl)
        with np.errstate(invalid="ignore", divide="ignore"):
            value = np.where(m > 0, x / np.where(m > 0, m, 1), np.nan)
        est[key] = (value, low, high)
        for i in np.flatnonzero(m == 0):
            notes.append(f"`{name}` = {labels[i]}: {key} undefined (no rows in its base)")
    sel_rate = est["selection_rate"][0]
    eligible = np.flatnonzero(~small) if (~small).any() else np.arange(len(labels))
    ref = int(eligible[np.argmax(sel_rate[eligible])])  # first of equal rates: level order
    xr, nr = c["sel"][ref], n[ref]
    ir_low, ir_high = ratio_interval(c["sel"], n, np.full_like(n, xr, dtype=float),
                                     np.full_like(n, nr, dtype=float), confidence_level=cl)
    sp_low, sp_high = newcombe_interval(c["sel"], n, np.full_like(n, xr, dtype=float),
                                        np.full_like(n, nr, dtype=float), confidence_level=cl)
    ox, on = c["opp_x"], c["opp_n"]
    eo_low, eo_high = newcombe_interval(ox, on, np.full_like(on, ox[ref], dtype=float),
                                        np.full_like(on, on[ref], dtype=float), confidence_level=cl)
    ref_rate = sel_rate[ref]
    if ref_rate == 0:
        notes.append(f"`{name}`: no group receives the favourable decision; impact ratios undefined")
        warnings.warn(f"impact ratio undefined for `{name}`: reference rate is zero",
                      DegenerateWarning, stacklevel=3)
    with np.errstate(invalid="ignore", divide="ignore"):
        opp = np.where(on > 0, ox / np.where(on > 0, on, 1), np.nan)
        ir = sel_rate / ref_rate if ref_rate > 0 else np.full(len(labels), np.nan)
    out = []
    for i, label in enumerate(labels):
        rates = {k: Estimate(float(v[i]), float(lo[i]), float(hi[i]), "wilson")
                 for k, (v, lo, hi) in est.items()}
        if i == ref:  # compared with itself: exactly 1 and 0, not an interval of two samples
            ir_low[i], ir_high[i], sp_low[i], sp_high[i] = 1.0, 1.0, 0.0, 0.0
            eo_low[i] = eo_high[i] = 0.0 if np.isfinite(opp[i]) else np.nan
        out.append(GroupRow(
            attribute=name,
            group=label,
            rows=int(n[i]),
            share=float(share[i]),
            small=bool(small[i]),
            impact_ratio=Estimate(float(ir[i]), float(ir_low[i]), float(ir_high[i]),
                                  "reference" if i == ref else "mover-wilson"),
            reference_group=labels[ref],
            four_fifths_flag=four_fifths_flag(c["sel"][i], n[i], xr, nr),
            spd=Estimate(float(sel_rate[i] - ref_rate), float(sp_low[i]), float(sp_high[i]),
                         "reference" if i == ref else "newcombe"),
            eod=Estimate(float(opp[i] - opp[ref]), float(eo_low[i]), float(eo_high[i]),
                         "reference" if i == ref else "newcombe"),
            **rates,
        ))
    return out
