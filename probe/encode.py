"""Turning data columns into small integer codes with readable predicate labels.

Each candidate slice column becomes one array of small unsigned integers (``uint8`` up to 255 levels,
``uint16`` beyond), and every code has a predicate ``{"column", "op", "value"}`` and a label a person
can read:

- **numeric** columns are cut at quantiles into ``bins`` intervals (default 5). Edges are data values,
  so ties collapse bins instead of making empty ones, and each edge is then moved down to the
  roundest number that still separates exactly the same rows (``25`` rather than ``24.83``). Bins are
  ``[low, high)``: ``age in [25, 34)``, ``income >= 81,200``, ``utilisation < 0.21``. A numeric column
  with no more distinct values than ``bins`` keeps its values as levels (``children = 2``).
- **categorical** columns (strings, pandas categoricals, objects) keep their frequent levels (at
  least ``min_level_share`` of the rows, at most ``max_levels`` of them, most frequent first); the rest
  fall into one ``other`` level (predicate op ``"not in"`` with the named levels as its value).
- **boolean** columns keep ``False`` and ``True``.
- Any column with missing values gets a ``missing`` level (op ``"missing"``, ``x is missing``).

Columns that cannot make a useful slice are left out with a note in :attr:`Encoding.notes`: a
constant column; an identifier (a string column with a distinct value on nearly every row, or an
integer column with a distinct value on every row spread over a dense range, like a row number);
a date/time column.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .bins import bin_labels, fmt_number, quantile_edges
from .data import attribute_levels, close_names, is_numeric
from .errors import DataError, PlanError

__all__ = ["EncodedColumn", "Encoding", "encode_columns", "attribute_codes"]

_NEAR_UNIQUE = 0.5  # a string column with distinct values on more than half its rows identifies rows


@dataclass(frozen=True)
class EncodedColumn:
    """One column as integer codes.

    Attributes
    ----------
    name : str
        The column's name in the frame.
    kind : str
        ``"numeric"``, ``"categorical"`` or ``"boolean"``.
    codes : ndarray of uint8 or uint16
        The level of every row (read-only).
    labels : tuple of str
        A readable label per level, e.g. ``"age in [25, 34)"``.
    predicates : tuple of dict
        Per level ``{"column", "op", "value"}``; op ``"=="`` (a level), ``"in"`` (a numeric bin,
        value ``[low, high)`` with ``None`` for an open end), ``"not in"`` (the ``other`` level,
        value the named levels) or ``"missing"``.
    """

    name: str
    kind: str
    codes: np.ndarray
    labels: tuple
    predicates: tuple

    @property
    def n_levels(self) -> int:
        """How many levels (codes ``0 .. n_levels - 1``)."""
        return len(self.labels)


@dataclass(frozen=True)
class Encoding:
    """The encoded slice columns of a frame.

    Attributes
    ----------
    columns : tuple of EncodedColumn
        In the frame's column order.
    n_rows : int
        Rows of the frame.
    notes : tuple of str
        One line per column left out, and why.
    """

    columns: tuple
    n_rows: int
    notes: tuple

    @property
    def names(self) -> tuple:
        """The encoded columns' names."""
        return tuple(c.name for c in self.columns)

    def __getitem__(self, name: str) -> EncodedColumn:
        for c in self.columns:
            if c.name == name:
                return c
        raise KeyError(name)

    def to_frame(self) -> pd.DataFrame:
        """One row per level: column, code, label, op, value and how many rows it holds."""
        rows = []
        for c in self.columns:
            counts = np.bincount(c.codes, minlength=c.n_levels)
            for code, (label, pred) in enumerate(zip(c.labels, c.predicates)):
                rows.append(
                    {"column": c.name, "code": code, "label": label, "op": pred["op"],
                     "value": pred["value"], "rows": int(counts[code])}
                )
        return pd.DataFrame(rows, columns=["column", "code", "label", "op", "value", "rows"])


