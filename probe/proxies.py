"""Which features stand in for a protected attribute (proxy detection); no model needed.

For one protected attribute and each candidate feature, three views of how much the feature tells
about the attribute:

- **mutual information**, normalised by the attribute's entropy (the *uncertainty coefficient*
  ``I(A; F) / H(A)``: 0 when the feature says nothing, 1 when it determines the attribute), on the
  levels of the shared encoder (:func:`probe.encode.encode_columns`): numeric features in up to ten
  quantile bins, categorical levels as they are (up to 250, the rest ``other``), a missing value a
  level of its own; columns the encoder leaves out (constant, identifiers, dates) are left out with
  its note. It is computed in-sample, so a feature with very many levels scores high by chance; the
  cross-fitted AUC below does not have that weakness.
- **single-feature AUC**: the attribute rate of the feature's level (or bin) used as a score for the
  attribute, *cross-fitted*: each row's score comes from rates estimated on the other folds (with one
  pseudo-row of the overall rate as a prior, so unseen levels score the prior). One-vs-rest macro AUC
  when the attribute has more than two levels. This is the ranking key.
- **multivariate**: a :class:`~sklearn.ensemble.HistGradientBoostingClassifier` (native categorical
  support) predicting the attribute from all the features together, cross-validated (stratified
  folds); its AUC is the mean over folds with a t interval from the spread over folds, and each
  feature's share of it is the :func:`~sklearn.inspection.permutation_importance` (AUC scoring) on the
  held-out fold, averaged over folds.

The fold-spread interval treats the folds as independent, which they are not (the training sets
overlap), so it is approximate and tends to be narrow (Bengio & Grandvalet 2004).

References
----------
Theil, H. (1970). On the estimation of relationships involving qualitative variables. American
Journal of Sociology 76, 103-154 (the uncertainty coefficient).
Breiman, L. (2001). Random forests. Machine Learning 45, 5-32 (permutation importance).
Bengio, Y. & Grandvalet, Y. (2004). No unbiased estimator of the variance of K-fold
cross-validation. JMLR 5, 1089-1105.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats as _sps

from .association import crossfit_auc, fold_ids, uncertainty_coefficient
from .data import attribute_levels, require_finite
from .encode import encode_columns
from .errors import DataError, PlanError
from .stats import Estimate
from .threads import N_JOBS, limited
from .values import as_rng, json_number, report_level

__all__ = ["find_proxies", "ProxyFindings", "ProxyRow"]

_N_BINS = 10
_MAX_LEVELS = 250  # named levels per categorical: with `other` and `missing`, HistGradientBoosting's
# categorical codes stay below its max_bins (255)


@dataclass(frozen=True)
class ProxyRow:
    """How strongly one feature is tied to the protected attribute.

    Attributes
    ----------
    rank : int
        1 for the feature with the highest single-feature AUC (ties: higher mutual information, then
        the feature name).
    feature : str
    kind : str
        ``"numeric"`` (binned for the single-feature measures) or ``"categorical"``.
    levels : int
        Levels (or bins) used, counting "missing" when present.
    mutual_information : float
        ``I(A; F) / H(A)`` on the levels/bins, in [0, 1].
    auc : float
        Cross-fitted single-feature AUC (one-vs-rest macro for a multi-level attribute).
    importance : float
        Mean drop in held-out AUC when the feature is permuted in the multivariate model (NaN when the
        multivariate check was not run).
    importance_sd : float
        Standard deviation of that drop over folds and repeats.
    """

    rank: int
    feature: str
    kind: str
    levels: int
    mutual_information: float
    auc: float
    importance: float
    importance_sd: float

    def to_dict(self) -> dict:
        return {
            "rank": self.rank,
            "feature": self.feature,
            "kind": self.kind,
            "levels": self.levels,
            "mutual_information": json_number(self.mutual_information),
            "auc": json_number(self.auc),
            "importance": json_number(self.importance),
            "importance_sd": json_number(self.importance_sd),
        }


@dataclass(frozen=True)
class ProxyFindings:
    """The ranked proxy table for one protected attribute.

    Attributes
    ----------
    attribute : str
    attribute_levels : tuple
        The attribute's observed levels, in the order used.
    rows : tuple of ProxyRow
        One per feature, ranked.
    multivariate_auc : Estimate or None
        Cross-validated AUC of all features together (method ``"cv-fold-t"``); None when not run.
    rows_used : int
        Rows the measures were computed on (after dropping a missing attribute and subsampling).
    rows_dropped : int
        Rows dropped because the attribute was missing.
    notes : tuple of str
    """

    attribute: str
    attribute_levels: tuple
    rows: tuple
    multivariate_auc: Estimate | None
    rows_used: int
    rows_dropped: int
    notes: tuple

    def top(self, n: int = 3) -> tuple:
        """The names of the ``n`` highest-ranked features."""
        return tuple(r.feature for r in self.rows[: max(int(n), 0)])

    def to_dict(self) -> dict:
        return {
            "attribute": self.attribute,
            "attribute_levels": [report_level(v) for v in self.attribute_levels],
            "rows_used": self.rows_used,
            "rows_dropped": self.rows_dropped,
            "multivariate_auc": None if self.multivariate_auc is None
            else self.multivariate_auc.to_dict(),
            "features": [r.to_dict() for r in self.rows],
            "notes": list(self.notes),
        }

    def to_frame(self) -> pd.DataFrame:
        cols = ["rank", "feature", "kind", "levels", "mutual_information", "auc", "importance",
                "importance_sd"]
        return pd.DataFrame([[getattr(r, c) for c in cols] for r in self.rows], columns=cols)


def find_proxies(
    X: pd.DataFrame,
    attribute: str,
    *,
    features=None,
    cv: int = 5,
    n_repeats: int = 5,
    confidence_level: float = 0.95,
    rng=0,
    max_rows: int = 50_000,
    multivariate: bool = True,
    progress=None,
) -> ProxyFindings:
    """Rank the features of ``X`` by how well they stand in for ``attribute``.

    Parameters
    ----------
    X : pandas.DataFrame
        The data, including the protected attribute (which need not be a model input). Not modified.
    attribute : str
        The protected attribute's column. Rows where it is missing are dropped (noted).
    features : sequence of str, optional
        Candidate features; default every other column of ``X``.
    cv : int, default=5
        Folds for cross-fitting and for the multivariate check.
    n_repeats : int, default=5
        Permutations per feature and fold.
    confidence_level : float, default=0.95
    rng : None, int or numpy.random.Generator, default=0
    max_rows : int, default=50_000
        Rows beyond this are subsampled (seeded, without replacement).
    multivariate : bool, default=True
        Fit the multivariate model and permutation importances (the slow part); off, only the
        single-feature measures are computed. It runs with one thread per native pool
        (:func:`probe.threads.limited`).
    progress : callable, optional
        ``progress(done, total)`` as the multivariate check's folds complete.

    Returns
    -------
    ProxyFindings

    Raises
    ------
    DataError
        Unknown columns, or an attribute with fewer than two observed levels.
    PlanError
        Bad option values.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> g = np.random.default_rng(0)
    >>> group = g.integers(0, 2, 2000)
    >>> X = pd.DataFrame({"group": group, "postcode": group * 10 + g.integers(0, 3, 2000),
    ...                   "noise": g.normal(size=2000)})
    >>> find_proxies(X, "group", multivariate=False).top(1)
    ('postcode',)
    """
    gen = as_rng(rng)
    frame, features, y, levels, dropped, notes = _find_proxies_iv(
        X, attribute, features, cv, n_repeats, confidence_level, max_rows)
    sub_seed, fold_seed, model_seed = (int(s) for s in gen.integers(0, 2**31 - 1, size=3))

    if len(y) > max_rows:
        n_before = len(y)
        keep = np.sort(np.random.default_rng(sub_seed).choice(n_before, size=max_rows, replace=False))
        frame = frame.iloc[keep]
        y = y[keep]
        notes.append(f"subsampled {max_rows} of {n_before} rows (seeded)")
    n_levels = len(levels)

    enc = encode_columns(frame, bins=_N_BINS, max_levels=_MAX_LEVELS, min_level_share=0.0)
    notes.extend(enc.notes)
    features = list(enc.names)
    if not features:
        raise DataError(f"no candidate feature for `{attribute}` is left: " + "; ".join(enc.notes))
    fold = fold_ids(len(y), cv, fold_seed)
    single = []
    for col in enc.columns:
        codes = col.codes.astype(np.int64)
        mi = uncertainty_coefficient(y, codes, n_levels, col.n_levels)
        auc = crossfit_auc(y, codes, n_levels, col.n_levels, fold, cv)
        kind = "numeric" if col.kind == "numeric" else "categorical"
        single.append((col.name, kind, col.n_levels, mi, auc))

    imp = {name: (math.nan, math.nan) for name in features}
    m_auc = None
    if multivariate:
        counts = np.bincount(y, minlength=n_levels)
        if counts.min() < cv:
            notes.append(
                f"multivariate check skipped: the smallest level of `{attribute}` has "
                f"{int(counts.min())} rows, fewer than cv={cv}")
        else:
            with limited():
                m_auc, imp = _multivariate(frame, enc, y, n_levels, cv, n_repeats,
                                           confidence_level, fold_seed, model_seed, progress)

    order = sorted(single, key=lambda r: (-_nan_low(r[4]), -_nan_low(r[3]), r[0]))
    rows = tuple(
        ProxyRow(rank=i + 1, feature=name, kind=kind, levels=int(nc), mutual_information=float(mi),
                 auc=float(auc), importance=float(imp[name][0]), importance_sd=float(imp[name][1]))
        for i, (name, kind, nc, mi, auc) in enumerate(order)
    )
    return ProxyFindings(attribute=attribute, attribute_levels=tuple(levels), rows=rows,
                         multivariate_auc=m_auc, rows_used=int(len(y)), rows_dropped=int(dropped),
                         notes=tuple(notes))


# ---------------------------------------------------------------------------------------------
# validation


def _find_proxies_iv(X, attribute, features, cv, n_repeats, confidence_level, max_rows):
    if not isinstance(X, pd.DataFrame):
        raise DataError(f"`X` must be a pandas DataFrame, got {type(X).__name__}")
    if attribute not in X.columns:
        raise DataError(f"protected attribute `{attribute}` is not a column of the data "
                        f"(columns: {', '.join(map(str, X.columns[:12]))})")
    if features is None:
        features = [c for c in X.columns if c != attribute]
    else:
        if isinstance(features, str):
            features = [features]
        features = list(dict.fromkeys(features))
        missing = [f for f in features if f not in X.columns]
        if missing:
            raise DataError(f"`features` names columns not in the data: {', '.join(map(str, missing))}")
        if attribute in features:
            raise DataError(f"`features` must not include the protected attribute `{attribute}` itself")
    if not features:
        raise DataError(f"no candidate features besides `{attribute}`")
    require_finite(X, features)
    for name, val, lo in (("cv", cv, 2), ("n_repeats", n_repeats, 1), ("max_rows", max_rows, 10)):
        if not isinstance(val, (int, np.integer)) or isinstance(val, bool) or val < lo:
            raise PlanError(f"`{name}` must be an integer >= {lo}, got {val!r}")
    if not 0.0 < confidence_level < 1.0:
        raise PlanError(f"`confidence_level` must lie strictly between 0 and 1, got {confidence_level!r}")
    notes = []
    present = X[attribute].notna().to_numpy()
    dropped = int((~present).sum())
    if dropped:
        notes.append(f"{dropped} rows with missing `{attribute}` were dropped")
        frame = X.loc[present, features]
        attr = X.loc[present, attribute]
    else:
        frame = X[features]
        attr = X[attribute]
    levels = attribute_levels(attr, attribute)
    if len(levels) < 2:
        raise DataError(f"protected attribute `{attribute}` needs at least two observed levels, "
                        f"got {len(levels)}: {list(levels)}")
    y = pd.Categorical(attr, categories=list(levels)).codes.astype(np.int64)
    return frame, features, y, levels, dropped, notes


# ---------------------------------------------------------------------------------------------
# multivariate check


def _design(frame, enc):
    """A float matrix for HistGradientBoosting: numerics as they are, other columns as the encoder's
    level codes (a missing value NaN), and which columns are categorical."""
    cols, is_cat = [], []
    for col in enc.columns:
        if col.kind == "numeric":
            cols.append(frame[col.name].to_numpy(dtype=float, na_value=np.nan))
        else:
            codes = col.codes.astype(float)
            if col.predicates[-1]["op"] == "missing":
                codes[col.codes == col.n_levels - 1] = np.nan
            cols.append(codes)
        is_cat.append(col.kind != "numeric")
    return np.column_stack(cols), np.array(is_cat, dtype=bool)


def _multivariate(frame, enc, y, n_levels, cv, n_repeats, confidence_level, fold_seed,
                  model_seed, progress):
    from sklearn.ensemble import HistGradientBoostingClassifier
    from sklearn.inspection import permutation_importance
    from sklearn.metrics import roc_auc_score
    from sklearn.model_selection import StratifiedKFold

    Z, is_cat = _design(frame, enc)
    scoring = "roc_auc" if n_levels == 2 else "roc_auc_ovr"
    splitter = StratifiedKFold(n_splits=cv, shuffle=True, random_state=fold_seed)
    fold_aucs, drops = [], []
    for i, (train, test) in enumerate(splitter.split(Z, y)):
        if progress:
            progress(i, cv)
        est = HistGradientBoostingClassifier(
            categorical_features=is_cat if is_cat.any() else None, random_state=model_seed + i)
        Z_train, Z_test = _fold_design(Z, train, test)
        est.fit(Z_train, y[train])
        proba = est.predict_proba(Z_test)
        if n_levels == 2:
            fold_aucs.append(roc_auc_score(y[test], proba[:, 1]))
        else:
            fold_aucs.append(roc_auc_score(y[test], proba, multi_class="ovr", average="macro",
                                           labels=np.arange(n_levels)))
        pi = permutation_importance(est, Z_test, y[test], scoring=scoring, n_repeats=n_repeats,
                                    random_state=model_seed + 1000 + i, n_jobs=N_JOBS)
        drops.append(pi.importances)  # (n_features, n_repeats)
    if progress:
        progress(cv, cv)
    a = np.asarray(fold_aucs)
    mean = float(a.mean())
    half = float(_sps.t.ppf(0.5 + confidence_level / 2, cv - 1) * a.std(ddof=1) / math.sqrt(cv))
    m_auc = Estimate(mean, max(mean - half, 0.0), min(mean + half, 1.0), "cv-fold-t")
    allv = np.concatenate(drops, axis=1)  # (n_features, cv * n_repeats)
    imp = {name: (float(allv[j].mean()), float(allv[j].std(ddof=1)) if allv.shape[1] > 1 else math.nan)
           for j, name in enumerate(enc.names)}
    return m_auc, imp


def _fold_design(Z, train, test):
    """A fold's training and test rows; a column with no value in the training rows (all missing
    there) becomes a constant 0 in both, which is what it tells the model (the gradient boosting
    cannot bin a column with no value)."""
    Z_train, Z_test = Z[train], Z[test]
    empty = np.isnan(Z_train).all(axis=0)
    if empty.any():
        Z_train[:, empty] = 0.0
        Z_test[:, empty] = 0.0
    return Z_train, Z_test


def _nan_low(x):
    return -math.inf if x is None or (isinstance(x, float) and math.isnan(x)) else x

