"""Reading the holdout table and giving its columns their roles, with one-line errors.

A holdout is a table (CSV, TSV, Parquet or Feather) with a binary label, the protected attributes (which
need not be model inputs), and the model's inputs. :func:`read_table` reads it; :func:`prepare_holdout`
checks the roles and returns a frozen :class:`Holdout`. Every problem is a :class:`~probe.errors.DataError`
whose message names the file, the column and the offending values or rows, and suggests the fix.
"""

from __future__ import annotations

import csv
import difflib
import hashlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

import numpy as np
import pandas as pd

from .errors import DataError

__all__ = ["read_table", "sha256_file", "prepare_holdout", "Holdout", "close_names", "rows_text",
           "require_finite", "check_columns", "is_numeric", "attribute_levels", "MAX_LEVELS", "MISSING_TOKENS"]

_READERS = {
    ".csv": "csv",
    ".tsv": "tsv",
    ".txt": "csv",
    ".parquet": "parquet",
    ".pq": "parquet",
    ".feather": "feather",
    ".arrow": "feather",
}


def sha256_file(path: str | Path) -> str:
    """The SHA-256 of a file's bytes, read in 1 MiB blocks."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def close_names(name: str, candidates: Sequence[str], n: int = 3) -> str:
    """A ``"; did you mean `a`, `b`?"`` suffix, or ``""`` when nothing is close."""
    matches = difflib.get_close_matches(str(name), [str(c) for c in candidates], n=n, cutoff=0.6)
    if not matches:
        lowered = {str(c).lower(): str(c) for c in candidates}
        if str(name).lower() in lowered:
            matches = [lowered[str(name).lower()]]
    return "; did you mean " + ", ".join(f"`{m}`" for m in matches) + "?" if matches else ""


def rows_text(positions: np.ndarray, limit: int = 5) -> str:
    """Describe row positions for a message: 'data rows 3, 8, 12 and 40 more' (1-based, header excluded)."""
    positions = np.asarray(positions)
    shown = ", ".join(str(int(p) + 1) for p in positions[:limit])
    more = len(positions) - limit
    word = "data row" if len(positions) == 1 else "data rows"
    return f"{word} {shown}" + (f" and {more} more" if more > 0 else "")


def is_numeric(s: pd.Series) -> bool:
    """A numeric column (binned, standardised, quantile-mapped) rather than a categorical one:
    numbers that are not booleans. Every analysis asks this one rule."""
    return bool(pd.api.types.is_numeric_dtype(s.dtype) and not pd.api.types.is_bool_dtype(s.dtype))


MAX_LEVELS = 50
"""The most levels a protected attribute may have (flips score every pair; proxies predict each)."""


def attribute_levels(s: pd.Series, name: str, *, max_levels: int | None = MAX_LEVELS) -> tuple:
    """The observed levels of the protected attribute ``name`` in a fixed order: category order, else
    sorted (as text when values do not compare); more than ``max_levels`` (by default
    :data:`MAX_LEVELS`; None for no cap) is a `DataError`."""
    s = s.dropna()
    if isinstance(s.dtype, pd.CategoricalDtype):
        present = set(s.unique())
        levels = tuple(c for c in s.cat.categories if c in present)
    else:
        vals = list(pd.unique(s))
        try:
            levels = tuple(sorted(vals))
        except TypeError:
            levels = tuple(sorted(vals, key=str))
    if max_levels is not None and len(levels) > max_levels:
        raise DataError(f"protected attribute `{name}` has {len(levels)} levels (at most "
                        f"{max_levels}: flips score every pair, proxies predict each); bin it "
                        "first, e.g. ages into bands")
    return levels


def require_finite(frame: pd.DataFrame, columns: Sequence[str]) -> None:
    """Raise a `DataError` naming the first numeric column among ``columns`` with an infinite value
    (missing values are allowed: every analysis treats them as their own level)."""
    for name in columns:
        col = frame[name]
        if is_numeric(col):
            bad = np.flatnonzero(np.isinf(col.to_numpy(dtype=float, na_value=np.nan)))
            if len(bad):
                raise DataError(f"column `{name}` has {len(bad)} infinite values "
                                f"({rows_text(bad)}); replace them or leave the column out")


MISSING_TOKENS = ("NA", "N/A", "n/a", "NaN", "nan", "-nan", "NULL", "null", "None", "<NA>", "#N/A")
"""Words that mean a missing value in a CSV/TSV column whose other values are all numbers. In a column
of text they are values (``NA`` is a continent, an initial); an empty field is missing everywhere."""


def read_table(path: str | Path) -> pd.DataFrame:
    """Read a CSV, TSV, Parquet or Feather file into a DataFrame.

    Missing values in CSV/TSV: an empty field is missing in every column. The words of
    :data:`MISSING_TOKENS` (``NA``, ``N/A``, ``NaN``, ``null``, ``None`` ...) are missing only in a
    column whose other values are all numbers (the column is then numeric); in any other column they
    are values like the rest, so a continent ``NA`` stays a group of its own.

    Parameters
    ----------
    path : str or Path
        The file; its suffix chooses the reader (``.csv``, ``.tsv``, ``.parquet``/``.pq``,
        ``.feather``/``.arrow``).

    Returns
    -------
    pandas.DataFrame

    Raises
    ------
    DataError
        The file is missing, has an unknown suffix, cannot be parsed, holds no rows, or has two
        columns of the same name.
    """
    path = Path(path)
    if not path.is_file():
        hint = ""
        if path.parent.is_dir():
            hint = close_names(path.name, [p.name for p in path.parent.iterdir()])
        raise DataError(f"data file `{path}` not found{hint}")
    kind = _READERS.get(path.suffix.lower())
    if kind is None:
        raise DataError(
            f"data file `{path}` has an unknown suffix `{path.suffix}`; "
            f"expected one of {', '.join(sorted(_READERS))}"
        )
    try:
        _refuse_duplicates(path, _header(path, kind))
        if kind in ("csv", "tsv"):
            frame = pd.read_csv(path, sep="\t" if kind == "tsv" else ",",
                                keep_default_na=False, na_values=[""])
            frame = _numeric_with_tokens(frame)
        elif kind == "parquet":
            frame = pd.read_parquet(path)
        else:
            frame = pd.read_feather(path)
    except DataError:
        raise
    except pd.errors.EmptyDataError:
        raise DataError(f"data file `{path}` is empty") from None
    except (ValueError, OSError, pd.errors.ParserError) as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise DataError(f"data file `{path}` could not be read as {kind}: {first}") from None
    if len(frame) == 0:
        raise DataError(f"data file `{path}` has a header but no rows")
    return frame


def _header(path: Path, kind: str) -> list[str]:
    """The column names as the file holds them (before any reader could rename a duplicate)."""
    if kind in ("csv", "tsv"):
        with open(path, newline="", encoding="utf-8-sig", errors="replace") as fh:
            return next(csv.reader(fh, delimiter="\t" if kind == "tsv" else ","), [])
    import pyarrow.ipc as ipc
    import pyarrow.parquet as pq

    try:
        schema = pq.read_schema(path) if kind == "parquet" else ipc.open_file(path).schema
    except Exception:  # noqa: BLE001 - not readable here: the reader says why, in its own words
        return []
    return list(schema.names)


def _refuse_duplicates(path: Path, names: Sequence[str]) -> None:
    twice = sorted({n for n in names if list(names).count(n) > 1})
    if twice:
        raise DataError(f"data file `{path}` has more than one column named "
                        + ", ".join(f"`{n}`" for n in twice) + "; rename them first")


def _numeric_with_tokens(frame: pd.DataFrame) -> pd.DataFrame:
    """Text columns whose values are numbers and :data:`MISSING_TOKENS` become numeric, the tokens
    missing; any other column keeps the tokens as values."""
    out = {}
    for name in frame.columns:
        col = frame[name]
        if not (col.dtype == object or pd.api.types.is_string_dtype(col.dtype)):
            continue
        token = col.isin(MISSING_TOKENS).to_numpy()
        if not token.any() or token.all():
            continue
        numbers = pd.to_numeric(col.where(~token), errors="coerce")
        if int(numbers.isna().sum()) == int((token | col.isna().to_numpy()).sum()):
            out[name] = numbers
    return frame.assign(**out) if out else frame


@dataclass(frozen=True)
class Holdout:
    """A validated holdout table with its column roles.

    Attributes
    ----------
    frame : pandas.DataFrame
        The table as read (never modified).
    source : str
        The file path, or ``"<DataFrame>"``.
    sha256 : str or None
        The file's SHA-256 (None for an in-memory frame).
    label : str or None
        The label column (None when the analyses need no label).
    positive : object
        The label value that is the positive class.
    y_true : ndarray of bool or None
        ``frame[label] == positive``, read-only.
    protected : tuple of str
        The protected attributes.
    intersections : tuple of tuple of str
        Column combinations whose joint groups are reported too.
    unknown : dict
        Per protected attribute, the number of rows whose value is missing.
    """

    frame: pd.DataFrame
    source: str
    sha256: str | None
    label: str | None
    positive: Any
    y_true: np.ndarray | None
    protected: tuple[str, ...]
    intersections: tuple[tuple[str, ...], ...]
    unknown: dict = field(default_factory=dict)

    @property
    def rows(self) -> int:
        return len(self.frame)

    def describe(self) -> dict:
        """Provenance of the data for the report."""
        return {"path": self.source, "sha256": self.sha256, "rows": self.rows,
                "label": self.label, "positive": _plain(self.positive)}


def _plain(value):
    return value.item() if isinstance(value, np.generic) else value


def check_columns(frame: pd.DataFrame, names: Sequence[str], role: str, where: str) -> None:
    for name in names:
        if name not in frame.columns:
            raise DataError(
                f"{role} column `{name}` is not in {where}{close_names(name, list(frame.columns))}"
            )


def _match_positive(values: Sequence[Any], positive: Any) -> Any | None:
    """The observed label value equal to ``positive``, allowing '1' == 1 == True == 1.0."""
    for v in values:
        if v == positive or str(v) == str(positive):
            return v
        try:
            if float(v) == float(positive):
                return v
        except (TypeError, ValueError):
            pass
        if isinstance(positive, str) and positive.lower() in ("true", "false"):
            if str(v).lower() == positive.lower():
                return v
    return None


def _label(frame: pd.DataFrame, label: str, positive: Any, where: str):
    """The observed positive value and the read-only ``label == positive`` array, checked."""
    y = frame[label]
    missing = np.flatnonzero(y.isna().to_numpy())
    if len(missing):
        raise DataError(
            f"label column `{label}` in {where} has {len(missing)} missing values "
            f"({rows_text(missing)}); drop or fill those rows"
        )
    levels = list(pd.unique(y))
    if len(levels) == 1:
        raise DataError(
            f"label column `{label}` in {where} holds one value only ({_plain(levels[0])!r}, all "
            f"{len(y)} rows): error, false-positive and false-negative rates need both classes; "
            "check the column and the file"
        )
    if len(levels) > 2:
        shown = ", ".join(repr(_plain(v)) for v in levels[:6])
        raise DataError(
            f"label column `{label}` in {where} is not binary: {len(levels)} distinct values "
            f"({shown}{', …' if len(levels) > 6 else ''})"
        )
    if positive is None:
        if set(map(_plain, levels)) <= {0, 1}:  # also True/False and 0.0/1.0
            chosen = next((v for v in levels if v == 1), 1)
        else:
            shown = ", ".join(repr(_plain(v)) for v in levels)
            raise DataError(
                f"label column `{label}` has values {shown}; say which is the positive class "
                f"with `--positive` (plan: `positive` in [data])"
            )
    else:
        chosen = _match_positive(levels, positive)
        if chosen is None:
            shown = ", ".join(repr(_plain(v)) for v in levels)
            raise DataError(
                f"positive value {positive!r} does not occur in label column `{label}` "
                f"(values: {shown})"
            )
    y_true = (y == chosen).to_numpy(dtype=bool)
    y_true.setflags(write=False)
    return chosen, y_true


def prepare_holdout(
    frame: pd.DataFrame,
    *,
    label: str | None,
    positive: Any = None,
    protected: Sequence[str] = (),
    intersections: Sequence[Sequence[str]] = (),
    source: str = "<DataFrame>",
    sha256: str | None = None,
    membership: Sequence[str] = (),
) -> Holdout:
    """Check the column roles of a holdout table and return a :class:`Holdout`.

    Parameters
    ----------
    frame : pandas.DataFrame
        The holdout; it is not modified.
    label : str or None
        The binary label column. Missing labels are an error (drop or fill them first). None when
        no analysis needs labels (flip tests, proxies); ``y_true`` is then None.
    positive : object, optional
        The label value of the positive class. When omitted, the label must be 0/1 or boolean
        (1 / True is positive).
    protected : sequence of str, default=()
        Protected attributes; each needs at least two observed levels. Missing values are counted as
        unknown and reported, not dropped silently.
    intersections : sequence of sequences of str, default=()
        Combinations (of protected attributes or any other columns) reported as joint groups.
    source, sha256 : str, optional
        Where the frame came from, for messages and provenance.
    membership : sequence of str, default=()
        Protected attributes known as membership probabilities (:mod:`probe.design`), not columns.

    Raises
    ------
    DataError
        Empty data, missing columns (with close names), missing labels (with rows), a label that is not
        binary, a positive value that does not occur, a protected attribute with one level.
    """
    where = f"`{source}`" if source != "<DataFrame>" else "the data"
    if len(frame) == 0:
        raise DataError(f"{where} has no rows")
    if label is not None and (not isinstance(label, str) or not label):
        raise DataError("`label` must name the label column")
    protected = tuple(dict.fromkeys(protected))
    intersections = tuple(tuple(c) for c in intersections)
    check_columns(frame, [label] if label else [], "label", where)
    recorded = [c for c in protected if c not in membership]
    check_columns(frame, recorded, "protected", where)
    for combo in intersections:
        if len(combo) < 2:
            raise DataError(f"an intersection needs at least two columns, got {list(combo)}")
        check_columns(frame, [c for c in combo if c not in membership], "intersection", where)
    if label in protected:
        raise DataError(f"column `{label}` cannot be both the label and a protected attribute")
    chosen, y_true = (None, None) if label is None else _label(frame, label, positive, where)

    unknown = {}
    for name in recorded:
        col = frame[name]
        observed = col.dropna().unique()
        if len(observed) < 2:
            what = f"only {_plain(observed[0])!r}" if len(observed) else "no values"
            raise DataError(
                f"protected attribute `{name}` in {where} has one level ({what}); "
                f"a comparison needs at least two groups"
            )
        unknown[name] = int(col.isna().sum())
    return Holdout(
        frame=frame,
        source=str(source),
        sha256=sha256,
        label=label,
        positive=_plain(chosen),
        y_true=y_true,
        protected=protected,
        intersections=intersections,
        unknown=unknown,
    )