def encode_columns(
    frame: pd.DataFrame,
    *,
    columns=None,
    exclude=(),
    bins: int = 5,
    max_levels: int = 20,
    min_level_share: float = 0.01,
) -> Encoding:
    """Encode the slice columns of ``frame`` as small integer codes with readable labels.

    Parameters
    ----------
    frame : pandas.DataFrame
        Not modified.
    columns : sequence of str, optional
        The columns to encode (default: all of them).
    exclude : sequence of str, default=()
        Columns never to encode (the label and score columns, for one).
    bins : int, default=5
        Quantile bins per numeric column (fewer when ties collapse them).
    max_levels : int, default=20
        Most named levels kept per categorical column; the rest go to ``other``.
    min_level_share : float, default=0.01
        A categorical level needs at least this share of the rows to be named.

    Returns
    -------
    Encoding

    Raises
    ------
    DataError
        A name in ``columns`` or ``exclude`` is not a column (the message suggests close matches).
    PlanError
        An option is out of range.

    Examples
    --------
    >>> import pandas as pd
    >>> frame = pd.DataFrame({"age": [20, 30, 40, 50, 60, 70] * 5, "ref": [f"r{i}" for i in range(30)]})
    >>> enc = encode_columns(frame, bins=2)
    >>> enc["age"].labels
    ('age < 50', 'age >= 50')
    >>> enc.notes
    ('`ref` left out: it identifies rows (30 distinct values in 30 rows)',)
    """
    if not isinstance(frame, pd.DataFrame):
        raise DataError(f"slice columns must come as a pandas DataFrame, got {type(frame).__name__}")
    if not (isinstance(bins, (int, np.integer)) and bins >= 2):
        raise PlanError(f"`bins` must be an integer of at least 2, got {bins!r}")
    if not (isinstance(max_levels, (int, np.integer)) and 1 <= max_levels <= 250):
        raise PlanError(f"`max_levels` must be an integer from 1 to 250, got {max_levels!r}")
    if not 0.0 <= min_level_share < 1.0:
        raise PlanError(f"`min_level_share` must lie in [0, 1), got {min_level_share!r}")
    names = [str(c) for c in frame.columns]
    twice = sorted({n for n in names if names.count(n) > 1})
    if twice:
        raise DataError("the data has more than one column named "
                        + ", ".join(f"`{n}`" for n in twice) + "; rename them first")
    lookup = dict(zip(names, frame.columns))
    exclude = [exclude] if isinstance(exclude, str) else list(exclude)
    _check_known(exclude, names, "exclude")
    if columns is None:
        wanted = names
    else:
        wanted = [columns] if isinstance(columns, str) else list(columns)
        _check_known(wanted, names, "columns")
        wanted = list(dict.fromkeys(str(c) for c in wanted))
    dropped = {str(c) for c in exclude}
    encoded, notes = [], []
    for name in wanted:
        if name in dropped:
            continue
        col, note = _encode_one(name, frame[lookup[name]], bins, max_levels, min_level_share)
        if col is None:
            notes.append(note)
        else:
            encoded.append(col)
    return Encoding(tuple(encoded), len(frame), tuple(notes))


def attribute_codes(series: pd.Series) -> tuple[np.ndarray, tuple]:
    """A protected attribute's exact levels as codes: every observed value is a group, none merged.

    The levels and their order are :func:`probe.data.attribute_levels`' (category order, else sorted);
    missing values get code ``-1`` (in no group). No cap on the number of levels: an intersection of
    several attributes may have many groups.

    Returns
    -------
    codes : ndarray of int64
    levels : tuple
        The observed values, in code order.
    """
    levels = attribute_levels(series, str(series.name), max_levels=None)
    codes = pd.Index(levels, dtype=object).get_indexer(pd.Index(series.to_numpy(), dtype=object)) \
        if len(levels) else np.full(len(series), -1)
    return np.asarray(codes, dtype=np.int64), tuple(_py(v) for v in levels)


def _check_known(asked, names, option):
    unknown = [str(c) for c in asked if str(c) not in names]
    if not unknown:
        return
    hints = [f"`{u}`{close_names(u, names)}" for u in unknown]
    raise DataError(
        f"`{option}` names {'a column' if len(unknown) == 1 else 'columns'} not in the data: "
        f"{', '.join(hints)}; the columns are {', '.join(f'`{n}`' for n in names[:20])}"
        + (" …" if len(names) > 20 else "")
    )


