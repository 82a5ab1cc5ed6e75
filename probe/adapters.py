"""The black-box model adapter: every model spec becomes one :class:`Model`.

The protocol
------------
Everything downstream of this module sees a model only through one method::

    model.scores(frame) -> np.ndarray   # float64, read-only, shape (len(frame),), in [0, 1]

the probability of the positive class for each row; the decision is ``scores >= threshold``.
:func:`load_model` turns a spec into a :class:`Model`:

=============================  ============  ====================================================
spec                           kind          how it is scored
=============================  ============  ====================================================
``model.joblib|.pkl|.pickle``  ``pickle``    the unpickled estimator (needs ``trust_pickle``)
``model.skops``                ``skops``     the estimator, loaded with skops' type checking
``model.txt|.lgb``             ``lightgbm``  ``lightgbm.Booster.predict`` (also any text file
                                             that starts with ``tree``)
``model.onnx``                 ``onnx``      onnxruntime on the CPU (``pip install 'probe[onnx]'``)
``py:MODULE:ATTR``             ``python``    an object with ``predict_proba`` (or
                                             ``decision_function`` / ``predict``), or a function
                                             ``f(frame) -> scores``
``cmd:COMMAND``                ``command``   a program: CSV with a header on stdin, one score per
                                             line on stdout, once per batch
``http(s)://HOST:PORT/PATH``   ``http``      POST ``{"records": [...]}``, answer a JSON list of
                                             numbers or ``{"scores": [...]}``, once per batch
``column:NAME``                ``column``    the scores are already a column of the data
(an in-memory object)          ``object``    as for ``py:``; the Python API passes it directly
=============================  ============  ====================================================

The adapter selects and orders the model's input columns (``Model.feature_names``: from
``feature_names_in_``, the booster's feature names, the ONNX inputs or the ``feature_names``
argument; ``None`` passes the whole frame), scores in batches, and normalises the output to one
positive-class score: the ``predict_proba`` column of the positive class (``classes_`` matched to
``positive``, where ``1 == "1" == True``; else the last column); a logistic sigmoid of
``decision_function`` when that is all the model has (so threshold 0.5 is margin 0); 0/1 hard
labels when it only has ``predict``. :meth:`Model.describe` records which.

Every failure is one :class:`~probe.errors.ModelError` line that names the model spec and, for a
scoring failure, the rows of the failing batch (positions counted from 0, both ends included):
"model `cmd:python score.py` failed on rows 50000–99999: <first line of the cause>". Scores that
are NaN or infinite, of the wrong length, or outside [0, 1] for a probability output are failures
too: a wrong number never travels silently. The input frame is never modified.

The trust model
---------------
Loading a pickle (``.joblib``, ``.pkl``, ``.pickle``) executes whatever code the file names, so it
is refused with :class:`~probe.errors.TrustError` unless the user says ``trust_pickle=True``
(``--trust-pickle`` on the command line, ``trust_pickle = true`` under ``[model]`` in the plan).
The file is read once; its SHA-256 is computed on those bytes and the model is loaded from the same
bytes, so the recorded hash is the hash of what ran. skops files are checked with
``skops.io.get_untrusted_types`` first: any type outside skops' safe list must be named in
``trusted_types`` (``trusted_types = [...]`` in the plan, ``--trust-type`` on the command line),
otherwise :class:`~probe.errors.TrustError` lists them. LightGBM and ONNX files are data, not code.
``py:`` and ``cmd:`` specs name code the user chose to run, so they need no flag. A model that
records no input names (``py:``, ``cmd:``, ``http:`` without ``feature_names``) is given every column
of the frame it is asked to score: pass ``feature_names`` to send only the inputs (``probe run``
never passes the label).
"""

from __future__ import annotations

import difflib
import hashlib
import importlib
import importlib.util
import inspect
import io
import json
import math
import os
import shlex
import shutil
import subprocess
import sys
import urllib.error
import urllib.request
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from probe.data import sha256_file
from probe.errors import DataError, ModelError, PlanError, ProbeError, TrustError

__all__ = ["ACCEPTED_SPECS", "Model", "load_model"]

#: The model specs :func:`load_model` accepts, as shown in error messages.
ACCEPTED_SPECS = (
    "model.joblib / model.pkl / model.pickle (needs trust_pickle)",
    "model.skops",
    "model.txt / model.lgb (LightGBM)",
    "model.onnx",
    "py:MODULE:ATTR",
    "cmd:COMMAND",
    "http://HOST:PORT/PATH",
    "column:NAME",
)

_PICKLE_SUFFIXES = (".joblib", ".pkl", ".pickle")
_PROBABILITY_OBJECTIVES = ("binary", "cross_entropy", "xentropy")

ScoreFn = Callable[[pd.DataFrame], Any]


class _BatchFailure(Exception):
    """A scoring problem the adapter itself detected; the message is the cause, one line."""


# --------------------------------------------------------------------------------------------
# The Model
# --------------------------------------------------------------------------------------------


