"""The results of a flip test (:class:`FlipFindings` of :class:`FlipRow` and :class:`FlipSlice`) and
the plain-language sentences that state them."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import pandas as pd
from scipy import stats as _sps

from ..stats import Estimate, wilson
from ..values import json_number, report_level

__all__ = ["FlipFindings", "FlipRow", "FlipSlice", "DIRECT_FLIP_CAUTION", "SCREEN_CAUTION"]

DIRECT_FLIP_CAUTION = (
    "A direct flip changes only the protected attribute, all else equal: it measures the model's "
    "direct dependence on that input, not disparate impact. A model that never reads the attribute "
    "can still treat groups very differently through features that stand in for it (see the "
    "transport and twins modes and the group metrics)."
)
SCREEN_CAUTION = (
    "These figures are a statistical screen, not a legal finding; defer to counsel, local law and "
    "licensed practice."
)
_TWIN_CONTROL_KEYS = ("control_rate", "matched_rate", "excess", "excess_to_favorable",
                      "excess_to_unfavorable", "excess_score_change")
_PLACEBO_KEYS = ("placebo_rate", "excess")
_JUDGED_WHAT = {"direct": "flip rate", "transport": "excess over the placebo",
                "twins": "excess over own-group twins"}


@dataclass(frozen=True)
class FlipSlice:
    """Where flips concentrate: one slice of the ``from`` group.

    Attributes
    ----------
    predicates : tuple of dict
        ``{"column", "op", "value"}`` as the shared encoder (:func:`probe.encode.encode_columns`)
        writes them: op ``"=="`` (a level), ``"in"`` (a numeric bin ``[low, high)``, None for an
        open end), ``"not in"`` (the ``other`` level: value the named levels) or ``"missing"``.
    label : str
        The encoder's labels of the predicates joined by ``" and "`` (:func:`probe.bins.conjunction`).
    rows : int
    flip_rate : Estimate
    """

    predicates: tuple
    label: str
    rows: int
    flip_rate: Estimate

    def to_dict(self) -> dict:
        return {"predicates": [dict(p) for p in self.predicates], "label": self.label,
                "rows": self.rows, "flip_rate": self.flip_rate.to_dict()}


@dataclass(frozen=True)
class FlipRow:
    """One ``(from, to)`` pair of one mode.

    Attributes
    ----------
    attribute, mode : str
    from_, to : object
        The source and target levels (``"from"`` in the report).
    rows : int
        Rows of the source group (non-missing attribute).
    flip_rate, to_favorable, to_unfavorable : Estimate
        Shares of the source group's decisions that change, that become favourable, that become
        unfavourable (Wilson; transport: Wilson on the effective number of rows, the bootstrap's
        design effect taken out, ``"wilson-design-effect"``). For twins: the share whose decision
        differs from most of their twins', and the two directions ("to favourable": the twins'
        decision is favourable and theirs is not).
    mean_score_change : Estimate
        Mean of counterfactual minus actual score (twins: twins' mean score minus own), t interval.
    max_score_change : float
        The largest absolute score change.
    impossible : bool
        The target level is unknown to the model; nothing was scored and the estimates are NaN.
    moved : tuple of str
        The columns changed (the attribute when it is an input, plus any proxies moved).
    by_slice : tuple of FlipSlice
    sentence : str
        The finding in plain language.
    control_rate : Estimate or None
        Twins only: the share of the same people whose decision differs from most of their ``k``
        nearest twins in their *own* group (themselves excluded), on a pool of the same size as the
        cross-group one (Wilson). None for the other modes, or when the group is too small.
    matched_rate : Estimate or None
        Twins only: the cross-group share on the size-matched pool (equal to ``flip_rate`` unless
        the other group was larger and was subsampled; Wilson).
    excess : Estimate or None
        Transport: ``flip_rate`` minus ``placebo_rate``, with a bootstrap standard error over both
        groups and the re-estimated maps (``"bootstrap-normal"``). Twins: the mean per-person
        paired difference of the cross-group (matched) and own-group flip indicators, with a
        half-sample standard error over people and re-drawn pools and a t quantile
        (``"half-sample-t"``). The part of the flips attributable to the group; None for direct
        rows, and when no control could be formed.
    excess_to_favorable, excess_to_unfavorable : Estimate or None
        Twins only: ``excess`` by direction (same method).
    excess_score_change : Estimate or None
        Twins only: mean of (cross-group twins' mean score − own-group twins' mean score).
    twin_pool : int or None
        Twins only: the number of candidate twins each search draws from (both pools).
    placebo_rate : Estimate or None
        Transport only: the flip rate of mapping the source group onto a random part of itself with
        the same proxies and machinery (the attribute unchanged), interval as ``flip_rate``; None
        when the group is too small to split.
    weight : float or None
        Under a non-plain design: the source group's weighted total (row weights, times membership
        probabilities for an attribute known that way); None for a plain sample.
    clusters : int or None
        With clusters: the clusters holding the source group's rows; else None.
    excess_se, excess_df : float
        The standard error of ``excess`` and the degrees of freedom of its quantile (``inf``: the
        normal), so :meth:`judged_at` can give the interval at any level; not in :meth:`to_dict`.
    """

    attribute: str
    mode: str
    from_: object
    to: object
    rows: int
    flip_rate: Estimate
    to_favorable: Estimate
    to_unfavorable: Estimate
    mean_score_change: Estimate
    max_score_change: float
    impossible: bool
    moved: tuple
    by_slice: tuple
    sentence: str
    control_rate: Estimate | None = None
    matched_rate: Estimate | None = None
    excess: Estimate | None = None
    excess_to_favorable: Estimate | None = None
    excess_to_unfavorable: Estimate | None = None
    excess_score_change: Estimate | None = None
    twin_pool: int | None = None
    placebo_rate: Estimate | None = None
    weight: float | None = None
    clusters: int | None = None
    excess_se: float = field(default=math.nan, compare=False, repr=False)
    excess_df: float = field(default=math.inf, compare=False, repr=False)

    @property
    def judged_what(self) -> str:
        """What :meth:`judged_at` estimates: ``"flip rate"`` (direct, and transport when no proxy
        moved: no map, so no placebo), ``"excess over the placebo"`` (transport), ``"excess over
        own-group twins"`` (twins)."""
        if self.mode == "transport" and set(self.moved) <= {self.attribute}:
            return _JUDGED_WHAT["direct"]
        return _JUDGED_WHAT[self.mode]

    def judged_at(self, confidence_level: float) -> Estimate | None:
        """The estimate a policy judges, with its two-sided interval at ``confidence_level``.

        Direct (and transport with no proxy moved): the flip rate (Wilson); transport and twins:
        ``excess`` (its standard error and quantile, :func:`spread_interval`). At the report's
        level it is exactly the interval the row shows. None when the target level is impossible
        or no control or placebo could be formed.
        """
        if self.impossible:
            return None
        if self.judged_what == _JUDGED_WHAT["direct"]:
            n_eff = self.flip_rate.n_effective
            if n_eff is not None:  # a weighted rate: Wilson on its effective counts
                e = wilson(self.flip_rate.value * n_eff, n_eff, confidence_level=confidence_level)
                return Estimate(self.flip_rate.value, e.low, e.high, e.method, n_eff)
            return wilson(round(self.flip_rate.value * self.rows), self.rows,
                          confidence_level=confidence_level)
        if self.excess is None:
            return None
        return spread_interval(self.excess.value, self.excess_se, self.excess_df,
                               confidence_level, self.excess.method)

    def to_dict(self) -> dict:
        out = {
            "attribute": self.attribute,
            "mode": self.mode,
            "from": report_level(self.from_),
            "to": report_level(self.to),
            "rows": self.rows,
            "flip_rate": self.flip_rate.to_dict(),
            "to_favorable": self.to_favorable.to_dict(),
            "to_unfavorable": self.to_unfavorable.to_dict(),
            "mean_score_change": self.mean_score_change.to_dict(),
            "max_score_change": json_number(self.max_score_change),
            "impossible": self.impossible,
            "moved": list(self.moved),
            "by_slice": [s.to_dict() for s in self.by_slice],
            "sentence": self.sentence,
        }
        if self.weight is not None:
            out["weight"] = json_number(self.weight)
        if self.clusters is not None:
            out["clusters"] = self.clusters
        if self.mode == "twins":  # the own-group control; None when it could not be formed
            for name in _TWIN_CONTROL_KEYS:
                e = getattr(self, name)
                out[name] = None if e is None else e.to_dict()
            out["twin_pool"] = self.twin_pool
        if self.mode == "transport":  # the placebo; None when the group is too small to split
            for name in _PLACEBO_KEYS:
                e = getattr(self, name)
                out[name] = None if e is None else e.to_dict()
        return out


