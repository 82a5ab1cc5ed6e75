"""Kind ``lightgbm``: LightGBM model files (``.txt``, ``.lgb``, or any text file that starts with
``tree``), scored with ``lightgbm.Booster.predict``.

The booster's feature names are its inputs (unless they are the default ``Column_0``, ...).
Columns the booster was trained on as pandas categoricals are encoded with the training levels
it stores; a level it never saw becomes missing, as LightGBM itself would treat it. A binary
objective gives P(label == 1), so a positive class of 0 takes the complement; a multiclass
booster gives the column of the positive class; any other objective's raw output is the score.
"""

from __future__ import annotations

import hashlib
import json
import re
from typing import Any

import numpy as np
import pandas as pd

from probe.errors import ModelError

from .inputs import check_count, numeric, reconcile_names
from .labels import index_from_positive
from .messages import cause, ticks
from .model import BatchFailure, Model
from .options import Options

__all__ = ["load_lightgbm"]

_PROBABILITY_OBJECTIVES = ("binary", "cross_entropy", "xentropy")


def load_lightgbm(data: bytes, text: str, opts: Options) -> Model:
    """A Model from the bytes of a LightGBM model file."""
    import lightgbm

    sha = hashlib.sha256(data).hexdigest()
    try:
        model_str = data.decode("utf-8")
    except UnicodeDecodeError:
        raise ModelError(
            f"model file `{text}` is damaged or truncated (it is not UTF-8 text)") from None
    damage = _damage(model_str)
    if damage:
        raise ModelError(f"model file `{text}` is damaged or truncated ({damage})")
    try:
        booster = lightgbm.Booster(model_str=model_str)
    except Exception as exc:
        raise ModelError(f"cannot load LightGBM model file `{text}`: {cause(exc)}") from exc
    header = _lightgbm_header(model_str)
    objective = header.get("objective", "")
    num_class = int(header.get("num_class", "1") or 1)
    names = tuple(booster.feature_name())
    unnamed = all(n == f"Column_{i}" for i, n in enumerate(names))
    if unnamed:
        fnames = opts.feature_names
        check_count(fnames, len(names), text)
    else:
        fnames = reconcile_names(names, opts.feature_names, text)
    levels = [list(v) for v in (booster.pandas_categorical or [])]
    cat_idx = _as_int_list(booster.params.get("categorical_feature"))
    catmap: dict[str, list] = {}
    if levels and fnames is not None and len(cat_idx) == len(levels):
        catmap = {fnames[i]: lv for i, lv in zip(cat_idx, levels)}

    column = None
    if num_class > 1:
        column = index_from_positive(opts.positive, num_class, text)
    probability_obj = objective.split(" ")[0] in _PROBABILITY_OBJECTIVES or num_class > 1
    # a binary booster predicts P(label == 1): when the positive class is 0, its complement
    complement = num_class == 1 and probability_obj and str(opts.positive).strip() in (
        "0", "0.0", "False", "false")
    if num_class > 1:
        transform = f"LightGBM `{objective}` output, column {column} of {num_class}"
    elif complement:
        transform = f"1 - LightGBM probability output (objective `{objective}`): positive class 0"
    elif probability_obj:
        transform = f"LightGBM probability output (objective `{objective}`)"
    else:
        transform = (
            f"LightGBM raw output of objective `{objective}` taken as the score; it is not a "
            "binary-class probability"
        )

    def score(batch: pd.DataFrame) -> np.ndarray:
        mapping = catmap or _guess_lightgbm_categories(batch, levels, text)
        X = _lightgbm_matrix(batch, mapping)
        out = np.asarray(booster.predict(X), dtype=np.float64)
        if column is not None and out.ndim == 2:
            out = out[:, column]
        return 1.0 - out if complement else out

    return Model(
        spec=text, kind="lightgbm", sha256=sha, feature_names=fnames,
        categories={k: tuple(v) for k, v in catmap.items()},
        score_batch=score, transform=transform, probability=True,
        details={"objective": objective},
        batch_size=opts.batch_size, allow_unseen=opts.allow_unseen,
        n_inputs=len(names) if fnames is None else None,
    )


