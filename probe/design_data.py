"""Reading a holdout's design columns (weights, clusters, membership probabilities), checked.

Every refusal is one line naming the column and the rows (:mod:`probe.design` says how the design
is used).
"""

from __future__ import annotations

from typing import Mapping

import numpy as np
import pandas as pd

from .data import check_columns, is_numeric, rows_text
from .design import Design, Membership
from .errors import DataError, PlanError

__all__ = ["MEMBERSHIP_TOLERANCE", "parse_membership", "read_design", "resolve_design"]

#: How far a row's membership probabilities may sum from 1 (probabilities printed to three
#: decimals); within it they are rescaled to sum to 1 exactly, beyond it the row is refused.
MEMBERSHIP_TOLERANCE = 1e-3


def _numbers(frame: pd.DataFrame, column: str, role: str, where: str) -> np.ndarray:
    col = frame[column]
    if not is_numeric(col) or col.dtype == bool:
        raise DataError(f"{role} column `{column}` in {where} is not numeric "
                        f"(dtype {col.dtype}); it must hold numbers")
    values = col.to_numpy(dtype=np.float64, na_value=np.nan)
    bad = np.flatnonzero(~np.isfinite(values))
    if len(bad):
        raise DataError(f"{role} column `{column}` in {where} has {len(bad)} missing or infinite "
                        f"values ({rows_text(bad)}); every row needs one")
    return values


def parse_membership(value) -> dict:
    """``[data.membership]`` as ``{attribute: {group: column}}``, checked for shape."""
    if value is None:
        return {}
    if not isinstance(value, dict):
        raise PlanError("`data.membership` must be a table: attribute = { group = \"column\", ... }")
    out = {}
    for attribute, groups in value.items():
        where = f"`data.membership.{attribute}`"
        if not isinstance(groups, dict) or len(groups) < 2:
            raise PlanError(f"{where} must map two or more groups to their probability columns, "
                            f"e.g. {{ a = \"p_a\", b = \"p_b\" }}")
        for group, column in groups.items():
            if not isinstance(column, str) or not column:
                raise PlanError(f"{where}.{group} must name a column, got {column!r}")
        if len(set(groups.values())) != len(groups):
            raise PlanError(f"{where} names one column for two groups")
        out[str(attribute)] = {str(g): c for g, c in groups.items()}
    return out


def read_design(frame: pd.DataFrame, *, weights: str | None = None, cluster: str | None = None,
                membership: Mapping[str, Mapping[str, str]] | None = None,
                where: str = "the data") -> Design:
    """The :class:`~probe.design.Design` of ``frame`` from its column roles.

    Raises
    ------
    DataError
        A missing column; weights that are not numbers, missing, negative or all zero; a missing
        cluster; membership probabilities outside [0, 1] or not summing to 1; a membership
        attribute that is also a column of the data.
    """
    w = None
    if weights:
        check_columns(frame, [weights], "weights", where)
        w = _checked_weights(_numbers(frame, weights, "weights", where),
                             f"weights column `{weights}` in {where}")
    codes = None
    if cluster:
        check_columns(frame, [cluster], "cluster", where)
        col = frame[cluster]
        missing = np.flatnonzero(col.isna().to_numpy())
        if len(missing):
            raise DataError(f"cluster column `{cluster}` in {where} has {len(missing)} missing "
                            f"values ({rows_text(missing)}); give every row its cluster")
        codes = pd.factorize(col, sort=True)[0].astype(np.int64)
    members = {}
    for attribute, groups in (membership or {}).items():
        members[attribute] = _membership(frame, attribute, groups, where)
    return Design(w, codes, members, weights_column=weights or None,
                  cluster_column=cluster or None)


def _checked_weights(w: np.ndarray, what: str) -> np.ndarray:
    """Finite weights (checked by the caller) that are 0 or more and not all zero."""
    neg = np.flatnonzero(w < 0)
    if len(neg):
        raise DataError(f"{what} has {len(neg)} negative values ({rows_text(neg)}); weights must "
                        "be 0 or more")
    if not (w > 0).any():
        raise DataError(f"{what} is zero on every row")
    return w