def _encode_one(name, series, bins, max_levels, min_level_share):
    if pd.api.types.is_datetime64_any_dtype(series) or pd.api.types.is_timedelta64_dtype(series):
        return None, f"`{name}` left out: date/time columns are not sliced (derive a feature from it)"
    values = series.array if isinstance(series.dtype, pd.CategoricalDtype) else series.to_numpy()
    missing = pd.isna(series).to_numpy()
    n, n_missing = len(series), int(missing.sum())
    numeric = is_numeric(series)
    if numeric:  # one sort serves the distinct count, the quantiles and the edges
        if isinstance(values, np.ndarray) and values.dtype.kind in "iuf":
            x = values  # no copy: only read
        else:  # nullable extension dtypes
            x = np.asarray(series.to_numpy(dtype=float, na_value=np.nan))
        srt = (x[~missing] if n_missing else x).astype(float)  # a copy, sorted in place
        srt.sort()
        if len(srt) and not (np.isfinite(srt[0]) and np.isfinite(srt[-1])):
            bad = np.flatnonzero(np.isinf(np.asarray(x, dtype=float)))
            raise DataError(f"column `{name}` has {len(bad)} infinite values "
                            f"(first at row {bad[0]}); replace them or leave the column out")
        n_unique = int(np.count_nonzero(srt[1:] != srt[:-1])) + 1 if len(srt) else 0
    elif isinstance(values, pd.Categorical):  # counted on the codes, every category (even unused)
        cat_counts = _category_counts(values.codes, len(values.categories))
        n_unique = int(np.count_nonzero(cat_counts))
        n_present = n - n_missing
    else:
        present = series[~missing] if n_missing else series
        n_unique = int(present.nunique())
        n_present = len(present)
    if n_missing == n:
        return None, f"`{name}` left out: every value is missing"
    if n_unique + (n_missing > 0) <= 1:
        return None, f"`{name}` left out: it is constant"
    if pd.api.types.is_bool_dtype(series):
        return _levels(name, "boolean", values, missing, [False, True]), None
    if numeric:
        if pd.api.types.is_integer_dtype(series) and n_unique == len(srt) and len(srt) >= 20:
            span = float(srt[-1] - srt[0]) + 1.0
            if span <= 2.0 * len(srt):
                return None, (f"`{name}` left out: it identifies rows "
                              f"({n_unique} distinct integers in {len(srt)} rows)")
        if n_unique <= bins:
            uniq = srt[np.r_[True, srt[1:] != srt[:-1]]]
            return _levels(name, "numeric", x, missing, uniq.tolist()), None
        return _bin(name, x, missing, bins, srt), None
    if n_unique > max_levels and n_unique > _NEAR_UNIQUE * n_present:
        return None, (f"`{name}` left out: it identifies rows "
                      f"({n_unique} distinct values in {n_present} rows)")
    if isinstance(values, pd.Categorical):
        counts = list(zip(values.categories, cat_counts.tolist()))
    else:
        counts = list(present.value_counts(sort=True).items())
    # most frequent first; ties broken by the level's text so the encoding is deterministic
    order = sorted(counts, key=lambda kv: (-kv[1], str(kv[0])))
    named = [lv for lv, c in order[:max_levels] if c >= min_level_share * n]
    if not named:
        named = [order[0][0]]
    return _levels(name, "categorical", values, missing, named, other=len(named) < n_unique), None


def _py(v):
    return v.item() if isinstance(v, np.generic) else v


def _code_dtype(n_levels):
    return np.uint8 if n_levels <= 255 else np.uint16


def _levels(name, kind, values, missing, levels, other=False):
    """Codes for explicit levels (+ other + missing)."""
    levels = [_py(v) for v in levels]
    has_missing = bool(missing.any())
    n_levels = len(levels) + bool(other) + has_missing
    # one pass: position among the named levels, len(levels) for the rest and for missing values
    codes = _positions(values, levels, _code_dtype(n_levels))
    labels, preds = [], []
    for lv in levels:
        labels.append(f"{name} = {_fmt_level(lv)}")
        preds.append({"column": name, "op": "==", "value": lv})
    if other:
        labels.append(f"{name} = other")
        preds.append({"column": name, "op": "not in", "value": list(levels)})
    if has_missing:
        codes[missing] = len(labels)
        labels.append(f"{name} is missing")
        preds.append({"column": name, "op": "missing", "value": None})
    codes.setflags(write=False)
    return EncodedColumn(name, kind, codes, tuple(labels), tuple(preds))