class Model:
    """A loaded model behind one protocol: :meth:`scores` gives positive-class probabilities.

    Build one with :func:`load_model`; a ``Model`` cannot be changed after it is made.

    Attributes
    ----------
    spec : str
        The spec it was loaded from (``"object:<Type>"`` for an in-memory object).
    kind : str
        One of ``"pickle"``, ``"skops"``, ``"lightgbm"``, ``"onnx"``, ``"python"``,
        ``"command"``, ``"http"``, ``"column"``, ``"object"``.
    sha256 : str or None
        SHA-256 of the model file (of the module file for ``py:``); None where there is no file.
    feature_names : tuple of str or None
        The input columns the model reads, in order; None passes the whole frame.
    categories : dict of str to tuple
        For categorical inputs, the levels the model knows (empty when unknown).
    """

    __slots__ = (
        "_spec",
        "_kind",
        "_sha256",
        "_feature_names",
        "_categories",
        "_score_batch",
        "_transform",
        "_probability",
        "_details",
        "_batch_size",
        "_n_inputs",
        "_required",
        "_frozen",
    )

    def __init__(
        self,
        *,
        spec: str,
        kind: str,
        sha256: str | None,
        feature_names: tuple[str, ...] | None,
        categories: dict[str, tuple],
        score_batch: ScoreFn,
        transform: str,
        probability: bool,
        details: dict[str, Any],
        batch_size: int,
        n_inputs: int | None = None,
        required: tuple[str, ...] | None = None,
    ) -> None:
        self._spec = spec
        self._kind = kind
        self._sha256 = sha256
        self._feature_names = feature_names
        self._categories = {str(k): tuple(v) for k, v in categories.items()}
        self._score_batch = score_batch
        self._transform = transform
        self._probability = probability
        self._details = dict(details)
        self._batch_size = batch_size
        self._n_inputs = n_inputs
        self._required = required if required is not None else feature_names
        self._frozen = True

    def __setattr__(self, name: str, value: Any) -> None:
        if getattr(self, "_frozen", False):
            raise AttributeError(f"a Model cannot be changed (tried to set `{name}`)")
        object.__setattr__(self, name, value)

    def __repr__(self) -> str:
        return f"Model(kind={self._kind!r}, spec={self._spec!r})"

    spec = property(lambda self: self._spec, doc="The spec the model was loaded from.")
    kind = property(lambda self: self._kind, doc="What kind of model this is.")
    sha256 = property(lambda self: self._sha256, doc="SHA-256 of the model file, or None.")
    feature_names = property(
        lambda self: self._feature_names, doc="The input columns in order, or None."
    )

    @property
    def categories(self) -> dict[str, tuple]:
        """For categorical inputs, the levels the model knows (a fresh dict)."""
        return dict(self._categories)

    def scores(
        self,
        frame: pd.DataFrame,
        *,
        progress: Callable[[int, int], None] | None = None,
    ) -> np.ndarray:
        """Score every row: the probability of the positive class.

        Parameters
        ----------
        frame : pandas.DataFrame
            The rows to score; it must hold every column in :attr:`feature_names`. It is not
            modified.
        progress : callable, optional
            Called as ``progress(done_rows, total_rows)`` after each batch.

        Returns
        -------
        numpy.ndarray
            float64, read-only, shape ``(len(frame),)``, values in [0, 1].

        Raises
        ------
        ModelError
            A feature column is missing, or a batch failed or gave unusable scores; the
            message names the model and the rows of the batch.
        """
        if not isinstance(frame, pd.DataFrame):
            raise DataError(
                f"model `{self._spec}` scores a pandas DataFrame, got {type(frame).__name__}"
            )
        X = self._select(frame)
        total = len(X)
        out = np.empty(total, dtype=np.float64)
        if total == 0 and progress is not None:
            progress(0, 0)
        for start in range(0, total, self._batch_size):
            stop = min(total, start + self._batch_size)
            out[start:stop] = self._score_rows(X.iloc[start:stop], start, stop)
            if progress is not None:
                progress(stop, total)
        out.flags.writeable = False
        return out

    def describe(self) -> dict[str, Any]:
        """Provenance of the model, JSON-ready.

        Returns
        -------
        dict
            ``spec``, ``kind``, ``sha256``, ``feature_names`` (list or None), ``score`` (how the
            raw output became a score), ``probability`` (whether the output is a probability),
            ``batch_size``, and kind-specific keys (``trusted_types`` for skops, ``objective``
            for LightGBM, ``classes`` and ``positive`` where known).
        """
        out: dict[str, Any] = {
            "spec": self._spec,
            "kind": self._kind,
            "sha256": self._sha256,
            "feature_names": None if self._feature_names is None else list(self._feature_names),
            "score": self._transform,
            "probability": self._probability,
            "batch_size": self._batch_size,
        }
        out.update({k: _jsonable(v) for k, v in self._details.items()})
        return out

    # -- internals ------------------------------------------------------------------------

    def _select(self, frame: pd.DataFrame) -> pd.DataFrame:
        cols = self._required
        if cols is None:
            if self._n_inputs is not None and frame.shape[1] != self._n_inputs:
                raise ModelError(
                    f"model `{self._spec}` takes {self._n_inputs} input columns and does not "
                    f"name them, but the data has {frame.shape[1]}; give `feature_names`"
                )
            return frame
        present = {str(c) for c in frame.columns}
        missing = [c for c in cols if c not in present]
        if missing:
            raise ModelError(
                f"model `{self._spec}` needs "
                f"{_plural(len(missing), 'column')} {_ticks(missing)} that the data lacks"
                f"{_close_names(missing, [str(c) for c in frame.columns])}"
            )
        names = [str(c) for c in frame.columns]
        dupes = sorted({c for c in cols if names.count(c) > 1})
        if dupes:
            raise ModelError(
                f"model `{self._spec}` reads {_ticks(dupes)}, which the data has more than once"
            )
        if names == list(cols):
            return frame
        by_name = {str(c): c for c in frame.columns}
        return frame.loc[:, [by_name[c] for c in cols]]

    def _score_rows(self, batch: pd.DataFrame, start: int, stop: int) -> np.ndarray:
        where = f"model `{self._spec}` failed on rows {start}\u2013{stop - 1}"
        try:
            raw = self._score_batch(batch)
            values = _as_scores(raw, stop - start, batch.index)
        except _BatchFailure as exc:
            raise ModelError(f"{where}: {exc}") from exc
        except ProbeError as exc:
            raise ModelError(f"{where}: {_first_line(str(exc))}") from exc
        except (Exception, SystemExit) as exc:  # the model's own failure, sys.exit() included
            raise ModelError(f"{where}: {type(exc).__name__}: {_first_line(str(exc))}") from exc
        bad = ~np.isfinite(values)
        if bad.any():
            first = start + int(np.flatnonzero(bad)[0])
            raise ModelError(
                f"{where}: {int(bad.sum())} of {stop - start} scores are NaN or infinite "
                f"(first at row {first})"
            )
        if self._probability:
            outside = (values < 0.0) | (values > 1.0)
            if outside.any():
                i = int(np.flatnonzero(outside)[0])
                raise ModelError(
                    f"{where}: {int(outside.sum())} scores lie outside [0, 1] (first at row "
                    f"{start + i}: {values[i]:.6g}); probe expects the positive-class probability"
                )
        return values


# --------------------------------------------------------------------------------------------
# load_model
# --------------------------------------------------------------------------------------------


