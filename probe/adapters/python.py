"""Kinds ``python`` and ``object``: ``py:MODULE:ATTR`` and in-memory models, which are also what
pickle and skops files hold.

An estimator is scored through ``predict_proba`` (the column of the positive class), else a
logistic sigmoid of ``decision_function`` (threshold 0.5 is margin 0), else ``predict``'s hard
labels as 0/1. A function of one DataFrame is called on each batch and returns the scores. Each
call gets a copy of the batch, so a model that writes into its input cannot reach the caller's
frame. Its inputs are ``feature_names_in_`` when the estimator records them.
"""

from __future__ import annotations

import contextlib
import hashlib
import importlib
import importlib.util
import inspect
import os
import sys
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from probe.data import sha256_file
from probe.errors import ModelError

from .encoders import sklearn_categories
from .files import check_pin, close_files, read_bytes, resolve
from .inputs import check_count, reconcile_names
from .labels import class_index, index_from_positive, labels_equal, zero_one
from .messages import cause, close_names, first_line
from .model import BatchFailure, Model
from .options import Options

__all__ = ["load_python", "wrap_python"]


def load_python(text: str, opts: Options) -> Model:
    """A Model from ``py:MODULE:ATTR``: a module file or a dotted module, then its attribute."""
    rest = text[3:].strip()
    module_part, sep, attr = rest.rpartition(":")
    if not sep or not module_part or not attr:
        raise ModelError(f"model spec `{text}` should be py:MODULE:ATTR (e.g. py:mymodels:scorer)")
    sha = None
    if module_part.endswith(".py") or "/" in module_part or os.sep in module_part:
        path = resolve(module_part, opts.base)
        if not path.is_file():
            raise ModelError(f"module file `{module_part}` not found{close_files(path)}")
        data = read_bytes(path, module_part)
        sha = hashlib.sha256(data).hexdigest()
        check_pin(sha, module_part, opts.sha256)  # before the module runs
        module = _import_file(path, sha, text)
    else:
        module = _import_dotted(module_part, opts.base, text)
        file = getattr(module, "__file__", None)
        if file and os.path.isfile(file):
            sha = sha256_file(file)
        check_pin(sha, module_part, opts.sha256)
    obj: Any = module
    for part in attr.split("."):
        if not hasattr(obj, part):
            names = [n for n in dir(obj) if not n.startswith("_")]
            raise ModelError(
                f"model spec `{text}`: `{module_part}` has no attribute `{attr}`"
                f"{close_names([part], names)}"
            )
        obj = getattr(obj, part)
    return wrap_python(obj, spec=text, kind="python", sha256=sha, opts=opts, details={})


def _import_file(path: Path, sha: str, text: str) -> Any:
    name = f"_probe_model_{path.stem}_{sha[:12]}"
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.spec_from_file_location(name, path)
    if spec is None or spec.loader is None:
        raise ModelError(f"model spec `{text}`: cannot import `{path.name}`")
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    with _first_on_path(str(path.parent)):  # so the model file can import its neighbours
        try:
            spec.loader.exec_module(module)
        except (Exception, SystemExit) as exc:
            del sys.modules[name]
            raise ModelError(
                f"model spec `{text}`: importing `{path.name}` failed: {cause(exc)}"
            ) from exc
    return module


def _import_dotted(name: str, base: Path, text: str) -> Any:
    with _first_on_path(str(base)):
        try:
            return importlib.import_module(name)
        except ImportError as exc:
            raise ModelError(
                f"model spec `{text}`: cannot import module `{name}`: {first_line(str(exc))}"
            ) from exc
        except (Exception, SystemExit) as exc:
            raise ModelError(
                f"model spec `{text}`: importing `{name}` failed: {cause(exc)}"
            ) from exc


@contextlib.contextmanager
def _first_on_path(folder: str) -> Iterator[None]:
    """Search ``folder`` first for imports while the block runs, then take it off again."""
    sys.path.insert(0, folder)
    try:
        yield
    finally:
        try:
            sys.path.remove(folder)
        except ValueError:
            pass


