"""What a slice search returns: each :class:`Slice` found and the :class:`SliceFindings`, with the
report's JSON objects, a table and one plain sentence per slice."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from ..bins import conjunction
from ..encode import Encoding
from ..stats import Estimate
from ..values import json_number
from .estimate import at_level

__all__ = ["CANDIDATES_NOTE", "Slice", "SliceFindings", "make_slice"]

CANDIDATES_NOTE = ("no slice reaches q <= {alpha}: the slices listed are candidates to look at, not "
                   "findings")


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
        One-sided, in the metric's bad direction (exact for 0/1 and {-1, 0, 1} outcomes, Welch
        otherwise).
    q_value : float
        Benjamini–Hochberg over ``SliceFindings.family`` hypotheses.
    score : float
        The search score on the search part: the lower confidence bound of the gap (bad direction)
        at the search level (Bonferroni over the slices the lattice can hold).
    search_rows : int
        Base rows of the search part in the slice.
    weight : float or None
        The weighted rows of the estimate part in the slice (None for a plain design); ``rows``
        then counts its rows of positive weight (a row of uncertain membership in the slice's
        group counts once) and ``share``, ``events`` and ``rate`` are weighted.
    clusters : int or None
        Clusters with a row in the slice on the estimate part (None without clusters).
    sentence : str
        The finding in one plain sentence.
    confidence_level : float
        The level of ``rate`` and ``gap`` (not in :meth:`to_dict`).
    basis : tuple
        What :meth:`rate_at` and :meth:`gap_at` recompute from (not in :meth:`to_dict`).
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
    weight: float | None = None
    clusters: int | None = None
    confidence_level: float = field(default=0.95, repr=False)
    basis: Any = field(default=None, repr=False, compare=False)
    binary: bool = field(default=True, repr=False)

    def rate_at(self, confidence_level: float) -> Estimate:
        """The slice's rate with its interval at ``confidence_level`` (the reported one at the
        report's level), by the same method."""
        return self._at(confidence_level)[0]

    def gap_at(self, confidence_level: float) -> Estimate:
        """The gap to the rest with its interval at ``confidence_level`` (the reported one at the
        report's level), by the same method."""
        return self._at(confidence_level)[1]

    def _at(self, level):
        if level == self.confidence_level:
            return self.rate, self.gap
        return at_level(self.basis, self.binary, level)

    def to_dict(self) -> dict:
        """The report's found-slice object."""
        return {
            "rank": self.rank,
            "predicates": [dict(p) for p in self.predicates],
            "label": self.label,
            "rows": self.rows,
            "share": json_number(self.share),
            "events": json_number(self.events),
            "rate": self.rate.to_dict(),
            "gap": self.gap.to_dict(),
            "effect_ratio": self.effect_ratio.to_dict(),
            "p_value": json_number(self.p_value),
            "q_value": json_number(self.q_value),
            "score": json_number(self.score),
            "search_rows": self.search_rows,
            **({} if self.weight is None else {"weight": json_number(self.weight)}),
            **({} if self.clusters is None else {"clusters": self.clusters}),
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
    family : int
        The number of hypotheses the q-values are taken over, fixed before the estimate part is
        looked at: the slices carried to the estimate stage (split), or every slice scored during
        the search (no split).
    significant : int
        Slices listed with a q-value at most ``1 - confidence_level``; when 0 the list holds
        candidates only.
    selected : bool
        True without a split: the listed estimates come from the rows that chose them and carry
        the selection effect (overstated).
    search_rows, estimate_rows, base_rows : int
        Base rows in the search part, in the estimate part, and in all.
    found : tuple of Slice
        The carried slices worse than the rest on the estimate part, smallest p-value first, at
        most ``top``.
    notes : tuple of str
        Columns left out and other remarks.
    settings : dict
        The options used (for the report's provenance).
    """

    metric: str
    direction: str
    overall: Estimate
    family: int
    significant: int
    selected: bool
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
            "family": self.family,
            "significant": self.significant,
            "selected": self.selected,
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


_WORDING = {
    "error": ("Rows with {s}", "misclassified"),
    "fpr": ("Among true negatives, rows with {s}", "wrongly flagged positive"),
    "fnr": ("Among true positives, rows with {s}", "missed"),
    "selection": ("Rows with {s}", "given the favourable decision"),
}


def make_slice(rank, cand, est, enc: Encoding, metric, confidence_level, binary) -> Slice:
    """The :class:`Slice` of a carried candidate ``(score, cols, levels, search_rows)`` and its
    estimates (a dict from :func:`probe.slices.estimate.estimate`)."""
    score, cols, levels, search_rows = cand
    columns = [enc.columns[c] for c in cols]
    preds = tuple(dict(col.predicates[lv]) for col, lv in zip(columns, levels))
    label = conjunction(col.labels[lv] for col, lv in zip(columns, levels))
    return Slice(
        rank=rank, predicates=preds, label=label, rows=est["rows"], share=float(est["share"]),
        events=est["events"], rate=est["rate"], gap=est["gap"], effect_ratio=est["ratio"],
        p_value=est["p"], q_value=est["q"], score=score, search_rows=search_rows,
        sentence=_sentence(label, metric, est, confidence_level, binary),
        weight=est.get("weight"), clusters=est.get("clusters"),
        confidence_level=confidence_level, basis=est["basis"], binary=binary,
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