@dataclass(frozen=True)
class FlipFindings:
    """The flip test of one attribute in one mode.

    Attributes
    ----------
    attribute, mode : str
    rows : tuple of FlipRow
        Empty when the mode does not apply (see ``notes``).
    notes : tuple of str
        What was not applicable, dropped, chosen or impossible (which proxies moved, what twins
        matched on, pools subsampled, interval caveats). Every row of :meth:`to_dict` carries them.
    caution : str
        :data:`DIRECT_FLIP_CAUTION` (direct mode) and :data:`SCREEN_CAUTION`.
    threshold : float
    favorable : bool
    extras : dict
        Mode-specific settings (the proxies moved; the twins' ``k``, features and control).
    not_applicable : str
        Why the mode does not apply (a direct flip of an attribute that is not a model input);
        empty when it applies. A test that does not apply has no rows and is never a pass.
    """

    attribute: str
    mode: str
    rows: tuple
    notes: tuple
    caution: str
    threshold: float = 0.5
    favorable: bool = True
    extras: dict = field(default_factory=dict, compare=False)
    not_applicable: str = ""

    @property
    def applies(self) -> bool:
        """False when the mode does not apply to this attribute (see :attr:`not_applicable`)."""
        return not self.not_applicable

    def to_dict(self) -> list:
        """The report's ``flips`` entries: one dict per row, each with this test's ``notes``.

        A mode that does not apply (a direct flip of a non-input) gives one row with
        ``applicable: false``, null estimates and the reason, never a made-up zero.
        """
        if not self.rows:
            return [{"attribute": self.attribute, "mode": self.mode, "from": None, "to": None,
                     "rows": 0, "flip_rate": None, "to_favorable": None, "to_unfavorable": None,
                     "mean_score_change": None, "applicable": False,
                     "sentence": self.not_applicable or "; ".join(self.notes)
                     or f"{self.mode} flips do not apply to `{self.attribute}`",
                     "notes": list(self.notes)}]
        return [{**r.to_dict(), "notes": list(self.notes)} for r in self.rows]

    def to_frame(self) -> pd.DataFrame:
        recs = []
        for r in self.rows:
            rec = {"attribute": r.attribute, "mode": r.mode, "from": r.from_, "to": r.to,
                   "rows": r.rows}
            for name in ("flip_rate", "to_favorable", "to_unfavorable", "mean_score_change"):
                e = getattr(r, name)
                rec[name], rec[name + "_low"], rec[name + "_high"] = e.value, e.low, e.high
            if r.mode != "direct":
                control = "control_rate" if r.mode == "twins" else "placebo_rate"
                for name in (control, "excess"):
                    e = getattr(r, name)
                    rec[name], rec[name + "_low"], rec[name + "_high"] = (
                        (math.nan,) * 3 if e is None else (e.value, e.low, e.high))
            rec["max_score_change"] = r.max_score_change
            rec["impossible"] = r.impossible
            rec["sentence"] = r.sentence
            recs.append(rec)
        return pd.DataFrame(recs)