def _damage(model_str: str) -> str | None:
    """What is structurally wrong with a LightGBM text model, or None when it is whole.

    Cheap checks of what LightGBM itself writes, made before LightGBM parses the file (a cut
    file can crash it): the ``end of trees`` marker; trees numbered 0, 1, ... in order, as many
    as the header's ``tree_sizes`` lists, each exactly that many bytes; a whole multiple of
    ``num_tree_per_iteration``; the parameters block closed; the ``pandas_categorical`` line
    complete JSON.
    """
    end = model_str.find("\nend of trees")
    if end < 0:
        return "no `end of trees` line"
    starts = [m.start() + 1 for m in re.finditer(r"\nTree=", model_str[:end + 1])]
    numbers = [model_str[i + 5:model_str.find("\n", i)].strip() for i in starts]
    if numbers != [str(i) for i in range(len(numbers))]:
        return f"the trees are numbered {', '.join(numbers[:6]) or 'none'}…, not 0, 1, 2, …"
    header = _lightgbm_header(model_str)
    sizes = header.get("tree_sizes")
    if sizes is not None:
        sizes = sizes.split()
        if len(sizes) != len(starts):
            return f"the header lists {len(sizes)} trees, the file holds {len(starts)}"
        bounds = starts + [end + 1]
        for i, size in enumerate(sizes):
            if not size.isdigit() or int(size) != bounds[i + 1] - bounds[i]:
                return f"tree {i} is not the {size} characters the header gives"
    per = header.get("num_tree_per_iteration", "1")
    if not per.isdigit() or int(per) < 1 or len(starts) % int(per):
        return f"{len(starts)} trees is not a whole number of iterations of {per}"
    tail = model_str[end:]
    if "\nparameters:" in tail and "\nend of parameters" not in tail:
        return "the parameters block is not closed"
    cats = tail.find("\npandas_categorical:")
    if cats >= 0:
        try:
            json.loads(tail[cats + len("\npandas_categorical:"):].strip() or "null")
        except ValueError:
            return "the `pandas_categorical` line is cut"
    return None


def _lightgbm_header(model_str: str) -> dict[str, str]:
    out: dict[str, str] = {}
    for line in model_str.splitlines():
        if line.startswith("Tree=") or line.startswith("end of trees"):
            break
        key, sep, value = line.partition("=")
        if sep:
            out[key.strip()] = value.strip()
    return out


def _as_int_list(value: Any) -> list[int]:
    if value is None or value == "":
        return []
    if isinstance(value, str):
        parts = [p for p in value.replace(",", " ").split() if p]
    elif isinstance(value, (list, tuple)):
        parts = list(value)
    else:
        parts = [value]
    try:
        return [int(p) for p in parts]
    except (TypeError, ValueError):
        return []


def _guess_lightgbm_categories(batch: pd.DataFrame, levels: list, text: str) -> dict[str, list]:
    """Which columns are the booster's pandas categoricals, when the file does not say."""
    if not levels:
        return {}
    candidates = [
        str(c) for c in batch.columns
        if not (pd.api.types.is_numeric_dtype(batch[c]) or pd.api.types.is_bool_dtype(batch[c]))
        or isinstance(batch[c].dtype, pd.CategoricalDtype)
    ]
    if len(candidates) != len(levels):
        raise BatchFailure(
            f"the LightGBM model knows {len(levels)} categorical columns but does not say which; "
            f"the data has {len(candidates)} non-numeric ones ({ticks(candidates) or 'none'})"
        )
    return dict(zip(candidates, levels))


def _lightgbm_matrix(batch: pd.DataFrame, catmap: dict[str, list]) -> np.ndarray:
    """Encode the batch as LightGBM would with the training frame's categories."""
    X = np.empty(batch.shape, dtype=np.float64)
    for j, col in enumerate(batch.columns):
        s = batch[col]
        levels = catmap.get(str(col))
        if levels is not None:
            codes = _category_codes(s, levels)
            present = s.notna().to_numpy()
            if present.any() and np.isnan(codes[present]).all():
                seen = ", ".join(repr(v) for v in pd.unique(s[present])[:3])
                known = ", ".join(repr(v) for v in levels[:5])
                raise BatchFailure(
                    f"column `{col}` holds none of the levels the model was trained with "
                    f"(got {seen}; the model knows {known}{', …' if len(levels) > 5 else ''})"
                )
            X[:, j] = codes
        else:
            X[:, j] = numeric(s, str(col))
    return X


def _category_codes(s: pd.Series, levels: list) -> np.ndarray:
    """Codes of ``s`` in the model's level order; a level the model never saw is NaN."""
    index = pd.Index(levels, dtype=object)
    values = s.astype(object).to_numpy()
    present = pd.notna(values)
    codes = index.get_indexer(values)
    if ((codes < 0) & present).any():
        # The data may carry the same levels in another type (1 vs "1", read from CSV).
        as_text = pd.Index([str(v) for v in levels], dtype=object)
        alt = as_text.get_indexer(np.array([str(v) for v in values], dtype=object))
        alt[~present] = -1
        if ((alt < 0) & present).sum() < ((codes < 0) & present).sum():
            codes = alt
    out = codes.astype(np.float64)
    out[codes < 0] = np.nan
    return out
