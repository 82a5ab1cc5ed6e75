"""Group and intersectional metrics: rates with Wilson intervals, impact ratios and differences.

For each protected attribute, and for each requested intersection of columns, every observed group gets
its rows, share, selection rate (the favourable decision), error rate, TPR, FPR, FNR and PPV with Wilson
intervals; the impact ratio against the reference group; the statistical parity difference and the
equal opportunity difference against the same group (Newcombe intervals), and the gap in error rate,
FPR and FNR to it at any level (``GroupRow.gap_at``, Newcombe, for the policy); and the four-fifths flag
(impact ratio strictly below 0.8, 29 CFR 1607.4(D) and its Q&A 11, where exactly 0.80 is not flagged).
Groups under 2 % of the rows are flagged ``small`` and still reported; they are not eligible as the
reference group unless every group is small. Rows whose value is missing are counted as unknown.

The reference group is the one the user fixes for the attribute, or else the most-favoured group
(highest observed selection rate). A fixed reference gets the MOVER-R interval of the ratio of two
rates. A reference chosen from the data is itself an estimate: what the impact ratio then estimates is
the group's rate over the *truly* most-favoured group's, ``min(1, min_h r_g / r_h)`` over the eligible
groups ``h``. Its interval is ``[min(1, min_h L_gh), min(1, min_h U_gh)]`` with MOVER-R intervals
``(L_gh, U_gh)`` of every pairwise ratio at the Bonferroni level over the attribute's pairs, so that all
pairwise intervals, and with them every group's interval, hold together at the stated level (the
MOVER-R interval of ``r_h / r_g`` is the reciprocal of that of ``r_g / r_h``, so one per pair suffices).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field, replace
from typing import Mapping, Sequence

import numpy as np
import pandas as pd

from .data import close_names
from .design import Design
from .design_data import resolve_design
from .errors import DataError, DegenerateWarning
from .group_cells import group_cells, level_text
from .metrics import FOUR_FIFTHS, as_favorable
from .stats import Estimate, newcombe_interval, ratio_interval, wilson_interval
from .values import json_number

__all__ = ["GAP_RATES", "GroupRow", "GroupMetrics", "group_metrics", "four_fifths_flag"]
_RATES = ("selection_rate", "error_rate", "tpr", "fpr", "fnr", "ppv")
#: The rates whose gap to the reference group :meth:`GroupRow.gap_at` gives (the policy's gap rules).
GAP_RATES = ("error_rate", "fpr", "fnr")


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
        Selection rate over the reference group's: MOVER-R (``"mover-wilson"``) against a fixed
        reference; against a reference chosen from the data, the minimum over the eligible groups of
        the pairwise MOVER-R limits at the Bonferroni level over the pairs, capped at 1
        (``"mover-wilson-min-bonferroni"``; the reference's own row gets one too). See the module notes.
    reference_group : str
        The fixed reference, else the most-favoured group (highest selection rate among groups that
        are not small).
    reference_fixed : bool
        Whether the reference was fixed by the user (True) or chosen from the data (False).
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
    reference_fixed: bool = False
    weight: float | None = None
    clusters: int | None = None
    rate_clusters: dict = field(default_factory=dict, repr=False, compare=False)
    _basis: tuple = field(default=(), repr=False, compare=False)
    _gap_counts: dict = field(default_factory=dict, repr=False, compare=False)

    def gap_at(self, rate: str, confidence_level: float) -> Estimate:
        """The group's ``rate`` (one of :data:`GAP_RATES`) minus the reference group's, with
        Newcombe's interval at ``confidence_level`` (two-sided; the method of :attr:`spd`).

        The reference against itself is exactly 0 (``"reference"``); NaN when either base is empty.
        A reference chosen from the data is taken as given here (it is chosen on selection rates).
        """
        x, m, x_ref, m_ref, rho = self._gap_counts[rate]
        if self.group == self.reference_group:
            return Estimate(0.0, 0.0, 0.0, "reference") if m > 0 else Estimate(
                math.nan, math.nan, math.nan, "reference")
        if m == 0 or m_ref == 0:
            return Estimate(math.nan, math.nan, math.nan, "newcombe")
        low, high = newcombe_interval(x, m, x_ref, m_ref, confidence_level=confidence_level,
                                      rho=rho)
        return Estimate(x / m - x_ref / m_ref, float(low), float(high), "newcombe",
                        None if self.weight is None else float(min(m, m_ref)))

    def gap_rows(self, rate: str) -> int:
        """The fewer rows of the two bases the gap in ``rate`` compares (its group's and the
        reference group's: label-negatives for FPR, label-positives for FNR, all rows for errors)."""
        _, m, _, m_ref, _ = self._gap_counts[rate]
        return int(min(m, m_ref))

    def impact_ratio_at(self, confidence_level: float) -> Estimate:
        """:attr:`impact_ratio` with its interval at ``confidence_level`` (two-sided), by the same method.

        At the report's own level it is exactly :attr:`impact_ratio`.
        """
        return replace(_impact_estimate(*self._basis, confidence_level),
                       n_effective=self.impact_ratio.n_effective)

    def to_dict(self) -> dict:
        out = {"attribute": self.attribute, "group": self.group, "rows": self.rows,
               "share": json_number(self.share), "small": self.small}
        for name in _RATES:
            out[name] = getattr(self, name).to_dict()
        out.update(impact_ratio=self.impact_ratio.to_dict(), reference_group=self.reference_group,
                   reference_fixed=self.reference_fixed, four_fifths_flag=self.four_fifths_flag, spd=self.spd.to_dict(),
                   eod=self.eod.to_dict())
        if self.weight is not None:
            out["weight"] = json_number(self.weight)
        if self.clusters is not None:
            out["clusters"] = self.clusters
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
                   "reference_fixed": row.reference_fixed, "four_fifths_flag": row.four_fifths_flag}
            for name in (*_RATES, "impact_ratio", "spd", "eod"):
                est = getattr(row, name)
                rec[name], rec[f"{name}_low"], rec[f"{name}_high"] = est.value, est.low, est.high
            records.append(rec)
        return pd.DataFrame.from_records(records)

    def flagged(self) -> tuple[GroupRow, ...]:
        """Groups whose impact ratio is below four-fifths."""
        return tuple(r for r in self.rows if r.four_fifths_flag)


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
    reference: Mapping[str, object] | None = None,
    sample_weight=None,
    design: Design | None = None,
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
    reference : mapping, optional
        The reference group per attribute (``{"sex": "F"}``; an intersection by its joined name and
        level, ``{"race & sex": "b & F"}``). Attributes left out take the most-favoured group, and their
        impact-ratio intervals allow for that choice.
    sample_weight : array_like, optional
        Row weights (non-negative, not all zero), one per row of ``frame``; short for
        ``design=Design(weights=...)``.
    design : Design, optional
        Row weights, clusters and attributes known as membership probabilities
        (:mod:`probe.design`): rates are then weighted, every interval is computed on the
        effective counts, and each estimate records its ``n_effective``.

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
    design = resolve_design(sample_weight, design, len(frame))
    specs = [(a, (a,)) for a in attributes] + [(" & ".join(c), tuple(c)) for c in intersections]
    reference = {str(k): level_text(v) for k, v in (reference or {}).items()}
    for key in reference:
        if key not in {name for name, _ in specs}:
            names = [name for name, _ in specs]
            raise DataError(f"a reference group is given for `{key}`, which is not a reported "
                            f"attribute (reported: {', '.join(names) or 'none'})"
                            + close_names(key, names))
    rows: list[GroupRow] = []
    unknown: dict[str, int] = {}
    notes: list[str] = []
    for name, columns in specs:
        missing = [c for c in columns if c not in frame.columns and c not in design.membership]
        if missing:
            raise DataError(f"attribute column `{missing[0]}` is not in the data")
        cells = group_cells(frame, columns, y_true, y_pred, favorable, design)
        if cells is None:
            unknown[name] = len(frame)
            notes.append(f"`{name}` has no rows with a known value")
            continue
        unknown[name] = cells.unknown
        labels = cells.labels
        fixed = reference.get(name)
        if fixed is not None and fixed not in labels:
            raise DataError(f"reference group `{fixed}` of `{name}` is not an observed level "
                            f"(levels: {', '.join(labels)})" + close_names(fixed, labels))
        rows.extend(_attribute_rows(name, cells, min_share, confidence_level, notes, fixed))
    return GroupMetrics(tuple(rows), unknown, favorable, confidence_level, tuple(notes))