def spread_interval(value, se, df, confidence_level, method) -> Estimate:
    """``value ± q · se`` within ``[-1, 1]``, ``q`` the two-sided t quantile with ``df`` degrees of
    freedom (the normal when ``df`` is infinite); NaN bounds when ``se`` is NaN."""
    q = float(_sps.t.ppf(0.5 + confidence_level / 2, df))
    return Estimate(float(value), max(value - q * se, -1.0), min(value + q * se, 1.0), method)


# ---------------------------------------------------------------------------------------------
# sentences


def pct(p) -> str:
    """A share as a percentage for a sentence: one decimal, two below 0.1 %, ``n/a`` for NaN."""
    if p is None or math.isnan(p):
        return "n/a"
    v = 100.0 * p
    return f"{v:.2f}" if 0 < v < 0.1 else f"{v:.1f}"


def _points(x) -> str:
    v = 100.0 * x
    text = f"{v:.2f}" if 0 < abs(v) < 0.1 else f"{v:.1f}"
    return "0.0" if text in ("-0.0", "-0.00") else text


def pair_sentence(attribute, mode, src, dst, ests, confidence_level, moved, is_input) -> str:
    """The finding of a direct or transport row (twins rows: :func:`twin_sentence`)."""
    flip, fav, unfav = ests
    cl = f"{100 * confidence_level:g} % interval {pct(flip.low)}–{pct(flip.high)} %"
    tail = f"({cl}): {pct(fav.value)} % become favourable, {pct(unfav.value)} % unfavourable."
    if mode == "direct":
        return (f"Changing {attribute} from {src} to {dst}, all else equal, changes "
                f"{pct(flip.value)} % of decisions {tail}")
    if mode == "transport":
        what = ", ".join(m for m in moved if m != attribute)
        if not what:  # the attribute is an input but no feature stands in for it enough to move
            lead = f"Changing {attribute} from {src} to {dst} (no proxy was moved)"
        elif is_input:
            lead = (f"Changing {attribute} from {src} to {dst} and moving its proxies ({what}) to "
                    f"where they sit in the {dst} group")
        else:
            lead = (f"Moving the proxies of {attribute} ({what}) of the {src} group to where they "
                    f"sit in the {dst} group ({attribute} itself is not a model input)")
        return f"{lead} changes {pct(flip.value)} % of decisions {tail}"
    return ""  # twins rows get their sentence from twin_sentence, which also states the control