def _membership(frame, attribute, groups, where) -> Membership:
    if attribute in frame.columns:
        raise DataError(f"membership attribute `{attribute}` is also a column of {where}; "
                        "name the attribute known as probabilities differently")
    columns = list(groups.values())
    check_columns(frame, columns, f"membership (`{attribute}`)", where)
    probs = np.column_stack([_numbers(frame, c, f"membership (`{attribute}`)", where)
                             for c in columns])
    return Membership(attribute, tuple(groups), tuple(columns), _checked_probs(attribute, columns,
                                                                               probs, where))


def _checked_probs(attribute, columns, probs, where) -> np.ndarray:
    """Probabilities in [0, 1] whose rows sum to 1 (within the tolerance; then rescaled)."""
    bad = np.flatnonzero(~np.isfinite(probs).all(axis=1))
    if len(bad):
        raise DataError(f"membership probabilities of `{attribute}` in {where} have missing or "
                        f"infinite values on {len(bad)} rows ({rows_text(bad)})")
    for j, c in enumerate(columns):
        out = np.flatnonzero((probs[:, j] < 0) | (probs[:, j] > 1))
        if len(out):
            raise DataError(f"membership column `{c}` of `{attribute}` in {where} has "
                            f"{len(out)} values outside [0, 1] ({rows_text(out)})")
    total = probs.sum(axis=1)
    off = np.flatnonzero(np.abs(total - 1.0) > MEMBERSHIP_TOLERANCE)
    if len(off):
        raise DataError(f"membership probabilities of `{attribute}` ({', '.join(columns)}) in "
                        f"{where} do not sum to 1 on {len(off)} rows ({rows_text(off)}; the first "
                        f"sums to {total[off[0]]:.6g})")
    return probs / total[:, None]


def resolve_design(sample_weight, design: Design | None, n_rows: int) -> Design:
    """The design of an API call: ``design`` as given, or ``Design(weights=sample_weight)``
    checked like a weights column; plain when neither is given. Refuses both at once and a design
    whose arrays do not have one value per row."""
    if sample_weight is not None and design is not None:
        raise PlanError("give `sample_weight` or `design`, not both (a Design holds the weights)")
    if design is not None and not isinstance(design, Design):
        raise PlanError(f"`design` must be a probe.Design, got {type(design).__name__}")
    if sample_weight is not None:
        w = np.asarray(sample_weight)
        if w.ndim != 1 or w.dtype == bool or w.dtype.kind not in "iuf":
            raise DataError("`sample_weight` must hold numbers, one per row")
        w = w.astype(np.float64)
        if len(w) != n_rows:
            raise DataError(f"`sample_weight` has {len(w)} values for {n_rows} rows")
        bad = np.flatnonzero(~np.isfinite(w))
        if len(bad):
            raise DataError(f"`sample_weight` has {len(bad)} missing or infinite values "
                            f"({rows_text(bad)})")
        return Design(weights=_checked_weights(w, "`sample_weight`"))
    design = design or Design()
    for name, a in (("weights", design.weights), ("clusters", design.cluster)):
        if a is not None and len(a) != n_rows:
            raise DataError(f"the design's {name} have {len(a)} values for {n_rows} rows")
    if design.cluster is not None:
        missing = np.flatnonzero(design.cluster < 0)
        if len(missing):
            raise DataError(f"the design's clusters have {len(missing)} missing values "
                            f"({rows_text(missing)}); give every row its cluster")
    if design.weights is not None:
        bad = np.flatnonzero(~np.isfinite(design.weights))
        if len(bad):
            raise DataError(f"the design's weights have {len(bad)} missing or infinite values "
                            f"({rows_text(bad)})")
        _checked_weights(design.weights, "the design's weights")
    for m in design.membership.values():
        if m.probs.ndim != 2 or len(m.probs) != n_rows or m.probs.shape[1] != len(m.levels):
            raise DataError(f"the membership probabilities of `{m.attribute}` have shape "
                            f"{m.probs.shape}; expected {n_rows} rows and one column per group "
                            f"({len(m.levels)})")
        _checked_probs(m.attribute, m.columns, m.probs, "the design")
    return design