def wrap_python(obj: Any, *, spec: str, kind: str, sha256: str | None, opts: Options,
                details: dict[str, Any]) -> Model:
    """A Model around an estimator-like object or a scoring function."""
    if isinstance(obj, type):
        raise ModelError(
            f"model `{spec}` is a class ({obj.__name__}), not a fitted model; expose the fitted "
            "object or a function of one DataFrame"
        )
    has = {m: callable(getattr(obj, m, None))
           for m in ("predict_proba", "decision_function", "predict")}
    if not any(has.values()):
        if not callable(obj):
            raise ModelError(
                f"model `{spec}` is a {type(obj).__name__}: it has no predict_proba, "
                "decision_function or predict, and is not a function"
            )
        return _wrap_function(obj, spec=spec, kind=kind, sha256=sha256, opts=opts,
                              details=details)

    model_names = getattr(obj, "feature_names_in_", None)
    n_in = getattr(obj, "n_features_in_", None)
    if model_names is not None:
        fnames = reconcile_names(tuple(str(c) for c in model_names), opts.feature_names, spec)
        as_array = False
    else:
        fnames = opts.feature_names
        check_count(fnames, None if n_in is None else int(n_in), spec)
        # fitted on an array: pass an array, as it was fitted (and without sklearn's warning)
        as_array = n_in is not None
    classes = getattr(obj, "classes_", None)
    classes = None if classes is None else list(np.asarray(classes).tolist())
    pos_info: dict[str, Any] = {"classes": classes, "positive": opts.positive}

    def inputs(batch: pd.DataFrame) -> Any:
        # a copy, so that a model writing into its input cannot reach the caller's frame
        return batch.to_numpy(copy=True) if as_array else batch.copy()

    if has["predict_proba"]:
        idx = None
        if classes is not None:
            idx = class_index(classes, opts.positive, spec, opts)
            label = f"class `{classes[idx]!r}`"
        else:
            label = "the last column" if opts.positive is None else f"column {opts.positive!r}"

        def score(batch: pd.DataFrame) -> np.ndarray:
            p = np.asarray(obj.predict_proba(inputs(batch)), dtype=np.float64)
            if p.ndim == 2:
                if idx is not None:
                    if p.shape[1] != len(classes):
                        raise BatchFailure(f"predict_proba gave {p.shape[1]} columns for "
                                            f"{len(classes)} classes")
                    return p[:, idx]
                return p[:, index_from_positive(opts.positive, p.shape[1], spec)]
            return p
        transform = f"predict_proba, column of {label}"
        probability = True
    elif has["decision_function"]:
        sign = 1.0
        if classes is not None:
            if len(classes) != 2:
                raise ModelError(f"model `{spec}` has {len(classes)} classes and no "
                                 "predict_proba; probe scores binary classifiers")
            # decision_function > 0 means classes_[1]
            sign = 1.0 if class_index(classes, opts.positive, spec, opts) == 1 else -1.0

        def score(batch: pd.DataFrame) -> np.ndarray:
            d = np.asarray(obj.decision_function(inputs(batch)), dtype=np.float64)
            if d.ndim == 2 and d.shape[1] == 1:
                d = d[:, 0]
            if d.ndim != 1:
                raise BatchFailure(f"decision_function gave shape {d.shape}; a binary "
                                    "classifier gives one margin per row")
            return _sigmoid(sign * d)
        transform = (
            "logistic sigmoid of decision_function (threshold 0.5 is margin 0); "
            "not a calibrated probability"
        )
        probability = False
    else:
        positive_label = None
        if classes is not None:
            positive_label = classes[class_index(classes, opts.positive, spec, opts)]
        elif opts.positive is not None:
            positive_label = opts.positive

        def score(batch: pd.DataFrame) -> np.ndarray:
            labels = np.asarray(obj.predict(inputs(batch)))
            if labels.ndim == 2 and labels.shape[1] == 1:
                labels = labels[:, 0]
            if positive_label is not None:
                return labels_equal(labels, positive_label)
            return zero_one(labels)
        transform = "hard labels from predict (1 for the positive class, else 0)"
        probability = True

    return Model(
        spec=spec, kind=kind, sha256=sha256, feature_names=fnames,
        categories=sklearn_categories(obj), score_batch=score, transform=transform,
        probability=probability, details={**details, **pos_info}, batch_size=opts.batch_size,
        allow_unseen=opts.allow_unseen,
        n_inputs=int(n_in) if (fnames is None and n_in is not None) else None,
    )


def _wrap_function(fn: Callable, *, spec: str, kind: str, sha256: str | None, opts: Options,
                   details: dict[str, Any]) -> Model:
    try:
        sig = inspect.signature(fn)
    except (TypeError, ValueError):
        sig = None
    if sig is not None:
        params = list(sig.parameters.values())
        positional = [p for p in params
                      if p.kind in (p.POSITIONAL_ONLY, p.POSITIONAL_OR_KEYWORD, p.VAR_POSITIONAL)]
        if not positional:
            raise ModelError(
                f"model `{spec}` is a function of no arguments; probe calls it as f(frame) and "
                "does not guess at factories: expose the fitted object or a function of one "
                "DataFrame"
            )
    name = getattr(fn, "__qualname__", type(fn).__name__)
    return Model(
        spec=spec, kind=kind, sha256=sha256, feature_names=opts.feature_names, categories={},
        score_batch=lambda batch: fn(batch.copy()),  # a copy: the caller's frame stays intact
        transform=f"scores returned by `{name}(frame)`", probability=True,
        details=details, batch_size=opts.batch_size, allow_unseen=opts.allow_unseen,
    )


def _sigmoid(x: np.ndarray) -> np.ndarray:
    from scipy.special import expit

    return expit(x)
