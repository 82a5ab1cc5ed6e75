"""Bins and conditions a person can read: quantile edges at the roundest number near each quantile,
and the one wording of a bin or a conjunction of conditions.

Used by the one encoder (:mod:`probe.encode`) for every numeric column it cuts into bins, by the
slice and flip reports for their conditions, and for binned protected attributes.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from .data import MAX_LEVELS, is_numeric
from .errors import DataError, PlanError

__all__ = ["quantile_edges", "fmt_number", "edge_texts", "bin_labels", "conjunction",
           "MAX_NUMERIC_GROUPS", "parse_bins", "group_view"]

_LABEL_DIGITS = 3  # significant figures of a cut-point in a label (more where two would collide)
_EDGE_WINDOW = 0.05  # an edge may move this share of a bin's rows (over the bins) to become round


def quantile_edges(srt: np.ndarray, bins: int) -> list[float]:
    """Edges cutting the sorted values ``srt`` into about ``bins`` equal-count bins ``[e_j, e_{j+1})``.

    Each edge is the roundest number within ``_EDGE_WINDOW / bins`` of its quantile's rank on either
    side; where that window holds a single tied value the edge goes just above it, so a heavily tied
    value keeps a bin of its own. No two edges fall in the same gap between values (no empty bin).
    """
    probs = np.arange(1, bins) / bins
    w = _EDGE_WINDOW / bins
    q = _sorted_quantile(srt, np.concatenate([probs, probs - w, probs + w]))
    q_mid, q_lo, q_hi = q.reshape(3, -1)
    edges = set()
    for mid, lo, hi in zip(q_mid, q_lo, q_hi):
        if hi <= lo:  # a tied value: the edge goes between it and the next value up
            j = np.searchsorted(srt, mid, side="right")
            if j >= len(srt):
                continue
            lo, hi = mid, srt[j]
        r = _round_edge(lo, hi)
        if srt[0] < r <= srt[-1]:
            edges.add(r)
    if not edges:  # cannot happen with two distinct values, kept for safety
        edges = {_round_edge(srt[0], srt[np.searchsorted(srt, srt[0], side="right")])}
    # two edges in the same gap between values would leave an empty bin: keep the first of them
    below = np.searchsorted(srt, sorted(edges), side="left")
    kept, last = [], 0
    for e, b in zip(sorted(edges), below):
        if last < b < len(srt):
            kept.append(e)
            last = b
    return kept


def _sorted_quantile(srt, q):
    """``np.quantile(srt, q)`` (its default, linear method) for an already sorted ``srt``, without
    the copy and partial sort it would make: the same index, weight and interpolation arithmetic
    (Hyndman & Fan's definition 7), so the same floats."""
    n = len(srt)
    virtual = (n - 1) * np.asarray(q, dtype=float)
    prev = np.floor(virtual)
    gamma = virtual - prev
    prev_i = np.clip(prev, 0, n - 1).astype(np.intp)
    next_i = np.clip(prev + 1, 0, n - 1).astype(np.intp)
    above = virtual >= n - 1
    prev_i[above] = next_i[above] = n - 1
    below = virtual < 0
    prev_i[below] = next_i[below] = 0
    a, b = srt[prev_i], srt[next_i]
    diff = b - a
    out = a + diff * gamma
    np.subtract(b, diff * (1 - gamma), out=out, where=gamma >= 0.5)
    return out


def _round_edge(below: float, edge: float) -> float:
    """The roundest number ``r`` with ``below < r <= edge``: any such ``r`` splits the rows alike.

    Tries multiples of ``10**k`` (then ``5`` and ``2`` times that) from coarse to fine and keeps the first
    that lands in ``(below, edge]``; the float actually returned is checked, not the decimal intended.
    """
    below, edge = float(below), float(edge)
    if edge == 0.0:
        return 0.0
    top = math.floor(math.log10(max(abs(edge), abs(below), 1e-300))) + 1
    for k in range(top, top - 18, -1):
        for mult in (10, 5, 2, 1):
            step = mult * 10.0 ** (k - 1)
            r = math.floor(edge / step) * step
            r = round(r, max(0, 2 - k))  # one digit more than the step needs, against float noise
            if below < r <= edge:
                return float(r) + 0.0
    return edge


def fmt_number(v: float, digits: int | None = None) -> str:
    """A number as a label shows it: thousands separators, no trailing zeros; with ``digits``, the
    fraction rounded to that many significant figures (the whole part is never rounded)."""
    v = float(v)
    if not math.isfinite(v):
        return str(v)
    if v != 0 and abs(v) < 1e-4:
        return f"{v:.{digits or 3}g}"
    if digits is not None and v != int(v):
        whole_digits = math.floor(math.log10(abs(v))) + 1 if abs(v) >= 1 else 0
        lead = 0 if abs(v) >= 1 else -math.floor(math.log10(abs(v))) - 1  # zeros after the point
        v = round(v, max(0, digits - whole_digits) + lead)
    if v == int(v) and abs(v) < 1e15:
        return f"{int(v):,}"
    text = np.format_float_positional(v, trim="-")
    whole, _, frac = text.partition(".")
    sign = "-" if whole.startswith("-") else ""
    whole = f"{int(whole.lstrip('-') or 0):,}"
    return f"{sign}{whole}.{frac}" if frac else f"{sign}{whole}"


def edge_texts(edges) -> list[str]:
    """The cut-points of one column as labels show them: three significant figures, more only where
    two edges would otherwise read the same."""
    for digits in range(_LABEL_DIGITS, 18):
        texts = [fmt_number(e, digits) for e in edges]
        if len(set(texts)) == len(texts):
            return texts
    return [fmt_number(e) for e in edges]


def bin_labels(name: str, edges) -> list[str]:
    """The label of each bin ``[e_j, e_{j+1})`` cut at ``edges`` (sorted): ``age < 25``,
    ``age in [25, 40)``, ``age >= 60``. Every numeric condition probe writes (slices, the flips'
    breakdown, binned protected attributes) is worded here."""
    texts = edge_texts(edges)
    if not texts:
        return [f"{name} (all values)"]
    out = [f"{name} < {texts[0]}"]
    out += [f"{name} in [{lo}, {hi})" for lo, hi in zip(texts[:-1], texts[1:])]
    return out + [f"{name} >= {texts[-1]}"]


def conjunction(labels) -> str:
    """Conditions that hold together, as one label: ``age < 25 and region = north``."""
    return " and ".join(labels)


# ---------------------------------------------------------------------------------------------
# numeric protected attributes: bands as groups

MAX_NUMERIC_GROUPS = 10
"""A numeric protected attribute with more distinct values than this must be binned (``bins``)."""

_BINS_FIX = ("bin it: --bins {a}=25:40:60 (edges) or --bins {a}=4 (quantile bins); plan: "
             "[data] bins = {{ {a} = [25, 40, 60] }} or {{ {a} = 4 }}")


def parse_bins(value, where: str = "data.bins") -> dict | None:
    """``bins`` in its plan form ``{column: edges or count}``, from the plan's table or the flag's
    ``A=25:40:60,B=4`` text (one edge: ``A=40:``): edges a strictly increasing tuple of finite
    numbers, a count an integer of at least 2 (quantile bins at round edges)."""
    if value is None or value == {} or value == "":
        return None
    if isinstance(value, str):
        value = [value]
    if isinstance(value, (list, tuple)):  # from the command line: "A=25:40:60,B=4" (repeatable)
        parsed = {}
        for entry in (e.strip() for v in value for e in str(v).split(",") if e.strip()):
            name, sep, spec = entry.partition("=")
            if not sep or not name.strip() or not spec.strip():
                raise PlanError(f"`{where}` entries are COLUMN=EDGES (25:40:60) or COLUMN=COUNT, "
                                f"got {entry!r}")
            try:
                nums = [float(t) for t in spec.split(":") if t.strip()]
            except ValueError:
                raise PlanError(f"`{where}`: {entry!r} holds something that is not a number") from None
            parsed[name.strip()] = nums if ":" in spec else (
                int(nums[0]) if nums[0].is_integer() else nums[0])
        value = parsed
    if not isinstance(value, dict):
        raise PlanError(f"`{where}` must be a table {{ column = [edges] or count }}, got {value!r}")
    out = {}
    for name, spec in value.items():
        if isinstance(spec, (list, tuple)):
            if not spec or not all(isinstance(e, (int, float)) and not isinstance(e, bool)
                                    and math.isfinite(e) for e in spec) \
                    or any(b <= a for a, b in zip(spec, spec[1:])):
                raise PlanError(f"`{where}.{name}` edges must be finite numbers in increasing "
                                f"order, got {list(spec)!r}")
            out[str(name)] = tuple(float(e) for e in spec)
        elif isinstance(spec, int) and not isinstance(spec, bool) and 2 <= spec <= 20:
            out[str(name)] = spec
        else:
            raise PlanError(f"`{where}.{name}` must be a list of edges or a number of quantile bins "
                            f"from 2 to 20, got {spec!r}")
    return out


def group_view(frame: pd.DataFrame, columns, bins: dict | None) -> pd.DataFrame:
    """``frame`` with each binned column of ``columns`` replaced by its bands (an ordered
    categorical of :func:`bin_labels`, missing kept missing), wherever that column is a group:
    groups, intersections, the flips' source groups, the proxies' target. ``frame`` itself is not
    modified. A numeric column of ``columns`` with more than :data:`MAX_NUMERIC_GROUPS` distinct
    values and no bins, or any other column with more than :data:`~probe.data.MAX_LEVELS`, is a
    :class:`~probe.errors.DataError` with the fix."""
    bins = bins or {}
    columns = list(dict.fromkeys(columns))
    stray = [b for b in bins if b not in columns]
    if stray:
        raise PlanError(f"`data.bins` names `{stray[0]}`, which is not a protected attribute or an "
                        "intersection column")
    banded = {}
    for name in columns:
        col = frame[name]
        if name in bins:
            if not is_numeric(col):
                raise DataError(f"`data.bins` bins `{name}`, which is not numeric")
            banded[name] = _bands(col, name, bins[name])
            used = pd.unique(banded[name][~pd.isna(banded[name])])
            if len(used) < 2:
                raise DataError(f"the bins of `{name}` put every row in one band "
                                f"({used[0] if len(used) else 'none'}), "
                                "so there is nothing to compare; choose edges inside the data's "
                                f"range ({col.min():g} to {col.max():g})")
        elif is_numeric(col) and col.nunique() > MAX_NUMERIC_GROUPS:
            raise DataError(f"protected attribute `{name}` is numeric with {col.nunique()} "
                            f"distinct values (more than {MAX_NUMERIC_GROUPS} groups); "
                            + _BINS_FIX.format(a=name))
        elif not is_numeric(col) and col.nunique() > MAX_LEVELS:
            raise DataError(f"protected attribute `{name}` has {col.nunique()} distinct values "
                            f"(at most {MAX_LEVELS} groups; that many look like an identifier "
                            "rather than a group): merge its levels first, or name another column")
    return frame.assign(**banded) if banded else frame


def _bands(col: pd.Series, name: str, spec) -> pd.Categorical:
    x = col.to_numpy(dtype=float, na_value=np.nan)
    present = ~np.isnan(x)
    if np.isinf(x[present]).any():
        raise DataError(f"column `{name}` has infinite values; replace them before binning it")
    srt = np.sort(x[present])
    if len(np.unique(srt)) < 2:
        raise DataError(f"protected attribute `{name}` has fewer than two values to bin")
    edges = list(spec) if isinstance(spec, tuple) else quantile_edges(srt, spec)
    codes = np.where(present, np.searchsorted(np.asarray(edges), np.where(present, x, 0.0),
                                              side="right"), -1)
    return pd.Categorical.from_codes(codes, categories=bin_labels(name, edges), ordered=True)