def load_model(
    spec: str | os.PathLike | object,
    *,
    base_dir: str | Path | None = None,
    positive: Any = None,
    trust_pickle: bool = False,
    trusted_types: Sequence[str] = (),
    feature_names: Sequence[str] | None = None,
    batch_size: int = 50_000,
    timeout: float = 600.0,
) -> Model:
    """Turn a model spec (or an in-memory model) into a :class:`Model`.

    Parameters
    ----------
    spec : str, path or object
        A spec from the module's table (file path, ``py:``, ``cmd:``, ``http(s)://``,
        ``column:``), or an in-memory object: a fitted estimator with ``predict_proba``
        (or ``decision_function`` / ``predict``), or a function taking a DataFrame and
        returning one score per row.
    base_dir : str or Path, optional
        Where relative paths, ``py:`` module files and ``cmd:`` commands are resolved and run
        (the plan file's folder); default the current directory.
    positive : optional
        The label value of the positive class, matched to the model's ``classes_`` with
        ``1 == "1" == True``; default the last class.
    trust_pickle : bool, default=False
        Allow loading pickle/joblib files, which executes code.
    trusted_types : sequence of str, default=()
        Types a skops file may use beyond skops' safe list.
    feature_names : sequence of str, optional
        The model's input columns in order, for models that do not record them; when the model
        does record them the two must name the same columns.
    batch_size : int, default=50000
        Rows per call to the model.
    timeout : float, default=600.0
        Seconds one batch may take for ``cmd:`` and ``http(s)://`` models.

    Returns
    -------
    Model

    Raises
    ------
    ModelError
        The file is missing or unreadable, the spec is not understood, or the model does not
        fit the protocol.
    TrustError
        The file would execute code (pickle) or use types (skops) that were not trusted.
    PlanError
        An option has a bad value.

    Notes
    -----
    ``py:MODULE:ATTR`` accepts a dotted module importable from ``sys.path`` (``base_dir`` is
    searched first) or a path to a ``.py`` file relative to ``base_dir``; ``ATTR`` (dotted
    for a nested attribute) must be a fitted object with ``predict_proba``,
    ``decision_function`` or ``predict``, or a function of one DataFrame. A class or a
    zero-argument factory is refused rather than guessed at: expose the fitted object itself.

    Examples
    --------
    >>> import pandas as pd
    >>> model = load_model("column:score")
    >>> model.scores(pd.DataFrame({"score": [0.2, 0.9], "age": [30, 41]})).tolist()
    [0.2, 0.9]
    >>> model.describe()["kind"]
    'column'
    """
    opts = _load_model_iv(
        base_dir=base_dir,
        positive=positive,
        trust_pickle=trust_pickle,
        trusted_types=trusted_types,
        feature_names=feature_names,
        batch_size=batch_size,
        timeout=timeout,
    )
    if not isinstance(spec, (str, os.PathLike)):
        name = f"object:{type(spec).__name__}"
        return _wrap_python(spec, spec=name, kind="object", sha256=None, opts=opts, details={})
    text = os.fspath(spec).strip()
    if not text:
        raise ModelError(f"the model spec is empty; accepted specs: {', '.join(ACCEPTED_SPECS)}")
    lower = text.lower()
    if lower.startswith("py:"):
        return _load_python(text, opts)
    if lower.startswith("cmd:"):
        return _load_command(text, opts)
    if lower.startswith(("http://", "https://")):
        return _load_http(text, opts)
    if lower.startswith("column:"):
        return _load_column(text, opts)
    return _load_file(text, opts)


@dataclass(frozen=True)
class _Options:
    """The validated, normalised options of one :func:`load_model` call."""

    base: Path
    positive: Any
    trust_pickle: bool
    trusted_types: tuple[str, ...]
    feature_names: tuple[str, ...] | None
    batch_size: int
    timeout: float


def _load_model_iv(*, base_dir, positive, trust_pickle, trusted_types, feature_names,
                   batch_size, timeout) -> _Options:
    """Validate and normalise every option of :func:`load_model` once."""
    if isinstance(positive, np.generic):
        positive = positive.item()
    if isinstance(trusted_types, str) or not all(isinstance(t, str) for t in trusted_types):
        raise PlanError(f"`trusted_types` must be a list of type names, got {trusted_types!r}")
    if feature_names is not None:
        if isinstance(feature_names, str):
            raise PlanError(
                f"`feature_names` must be a list of column names, got {feature_names!r}"
            )
        feature_names = tuple(str(c) for c in feature_names)
        if not feature_names:
            raise PlanError("`feature_names` is empty; leave it out to pass every column")
        dupes = sorted({c for c in feature_names if feature_names.count(c) > 1})
        if dupes:
            raise PlanError(f"`feature_names` lists {_ticks(dupes)} more than once")
    if (isinstance(batch_size, bool) or not isinstance(batch_size, (int, np.integer))
            or batch_size < 1):
        raise PlanError(f"`batch_size` must be a whole number of at least 1, got {batch_size!r}")
    if (isinstance(timeout, bool) or not isinstance(timeout, (int, float))
            or not math.isfinite(timeout) or timeout <= 0):
        raise PlanError(f"`timeout` must be a positive number of seconds, got {timeout!r}")
    return _Options(
        base=Path(base_dir).expanduser() if base_dir is not None else Path.cwd(),
        positive=positive,
        trust_pickle=bool(trust_pickle),
        trusted_types=tuple(trusted_types),
        feature_names=feature_names,
        batch_size=int(batch_size),
        timeout=float(timeout),
    )


# --------------------------------------------------------------------------------------------
# files: pickle, skops, LightGBM, ONNX
# --------------------------------------------------------------------------------------------


def _load_file(text: str, opts: _Options) -> Model:
    path = Path(text).expanduser()
    if not path.is_absolute():
        path = opts.base / path
    if not path.exists():
        raise ModelError(f"model file `{text}` not found{_close_files(path)}")
    if path.is_dir():
        raise ModelError(f"model file `{text}` is a folder, not a file")
    suffix = path.suffix.lower()
    if suffix in _PICKLE_SUFFIXES:
        if not opts.trust_pickle:
            raise TrustError(
                f"model file `{text}` is a pickle, and loading a pickle executes arbitrary code; "
                "if you trust its source, pass --trust-pickle (or set trust_pickle = true "
                "under [model] in the plan)"
            )
        data = _read(path, text)
        return _load_pickle(data, text, opts)
    if suffix == ".skops":
        return _load_skops(_read(path, text), text, opts)
    if suffix == ".onnx":
        return _load_onnx(_read(path, text), text, opts)
    data = _read(path, text)
    if suffix in (".txt", ".lgb") or data[:4] == b"tree":
        if data[:4] != b"tree":
            raise ModelError(
                f"model file `{text}` is not a LightGBM model file (those start with `tree`)"
            )
        return _load_lightgbm(data, text, opts)
    raise ModelError(
        f"model file `{text}` has an extension probe does not know ({suffix or 'none'}); "
        f"accepted specs: {', '.join(ACCEPTED_SPECS)}"
    )