def _impact_estimate(x, n, i, ref, candidates, fixed, rho, confidence_level) -> Estimate:
    """Group ``i``'s impact ratio and its interval (the module notes give the method); ``rho``:
    the correlation of group ``i``'s selection-rate estimate with every group's (None: all 0, as
    without a design)."""
    x, n = np.asarray(x, dtype=float), np.asarray(n, dtype=float)
    rho = np.zeros(len(x)) if rho is None else np.asarray(rho, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        value = (x[i] / n[i]) / (x[ref] / n[ref]) if n[i] > 0 and x[ref] > 0 else np.nan
    if fixed or len(candidates) < 2:  # one eligible group: the reference is not a choice
        if i == ref:  # compared with itself: exactly 1, not an interval of two samples
            return Estimate(float(value), 1.0, 1.0, "reference")
        low, high = ratio_interval(x[i], n[i], x[ref], n[ref], confidence_level=confidence_level,
                                   rho=rho[ref])
        return Estimate(float(value), float(low), float(high), "mover-wilson")
    others = np.array([h for h in candidates if h != i])
    k, c = len(x), len(candidates)
    pairs = c * (k - 1) - c * (c - 1) // 2  # unordered pairs with at least one eligible group
    level = 1.0 - (1.0 - confidence_level) / pairs
    lows, highs = ratio_interval(np.full(len(others), x[i]), np.full(len(others), n[i]), x[others],
                                 n[others], confidence_level=level, rho=rho[others])
    # a group with no favourable decision cannot be the truly most-favoured one: its ratio is left out
    ok = x[others] > 0
    cap = 1.0 if i in candidates else np.inf
    if not ok.any() or np.isnan(value):
        return Estimate(float(value), np.nan, np.nan, "mover-wilson-min-bonferroni")
    low = min(cap, float(np.min(lows[ok])))
    high = min(cap, float(np.min(highs[ok])))
    return Estimate(float(value), low, high, "mover-wilson-min-bonferroni")


def _attribute_rows(name, cells, min_share, confidence_level, notes, fixed=None):
    labels, pairs = cells.labels, cells.pairs
    weight = cells.weight
    share = weight / weight.sum()
    small = share < min_share
    cl = confidence_level
    est = {}
    for key in _RATES:
        x, m = pairs[key]
        low, high = wilson_interval(x, m, confidence_level=cl)
        with np.errstate(invalid="ignore", divide="ignore"):
            value = np.where(m > 0, x / np.where(m > 0, m, 1), np.nan)
        est[key] = (value, low, high)
        for i in np.flatnonzero(m == 0):
            notes.append(f"`{name}` = {labels[i]}: {key} undefined (no rows in its base)")
    sel_x, n = pairs["selection_rate"]
    sel_rate = est["selection_rate"][0]
    eligible = np.flatnonzero(~small) if (~small).any() else np.arange(len(labels))
    if fixed is not None:
        ref = labels.index(fixed)
    else:
        ref = int(eligible[np.argmax(sel_rate[eligible])])  # first of equal rates: level order
    sp_low, sp_high = newcombe_interval(sel_x, n, np.full_like(n, sel_x[ref], dtype=float),
                                        np.full_like(n, n[ref], dtype=float), confidence_level=cl,
                                        rho=cells.correlation("selection_rate", ref))
    ox, on = pairs["opportunity"]
    eo_low, eo_high = newcombe_interval(ox, on, np.full_like(on, ox[ref], dtype=float),
                                        np.full_like(on, on[ref], dtype=float), confidence_level=cl,
                                        rho=cells.correlation("opportunity", ref))
    ref_rate = sel_rate[ref]
    if ref_rate == 0:
        notes.append(f"`{name}`: no group receives the favourable decision; impact ratios undefined")
        warnings.warn(f"impact ratio undefined for `{name}`: reference rate is zero",
                      DegenerateWarning, stacklevel=3)
    with np.errstate(invalid="ignore", divide="ignore"):
        opp = np.where(on > 0, ox / np.where(on > 0, on, 1), np.nan)
    counts = (tuple(float(v) for v in sel_x), tuple(float(v) for v in n))
    candidates = tuple(int(h) for h in eligible)
    eff = cells.effective
    rho = {k: cells.correlation(k, ref) for k in GAP_RATES}
    # every pair's selection-rate correlation (the impact ratio against a chosen reference reads all)
    sel_rho = None if not eff else np.column_stack(
        [cells.correlation("selection_rate", h) for h in range(len(labels))])

    def n_eff(m, i, j=None):  # two samples: the smaller effective size
        if not eff:
            return None
        return float(m[i]) if j is None else float(min(m[i], m[j]))

    out = []
    for i, label in enumerate(labels):
        rates = {k: Estimate(float(v[i]), float(lo[i]), float(hi[i]), "wilson",
                             n_eff(pairs[k][1], i)) for k, (v, lo, hi) in est.items()}
        if i == ref:  # compared with itself: exactly 0, not an interval of two samples
            sp_low[i], sp_high[i] = 0.0, 0.0
            eo_low[i] = eo_high[i] = 0.0 if np.isfinite(opp[i]) else np.nan
        basis = (*counts, i, ref, candidates, fixed is not None,
                 None if sel_rho is None else tuple(sel_rho[i]))
        gap_counts = {k: (float(pairs[k][0][i]), float(pairs[k][1][i]), float(pairs[k][0][ref]),
                          float(pairs[k][1][ref]), float(rho[k][i])) for k in GAP_RATES}
        impact = _impact_estimate(*basis, cl)
        out.append(GroupRow(
            attribute=name,
            group=label,
            rows=int(round(float(cells.rows[i]))),
            share=float(share[i]),
            small=bool(small[i]),
            impact_ratio=replace(impact, n_effective=n_eff(n, i, ref)),
            reference_group=labels[ref],
            reference_fixed=fixed is not None,
            _basis=basis,
            _gap_counts=gap_counts,
            four_fifths_flag=four_fifths_flag(cells.selected[i], weight[i], cells.selected[ref],
                                              weight[ref]),
            spd=Estimate(float(sel_rate[i] - ref_rate), float(sp_low[i]), float(sp_high[i]),
                         "reference" if i == ref else "newcombe", n_eff(n, i, ref)),
            eod=Estimate(float(opp[i] - opp[ref]), float(eo_low[i]), float(eo_high[i]),
                         "reference" if i == ref else "newcombe", n_eff(on, i, ref)),
            weight=float(weight[i]) if eff else None,
            clusters=None if cells.clusters is None else int(cells.clusters[i]),
            rate_clusters={} if cells.clusters is None else {
                k: int(cells.rate_clusters(k)[i]) for k in ("selection_rate", *GAP_RATES)},
            **rates,
        ))
    return out