def placebo_sentence(row: FlipRow, confidence_level) -> str:
    """What a transport row adds to :func:`pair_sentence`: the placebo and the excess over it."""
    if row.excess is None:
        return (f"The {row.from_} group is too small to split for a placebo, so this share also "
                "holds the flips that estimating the map causes by itself.")
    ex = row.excess
    sep = "–" if ex.low >= 0 else " to "
    return (f"Mapping the {row.from_} group onto a random part of itself the same way (a placebo) "
            f"changes {pct(row.placebo_rate.value)} %: an excess of {_points(ex.value)} points "
            f"({100 * confidence_level:g} % interval {_points(ex.low)}{sep}{_points(ex.high)}).")


def impossible_sentence(attribute, src, dst) -> str:
    return (f"Changing {attribute} from {src} to {dst} is not possible: the model has never "
            f"seen {dst} as a value of {attribute}, so these rows were not scored.")


def twin_sentence(row: FlipRow, k, subsampled, confidence_level) -> str:
    """The finding of a twins row: the raw share, the own-group control and the excess."""
    flip, fav, unfav = row.flip_rate, row.to_favorable, row.to_unfavorable
    cl = f"{100 * confidence_level:g} % interval"
    head = (f"Of the {row.from_} group, {pct(flip.value)} % get a different decision from most of "
            f"their {k} nearest twins in the {row.to} group ({cl} {pct(flip.low)}–"
            f"{pct(flip.high)} %)")
    tail = (f"For {pct(fav.value)} % the twins' decision is favourable and theirs is not, for "
            f"{pct(unfav.value)} % the reverse.")
    if row.excess is None:
        return (f"{head}. {tail} No own-group control could be formed (the {row.from_} group is "
                "too small), so this share also holds the disagreement found near the decision "
                "boundary whatever the group.")
    ex = row.excess
    sep = "–" if ex.low >= 0 else " to "
    sample = (f" ({pct(row.matched_rate.value)} % with twins drawn from {row.twin_pool:,} rows of "
              f"the {row.to} group, the size of the own-group pool)" if subsampled else "")
    return (f"{head}, against {pct(row.control_rate.value)} % for twins in their own group"
            f"{sample}: an excess of {_points(ex.value)} points ({cl} {_points(ex.low)}{sep}"
            f"{_points(ex.high)}). {tail}")