def _read(path: Path, text: str) -> bytes:
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise ModelError(f"cannot read model file `{text}`: {exc.strerror or exc}") from exc
    if not data:
        raise ModelError(f"model file `{text}` is empty")
    return data


def _load_pickle(data: bytes, text: str, opts: _Options) -> Model:
    import joblib

    sha = hashlib.sha256(data).hexdigest()
    try:
        obj = joblib.load(io.BytesIO(data))
    except ModuleNotFoundError as exc:
        raise ModelError(
            f"loading model file `{text}` needs the module `{exc.name}`, which is not installed"
        ) from exc
    except Exception as exc:
        raise ModelError(
            f"cannot load model file `{text}`: {type(exc).__name__}: {_first_line(str(exc))}"
        ) from exc
    return _wrap_python(obj, spec=text, kind="pickle", sha256=sha, opts=opts, details={})


def _load_skops(data: bytes, text: str, opts: _Options) -> Model:
    import skops.io as sio

    sha = hashlib.sha256(data).hexdigest()
    try:
        untrusted = list(sio.get_untrusted_types(data=data))
    except Exception as exc:
        raise ModelError(
            f"cannot read model file `{text}` as skops: {type(exc).__name__}: "
            f"{_first_line(str(exc))}"
        ) from exc
    refused = [t for t in untrusted if t not in opts.trusted_types]
    if refused:
        listed = ", ".join(f'"{t}"' for t in refused)
        flags = " ".join(f"--trust-type {t}" for t in refused)
        raise TrustError(
            f"model file `{text}` uses {_plural(len(refused), 'type')} that skops does not "
            f"trust by default: {_ticks(refused)}; if you trust its source, set "
            f"trusted_types = [{listed}] under [model] in the plan (or pass {flags})"
        )
    try:
        obj = sio.loads(data, trusted=untrusted)
    except Exception as exc:
        raise ModelError(
            f"cannot load model file `{text}`: {type(exc).__name__}: {_first_line(str(exc))}"
        ) from exc
    return _wrap_python(
        obj, spec=text, kind="skops", sha256=sha, opts=opts,
        details={"trusted_types": sorted(untrusted)},
    )