def _positions(values, levels, dtype):
    """Each value's position among ``levels`` (``len(levels)`` if absent), as ``dtype``.

    Categoricals map their categories once and index by code; booleans and a few numeric levels are
    compared directly (no float copy); other values are hashed.
    """
    absent = len(levels)
    if isinstance(values, pd.Categorical):
        lookup = pd.Index(levels, dtype=object).get_indexer(pd.Index(values.categories, dtype=object))
        lookup = np.append(np.where(lookup >= 0, lookup, absent), absent).astype(dtype)
        return _chunked_take(lookup, values.codes)  # code -1 (missing) wraps to the last entry
    if values.dtype.kind == "b" and levels == [False, True]:
        return values.astype(dtype)
    if values.dtype.kind in "biuf" and len(levels) <= 16:
        codes = np.full(len(values), absent, dtype=dtype)
        for j, lv in enumerate(levels):
            codes[values == lv] = j
        return codes
    if values.dtype.kind in "biuf":
        lv = np.asarray(levels, dtype=float)
        order = np.argsort(lv)
        xv = values.astype(float)
        idx = np.minimum(np.searchsorted(lv[order], xv), len(lv) - 1)
        pos = np.where(lv[order][idx] == xv, order[idx], absent)
    else:
        pos = pd.Index(levels, dtype=object).get_indexer(pd.Index(values, dtype=object))
        pos[pos < 0] = absent
    return pos.astype(dtype)


_CHUNK = 1 << 16  # rows at a time where a full-length temporary index would fall out of cache


def _chunked_take(table, idx):
    """``table[idx]`` (negative indices from the end) a chunk at a time."""
    out = np.empty(len(idx), dtype=table.dtype)
    for start in range(0, len(idx), _CHUNK):
        part = idx[start: start + _CHUNK]
        table.take(part, out=out[start: start + len(part)], mode="wrap")
    return out


def _category_counts(codes, k):
    """Rows per category from categorical codes (-1 = missing, not counted)."""
    counts = np.zeros(k + 1, dtype=np.int64)
    for start in range(0, len(codes), _CHUNK):
        counts += np.bincount(codes[start: start + _CHUNK].astype(np.intp) + 1, minlength=k + 1)
    return counts[1:]


def _fmt_level(v):
    if isinstance(v, float):
        return fmt_number(v)
    return str(v)


def _bin(name, x, missing, bins, srt):
    """Quantile bins ``[e_j, e_{j+1})`` at readable edges (:func:`probe.bins.quantile_edges`).

    The codes are cut at the rounded edges themselves, so every label states exactly the rows it holds.

    ``x`` holds the values (NaN or anything where ``missing``), ``srt`` the present ones sorted.
    """
    edges = quantile_edges(srt, bins)
    has_missing = bool(missing.any())
    dtype = _code_dtype(len(edges) + 1 + has_missing)
    if len(edges) <= 16:  # the code is the number of edges at or below the value (NaN: none)
        codes = np.zeros(len(x), dtype=dtype)
        for e in edges:
            codes += x >= e
    else:
        codes = np.searchsorted(np.asarray(edges, dtype=float), np.where(missing, 0.0, x),
                                side="right").astype(dtype)
    labels = bin_labels(name, edges)
    bounds = [None] + [int(e) if e == int(e) and abs(e) < 2**53 else e for e in edges] + [None]
    preds = [{"column": name, "op": "in", "value": [lo, hi]}
             for lo, hi in zip(bounds[:-1], bounds[1:])]
    if has_missing:
        codes[missing] = len(labels)
        labels.append(f"{name} is missing")
        preds.append({"column": name, "op": "missing", "value": None})
    codes.setflags(write=False)
    return EncodedColumn(name, "numeric", codes, tuple(labels), tuple(preds))