def _load_lightgbm(data: bytes, text: str, opts: _Options) -> Model:
    import lightgbm

    sha = hashlib.sha256(data).hexdigest()
    try:
        model_str = data.decode("utf-8")
        booster = lightgbm.Booster(model_str=model_str)
    except Exception as exc:
        raise ModelError(
            f"cannot load LightGBM model file `{text}`: {type(exc).__name__}: "
            f"{_first_line(str(exc))}"
        ) from exc
    header = _lightgbm_header(model_str)
    objective = header.get("objective", "")
    num_class = int(header.get("num_class", "1") or 1)
    names = tuple(booster.feature_name())
    unnamed = all(n == f"Column_{i}" for i, n in enumerate(names))
    if unnamed:
        fnames = opts.feature_names
        if fnames is not None and len(fnames) != len(names):
            raise ModelError(
                f"model `{text}` takes {len(names)} input columns, but `feature_names` "
                f"lists {len(fnames)}"
            )
    else:
        fnames = _reconcile_names(names, opts.feature_names, text)
    levels = [list(v) for v in (booster.pandas_categorical or [])]
    cat_idx = _as_int_list(booster.params.get("categorical_feature"))
    catmap: dict[str, list] = {}
    if levels and fnames is not None and len(cat_idx) == len(levels):
        catmap = {fnames[i]: lv for i, lv in zip(cat_idx, levels)}

    column = None
    if num_class > 1:
        column = _index_from_positive(opts.positive, num_class, text)
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
        batch_size=opts.batch_size,
        n_inputs=len(names) if fnames is None else None,
    )


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
        raise _BatchFailure(
            f"the LightGBM model knows {len(levels)} categorical columns but does not say which; "
            f"the data has {len(candidates)} non-numeric ones ({_ticks(candidates) or 'none'})"
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
                raise _BatchFailure(
                    f"column `{col}` holds none of the levels the model was trained with "
                    f"(got {seen}; the model knows {known}{', …' if len(levels) > 5 else ''})"
                )
            X[:, j] = codes
        else:
            X[:, j] = _numeric(s, str(col))
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


def _numeric(s: pd.Series, name: str, dtype: Any = np.float64) -> np.ndarray:
    if pd.api.types.is_bool_dtype(s) or (
        pd.api.types.is_numeric_dtype(s) and not isinstance(s.dtype, pd.CategoricalDtype)
    ):
        return s.to_numpy(dtype=dtype, na_value=np.nan)
    try:
        return pd.to_numeric(s.astype(object), errors="raise").to_numpy(
            dtype=dtype, na_value=np.nan
        )
    except (TypeError, ValueError):
        example = next((v for v in s if pd.notna(v) and not _is_number(v)), None)
        raise _BatchFailure(
            f"column `{name}` holds values that are not numbers (e.g. {example!r}), but the "
            "model reads it as a number"
        ) from None


def _load_onnx(data: bytes, text: str, opts: _Options) -> Model:
    try:
        import onnxruntime as ort
    except ImportError as exc:
        raise ModelError(
            f"model `{text}` is an ONNX file, which needs onnxruntime: pip install 'probe[onnx]'"
        ) from exc
    sha = hashlib.sha256(data).hexdigest()
    try:
        session = ort.InferenceSession(data, providers=["CPUExecutionProvider"])
    except Exception as exc:
        raise ModelError(
            f"cannot load ONNX model file `{text}`: {type(exc).__name__}: "
            f"{_first_line(str(exc))}"
        ) from exc
    inputs = session.get_inputs()
    outputs = session.get_outputs()
    prob_out = _onnx_probability_output(outputs, text)
    classes = _onnx_classes(data)

    def second_dim(shape: Any) -> int | None:
        return shape[1] if len(shape) >= 2 and isinstance(shape[1], int) else None

    single = len(inputs) == 1
    width = second_dim(inputs[0].shape) if single else None
    tensor_mode = single and (
        width is None or width > 1 or (opts.feature_names is not None and width == 1)
    )
    n_inputs = None
    if tensor_mode:
        fnames = opts.feature_names
        if fnames is not None and width is not None and len(fnames) != width:
            raise ModelError(
                f"model `{text}` takes {width} input columns, but `feature_names` lists "
                f"{len(fnames)}"
            )
        if fnames is None:
            n_inputs = width
        inp = inputs[0]
        np_type = _onnx_numpy_type(inp.type, text)

        def feed(batch: pd.DataFrame) -> dict[str, np.ndarray]:
            cols = [_onnx_column(batch[c], np_type, str(c)) for c in batch.columns]
            return {inp.name: np.column_stack(cols) if cols else np.empty((len(batch), 0))}
        layout = f"one tensor input `{inp.name}`"
    else:
        fnames = _reconcile_names(tuple(i.name for i in inputs), opts.feature_names, text)
        specs = [(i.name, _onnx_numpy_type(i.type, text), len(i.shape) >= 2) for i in inputs]

        def feed(batch: pd.DataFrame) -> dict[str, np.ndarray]:
            out = {}
            for name, np_type, two_d in specs:
                v = _onnx_column(batch[name], np_type, name)
                out[name] = v.reshape(-1, 1) if two_d else v
            return out
        layout = "one input per column"

    def score(batch: pd.DataFrame) -> np.ndarray:
        result = session.run([prob_out.name], feed(batch))[0]
        if isinstance(result, list):  # zipmap: a list of {class: probability}
            if not result:
                return np.empty(0)
            keys = list(result[0].keys())
            key = keys[_class_index(keys, opts.positive, text)]
            return np.array([row[key] for row in result], dtype=np.float64)
        result = np.asarray(result, dtype=np.float64)
        if result.ndim == 2 and result.shape[1] > 1:
            known = classes if classes is not None and len(classes) == result.shape[1] else None
            if known is not None:
                idx = _class_index(known, opts.positive, text)
            else:
                idx = _index_from_positive(opts.positive, result.shape[1], text)
            return result[:, idx]
        return result

    cls_text = "" if classes is None else f", classes {list(classes)}"
    return Model(
        spec=text, kind="onnx", sha256=sha, feature_names=fnames, categories={},
        score_batch=score,
        transform=f"ONNX output `{prob_out.name}`, positive-class column ({layout}{cls_text})",
        probability=True,
        details={"classes": None if classes is None else list(classes),
                 "positive": opts.positive},
        batch_size=opts.batch_size, n_inputs=n_inputs,
    )


def _onnx_probability_output(outputs: list, text: str) -> Any:
    for o in outputs:
        if "prob" in o.name.lower():
            return o
    for o in outputs:
        if o.type.startswith("seq(map") or o.type in ("tensor(float)", "tensor(double)"):
            return o
    raise ModelError(
        f"model `{text}` has no probability output (outputs: "
        f"{', '.join(o.name for o in outputs)})"
    )


def _onnx_classes(data: bytes) -> list | None:
    try:
        import onnx
    except ImportError:
        return None
    try:
        graph = onnx.load_from_string(data).graph
    except Exception:
        return None
    for node in graph.node:
        for attr in node.attribute:
            if attr.name in ("classlabels_ints", "classlabels_int64s"):
                return list(attr.ints)
            if attr.name == "classlabels_strings":
                return [s.decode("utf-8") for s in attr.strings]
    return None


_ONNX_TYPES = {
    "tensor(float)": np.float32,
    "tensor(double)": np.float64,
    "tensor(int64)": np.int64,
    "tensor(int32)": np.int32,
    "tensor(bool)": np.bool_,
    "tensor(string)": object,
}


def _onnx_numpy_type(onnx_type: str, text: str) -> Any:
    try:
        return _ONNX_TYPES[onnx_type]
    except KeyError:
        raise ModelError(f"model `{text}` has an input of type {onnx_type}, which probe cannot "
                         "fill from a data frame") from None


def _onnx_column(s: pd.Series, np_type: Any, name: str) -> np.ndarray:
    if np_type is object:
        values = s.astype(object).to_numpy()
        return np.array(["" if pd.isna(v) else str(v) for v in values], dtype=object)
    if np_type in (np.int64, np.int32, np.bool_):
        if s.isna().any():
            raise _BatchFailure(f"column `{name}` has missing values, but the model's input "
                                "for it is an integer tensor")
        return _numeric(s, name).astype(np_type)
    return _numeric(s, name).astype(np_type)


# --------------------------------------------------------------------------------------------
# py:, objects and estimators
# --------------------------------------------------------------------------------------------


def _load_python(text: str, opts: _Options) -> Model:
    rest = text[3:].strip()
    module_part, sep, attr = rest.rpartition(":")
    if not sep or not module_part or not attr:
        raise ModelError(f"model spec `{text}` should be py:MODULE:ATTR (e.g. py:mymodels:scorer)")
    sha = None
    if module_part.endswith(".py") or "/" in module_part or os.sep in module_part:
        path = Path(module_part).expanduser()
        if not path.is_absolute():
            path = opts.base / path
        if not path.is_file():
            raise ModelError(f"module file `{module_part}` not found{_close_files(path)}")
        data = _read(path, module_part)
        sha = hashlib.sha256(data).hexdigest()
        module = _import_file(path, sha, text)
    else:
        module = _import_dotted(module_part, opts.base, text)
        file = getattr(module, "__file__", None)
        if file and os.path.isfile(file):
            sha = sha256_file(file)
    obj: Any = module
    for part in attr.split("."):
        if not hasattr(obj, part):
            names = [n for n in dir(obj) if not n.startswith("_")]
            raise ModelError(
                f"model spec `{text}`: `{module_part}` has no attribute `{attr}`"
                f"{_close_names([part], names)}"
            )
        obj = getattr(obj, part)
    return _wrap_python(obj, spec=text, kind="python", sha256=sha, opts=opts, details={})


def _import_file(path: Path, sha: str, text: str) -> Any:
    name = f"_probe_model_{path.stem}_{sha[:12]}"
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.spec_from_file_location(name, path)
    if spec is None or spec.loader is None:
        raise ModelError(f"model spec `{text}`: cannot import `{path.name}`")
    module = importlib.util.module_from_spec(spec)
    folder = str(path.parent)
    sys.modules[name] = module
    sys.path.insert(0, folder)  # so the model file can import its neighbours
    try:
        spec.loader.exec_module(module)
    except (Exception, SystemExit) as exc:
        del sys.modules[name]
        raise ModelError(
            f"model spec `{text}`: importing `{path.name}` failed: {type(exc).__name__}: "
            f"{_first_line(str(exc))}"
        ) from exc
    finally:
        _remove_first(sys.path, folder)
    return module


def _import_dotted(name: str, base: Path, text: str) -> Any:
    folder = str(base)
    sys.path.insert(0, folder)
    try:
        return importlib.import_module(name)
    except ImportError as exc:
        raise ModelError(
            f"model spec `{text}`: cannot import module `{name}`: {_first_line(str(exc))}"
        ) from exc
    except (Exception, SystemExit) as exc:
        raise ModelError(
            f"model spec `{text}`: importing `{name}` failed: {type(exc).__name__}: "
            f"{_first_line(str(exc))}"
        ) from exc
    finally:
        _remove_first(sys.path, folder)


def _remove_first(items: list, value: Any) -> None:
    try:
        items.remove(value)
    except ValueError:
        pass


def _wrap_python(obj: Any, *, spec: str, kind: str, sha256: str | None, opts: _Options,
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
        fnames = _reconcile_names(tuple(str(c) for c in model_names), opts.feature_names, spec)
        as_array = False
    else:
        fnames = opts.feature_names
        if fnames is not None and n_in is not None and len(fnames) != int(n_in):
            raise ModelError(
                f"model `{spec}` takes {int(n_in)} input columns, but `feature_names` lists "
                f"{len(fnames)}"
            )
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
            idx = _class_index(classes, opts.positive, spec)
            label = f"class `{classes[idx]!r}`"
        else:
            label = "the last column" if opts.positive is None else f"column {opts.positive!r}"

        def score(batch: pd.DataFrame) -> np.ndarray:
            p = np.asarray(obj.predict_proba(inputs(batch)), dtype=np.float64)
            if p.ndim == 2:
                if idx is not None:
                    if p.shape[1] != len(classes):
                        raise _BatchFailure(f"predict_proba gave {p.shape[1]} columns for "
                                            f"{len(classes)} classes")
                    return p[:, idx]
                return p[:, _index_from_positive(opts.positive, p.shape[1], spec)]
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
            sign = 1.0 if _class_index(classes, opts.positive, spec) == 1 else -1.0

        def score(batch: pd.DataFrame) -> np.ndarray:
            d = np.asarray(obj.decision_function(inputs(batch)), dtype=np.float64)
            if d.ndim == 2 and d.shape[1] == 1:
                d = d[:, 0]
            if d.ndim != 1:
                raise _BatchFailure(f"decision_function gave shape {d.shape}; a binary "
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
            positive_label = classes[_class_index(classes, opts.positive, spec)]
        elif opts.positive is not None:
            positive_label = opts.positive

        def score(batch: pd.DataFrame) -> np.ndarray:
            labels = np.asarray(obj.predict(inputs(batch)))
            if labels.ndim == 2 and labels.shape[1] == 1:
                labels = labels[:, 0]
            if positive_label is not None:
                return _labels_equal(labels, positive_label)
            return _zero_one(labels)
        transform = "hard labels from predict (1 for the positive class, else 0)"
        probability = True

    return Model(
        spec=spec, kind=kind, sha256=sha256, feature_names=fnames,
        categories=_sklearn_categories(obj), score_batch=score, transform=transform,
        probability=probability, details={**details, **pos_info}, batch_size=opts.batch_size,
        n_inputs=int(n_in) if (fnames is None and n_in is not None) else None,
    )


def _wrap_function(fn: Callable, *, spec: str, kind: str, sha256: str | None, opts: _Options,
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
        details=details, batch_size=opts.batch_size,
    )


def _sklearn_categories(est: Any) -> dict[str, tuple]:
    """The levels known to fitted OneHotEncoder/OrdinalEncoder-like steps, by input column."""
    found: dict[str, tuple] = {}
    try:
        _walk_encoders(est, None, found, depth=0)
    except Exception:  # introspection of third-party objects must never break loading
        return {}
    return found


def _walk_encoders(est: Any, columns: list[str] | None, found: dict[str, tuple],
                   depth: int) -> None:
    if depth > 20 or est is None or isinstance(est, str):
        return
    steps = getattr(est, "steps", None)
    if isinstance(steps, list):  # Pipeline: only the first real step sees the named columns
        first = True
        for step in steps:
            trans = step[1] if isinstance(step, tuple) and len(step) >= 2 else None
            if trans is None or isinstance(trans, str):
                continue
            _walk_encoders(trans, columns if first else None, found, depth + 1)
            first = False
        return
    transformers = getattr(est, "transformers_", None)
    if isinstance(transformers, list):  # ColumnTransformer
        names_in = getattr(est, "feature_names_in_", None)
        names_in = [str(c) for c in names_in] if names_in is not None else columns
        for item in transformers:
            if not (isinstance(item, tuple) and len(item) >= 3):
                continue
            _walk_encoders(item[1], _resolve_columns(item[2], names_in), found, depth + 1)
        return
    union = getattr(est, "transformer_list", None)
    if isinstance(union, list):  # FeatureUnion: every part sees the same columns
        for item in union:
            if isinstance(item, tuple) and len(item) >= 2:
                _walk_encoders(item[1], columns, found, depth + 1)
        return
    calibrated = getattr(est, "calibrated_classifiers_", None)
    if isinstance(calibrated, list) and calibrated:
        _walk_encoders(getattr(calibrated[0], "estimator", None), columns, found, depth + 1)
        return
    cats = getattr(est, "categories_", None)
    if isinstance(cats, list):
        names = getattr(est, "feature_names_in_", None)
        names = [str(c) for c in names] if names is not None else columns
        if names is not None and len(names) == len(cats):
            for name, levels in zip(names, cats):
                found[name] = tuple(np.asarray(levels).tolist())


def _resolve_columns(cols: Any, names_in: list[str] | None) -> list[str] | None:
    if callable(cols):
        return None
    if isinstance(cols, (str, int, np.integer)):
        cols = [cols]
    if isinstance(cols, slice):
        return None if names_in is None else names_in[cols]
    try:
        items = list(cols)
    except TypeError:
        return None
    if items and all(isinstance(c, (bool, np.bool_)) for c in items):
        if names_in is None or len(names_in) != len(items):
            return None
        return [n for n, keep in zip(names_in, items) if keep]
    if all(isinstance(c, (int, np.integer)) for c in items):
        if names_in is None:
            return None
        return [names_in[int(i)] for i in items]
    return [str(c) for c in items]


# --------------------------------------------------------------------------------------------
# cmd:, http(s)://, column:
# --------------------------------------------------------------------------------------------


def _load_command(text: str, opts: _Options) -> Model:
    command = text[4:].strip()
    try:
        argv = shlex.split(command)
    except ValueError as exc:
        raise ModelError(f"model spec `{text}`: cannot split the command: {exc}") from exc
    if not argv:
        raise ModelError(f"model spec `{text}` names no command (cmd:COMMAND)")
    program = argv[0]
    if os.sep in program or "/" in program:
        path = Path(program).expanduser()
        found = (path if path.is_absolute() else opts.base / path).is_file()
    else:
        found = shutil.which(program) is not None
    if not found:
        raise ModelError(f"model `{text}`: the program `{program}` was not found")
    cwd = str(opts.base)
    timeout = opts.timeout

    def score(batch: pd.DataFrame) -> np.ndarray:
        payload = batch.to_csv(index=False).encode("utf-8")
        try:
            proc = subprocess.run(argv, input=payload, capture_output=True, cwd=cwd,
                                  timeout=timeout, check=False)
        except subprocess.TimeoutExpired:
            raise _BatchFailure(f"the command did not finish within {timeout:g} s") from None
        except OSError as exc:
            raise _BatchFailure(f"cannot run the command: {exc.strerror or exc}") from None
        if proc.returncode != 0:
            lines = [ln for ln in proc.stderr.decode("utf-8", "replace").splitlines()
                     if ln.strip()]
            last = lines[-1].strip() if lines else "(nothing on stderr)"
            raise _BatchFailure(f"the command exited with code {proc.returncode}: {last}")
        lines = proc.stdout.decode("utf-8", "replace").splitlines()
        while lines and not lines[-1].strip():
            lines.pop()
        if len(lines) != len(batch):
            raise _BatchFailure(
                f"the command printed {len(lines)} lines for {len(batch)} rows "
                "(one score per line expected)"
            )
        out = np.empty(len(lines), dtype=np.float64)
        for i, line in enumerate(lines):
            try:
                out[i] = float(line.strip())
            except ValueError:
                raise _BatchFailure(
                    f"line {i + 1} of the command's output is not a number: {line.strip()!r:.60}"
                ) from None
        return out

    return Model(
        spec=text, kind="command", sha256=None, feature_names=opts.feature_names,
        categories={}, score_batch=score,
        transform="scores printed by the command (CSV rows on stdin, one score per line)",
        probability=True, details={"argv": argv, "timeout": timeout},
        batch_size=opts.batch_size,
    )


def _load_http(text: str, opts: _Options) -> Model:
    url = text
    timeout = opts.timeout

    def score(batch: pd.DataFrame) -> np.ndarray:
        body = _records_json(batch)
        request = urllib.request.Request(
            url, data=body, method="POST",
            headers={"Content-Type": "application/json", "Accept": "application/json"},
        )
        try:
            with urllib.request.urlopen(request, timeout=timeout) as response:
                raw = response.read()
        except urllib.error.HTTPError as exc:
            detail = _first_line(exc.read(2000).decode("utf-8", "replace")) if exc.fp else ""
            raise _BatchFailure(
                f"HTTP {exc.code} {exc.reason}" + (f": {detail}" if detail else "")
            ) from None
        except urllib.error.URLError as exc:
            if isinstance(exc.reason, TimeoutError):
                raise _BatchFailure(f"no answer within {timeout:g} s") from None
            raise _BatchFailure(f"cannot reach {url}: {exc.reason}") from None
        except TimeoutError:
            raise _BatchFailure(f"no answer within {timeout:g} s") from None
        except OSError as exc:
            raise _BatchFailure(f"cannot reach {url}: {exc}") from None
        return _parse_scores_json(raw)

    return Model(
        spec=text, kind="http", sha256=None, feature_names=opts.feature_names, categories={},
        score_batch=score,
        transform='scores from the endpoint (POST {"records": [...]} per batch)',
        probability=True, details={"timeout": timeout}, batch_size=opts.batch_size,
    )


def _records_json(batch: pd.DataFrame) -> bytes:
    names = [str(c) for c in batch.columns]
    columns = [batch.iloc[:, j].to_numpy(dtype=object, na_value=None)
               for j in range(batch.shape[1])]
    records = [dict(zip(names, row)) for row in zip(*columns)] if columns \
        else [{} for _ in range(len(batch))]
    try:
        return json.dumps({"records": records}, default=_json_default,
                          allow_nan=False).encode("utf-8")
    except ValueError:
        raise _BatchFailure("the rows hold infinite values, which JSON cannot carry") from None


def _json_default(value: Any) -> Any:
    if isinstance(value, np.generic):
        return value.item()
    if hasattr(value, "isoformat"):
        return value.isoformat()
    return str(value)


def _parse_scores_json(raw: bytes) -> np.ndarray:
    try:
        payload = json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, ValueError):
        start = raw[:40].decode("utf-8", "replace")
        raise _BatchFailure(f"the response is not JSON (it starts {start!r})") from None
    if isinstance(payload, dict) and "scores" in payload:
        payload = payload["scores"]
    if not isinstance(payload, list):
        raise _BatchFailure(
            'the response is neither a JSON list of numbers nor {"scores": [...]}'
        )
    out = np.empty(len(payload), dtype=np.float64)
    for i, v in enumerate(payload):
        if v is None:
            out[i] = np.nan
        elif isinstance(v, (int, float)) and not isinstance(v, bool):
            out[i] = v
        else:
            raise _BatchFailure(f"item {i} of the response is not a number: {v!r:.60}")
    return out


def _load_column(text: str, opts: _Options) -> Model:
    name = text[len("column:"):].strip()
    if not name:
        raise ModelError(f"model spec `{text}` names no column (column:NAME)")

    def score(batch: pd.DataFrame) -> np.ndarray:
        return _numeric(batch.iloc[:, 0], name)

    return Model(
        spec=text, kind="column", sha256=None, feature_names=None, categories={},
        score_batch=score, transform=f"scores read from the data column `{name}`",
        probability=True, details={"column": name}, batch_size=opts.batch_size,
        required=(name,),
    )


# --------------------------------------------------------------------------------------------
# small helpers
# --------------------------------------------------------------------------------------------


def _as_scores(raw: Any, n: int, index: pd.Index | None = None) -> np.ndarray:
    """One float per row, or a `_BatchFailure` saying what arrived instead. A pandas answer is
    aligned to the batch's ``index`` (a model may return its rows in another order)."""
    if isinstance(raw, (pd.Series, pd.DataFrame)) and index is not None and len(raw) == n:
        if not raw.index.equals(index):
            if raw.index.has_duplicates or not raw.index.sort_values().equals(index.sort_values()):
                raise _BatchFailure("the model returned scores indexed by other rows than it was given")
            raw = raw.loc[index]
    if isinstance(raw, (pd.Series, pd.DataFrame)):
        raw = raw.to_numpy()
    try:
        arr = np.asarray(raw, dtype=np.float64)
    except (TypeError, ValueError):
        raise _BatchFailure(
            f"the model returned {type(raw).__name__} values that are not numbers"
        ) from None
    if arr.ndim == 2 and arr.shape[1] == 1:
        arr = arr[:, 0]
    if arr.ndim != 1:
        raise _BatchFailure(
            f"the model returned an array of shape {arr.shape}; one score per row expected"
        )
    if arr.shape[0] != n:
        raise _BatchFailure(f"the model returned {arr.shape[0]} scores for {n} rows")
    return arr


def _sigmoid(x: np.ndarray) -> np.ndarray:
    from scipy.special import expit

    return expit(x)


def _label_key(value: Any) -> Any:
    """A comparable form of a class label, so that 1 == 1.0 == "1" == True."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, bool):
        return 1.0 if value else 0.0
    if isinstance(value, (int, float)):
        return float(value)
    if isinstance(value, str):
        s = value.strip()
        if s.lower() == "true":
            return 1.0
        if s.lower() == "false":
            return 0.0
        try:
            return float(s)
        except ValueError:
            return s
    return value


def _class_index(classes: Sequence, positive: Any, spec: str) -> int:
    """Position of the positive class among ``classes`` (default: the last of two)."""
    classes = list(classes)
    if positive is None:
        if len(classes) == 2:
            return 1
        if len(classes) == 1:
            return 0
        raise ModelError(
            f"model `{spec}` has {len(classes)} classes ({_ticks(map(repr, classes))}); "
            "say which is the positive class with `positive`"
        )
    for i, c in enumerate(classes):
        if type(c) is type(positive) and c == positive:
            return i
    key = _label_key(positive)
    matches = [i for i, c in enumerate(classes) if _label_key(c) == key]
    if len(matches) == 1:
        return matches[0]
    raise ModelError(
        f"positive class {positive!r} is not one of the classes of model `{spec}`: "
        f"{', '.join(repr(c) for c in classes)}"
    )


def _index_from_positive(positive: Any, width: int, spec: str) -> int:
    """Column of the positive class when the model does not name its classes."""
    if width == 1:
        return 0
    if positive is None:
        if width == 2:
            return 1
        raise ModelError(
            f"model `{spec}` gives {width} probability columns and does not name its classes; "
            "say which column is the positive class with `positive`"
        )
    key = _label_key(positive)
    if isinstance(key, float) and key.is_integer() and 0 <= key < width:
        return int(key)
    raise ModelError(
        f"model `{spec}` does not name its classes, and positive class {positive!r} is not a "
        f"column number from 0 to {width - 1}"
    )


def _labels_equal(labels: np.ndarray, positive: Any) -> np.ndarray:
    key = _label_key(positive)
    if labels.dtype.kind in "biuf" and isinstance(key, float):
        return (labels.astype(np.float64) == key).astype(np.float64)
    return np.array([_label_key(v) == key for v in labels.tolist()], dtype=np.float64)


def _zero_one(labels: np.ndarray) -> np.ndarray:
    if labels.dtype.kind == "b":
        return labels.astype(np.float64)
    keys = np.array([_label_key(v) for v in labels.tolist()], dtype=object)
    ok = np.array([k in (0.0, 1.0) and isinstance(k, float) for k in keys], dtype=bool)
    if not ok.all():
        bad = labels[~ok][0]
        raise _BatchFailure(
            f"predict returned the label {bad!r}; without classes_ probe needs 0/1 labels "
            "or `positive`"
        )
    return keys.astype(np.float64)


def _reconcile_names(model_names: tuple[str, ...], given: tuple[str, ...] | None,
                     spec: str) -> tuple[str, ...]:
    """The model's own input names win; names given as well must be the same columns."""
    if given is not None and set(given) != set(model_names):
        extra = [c for c in given if c not in model_names]
        lacking = [c for c in model_names if c not in given]
        parts = []
        if lacking:
            parts.append(f"it also reads {_ticks(lacking)}")
        if extra:
            parts.append(f"it does not read {_ticks(extra)}")
        raise ModelError(
            f"`feature_names` does not match the inputs model `{spec}` records: "
            + "; ".join(parts)
        )
    return model_names


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float, np.number)) and not isinstance(v, bool)


def _first_line(text: str) -> str:
    for line in text.splitlines():
        if line.strip():
            return line.strip()
    return "(no message)"


def _ticks(names: Any) -> str:
    return ", ".join(f"`{n}`" for n in names)


def _plural(n: int, word: str) -> str:
    return word if n == 1 else word + "s"


def _close_names(missing: Sequence[str], available: Sequence[str]) -> str:
    lower = {a.lower(): a for a in available}
    hints = []
    for m in missing:
        close = difflib.get_close_matches(m, available, n=3, cutoff=0.6)
        if not close and m.lower() in lower:
            close = [lower[m.lower()]]
        hints.extend(c for c in close if c not in hints)
    return f" (did you mean {_ticks(hints)}?)" if hints else ""


def _close_files(path: Path) -> str:
    try:
        names = [p.name for p in path.parent.iterdir()]
    except OSError:
        return ""
    close = difflib.get_close_matches(path.name, names, n=3, cutoff=0.5)
    return f" (files in that folder with close names: {_ticks(close)})" if close else ""


def _jsonable(value: Any) -> Any:
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    return value
