"""`load_model`: a model spec (or an in-memory model) to the loader of its kind.

Specs with a prefix (``py:``, ``cmd:``, ``http(s)://``, ``column:``) go to their module; anything
else is a model file, recognised by its extension (or, for LightGBM, by its first bytes). Pickles
are refused here, before a byte is loaded, unless ``trust_pickle`` is set or ``sha256`` pins the
file. Model files and ``py:`` models are handed to :mod:`.isolated` unless ``isolate=False``;
:func:`load_spec` is what runs in the child.
"""

from __future__ import annotations

import hashlib
import os
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from probe.errors import ModelError, TrustError

from .column import load_column
from .files import check_pin, close_files, read_bytes, resolve
from .isolated import load_isolated
from .lightgbm_file import load_lightgbm
from .model import Model
from .onnx_file import load_onnx
from .options import Options, load_model_iv
from .pickle_file import load_pickle
from .python import load_python, wrap_python
from .remote import load_command, load_http
from .skops_file import load_skops

__all__ = ["ACCEPTED_SPECS", "load_model", "load_spec"]

#: The model specs :func:`load_model` accepts, as shown in error messages.
ACCEPTED_SPECS = (
    "model.joblib / model.pkl / model.pickle (needs --trust-pickle or a sha256 pin)",
    "model.skops",
    "model.txt / model.lgb (LightGBM)",
    "model.onnx",
    "py:MODULE:ATTR",
    "cmd:COMMAND",
    "http://HOST:PORT/PATH",
    "column:NAME",
)

_PICKLE_SUFFIXES = (".joblib", ".pkl", ".pickle")
#: Kinds that never run in a child: ``cmd:`` and ``http:`` already run outside this process,
#: ``column:`` runs no code.
_OUTSIDE_OR_DATA = ("cmd:", "http://", "https://", "column:")


def load_model(
    spec: str | os.PathLike | object,
    *,
    base_dir: str | Path | None = None,
    positive: Any = None,
    positive_class: Any = None,
    label_values: Sequence | None = None,
    trust_pickle: bool = False,
    sha256: str | None = None,
    trusted_types: Sequence[str] = (),
    feature_names: Sequence[str] | None = None,
    batch_size: int = 50_000,
    timeout: float = 600.0,
    isolate: bool = True,
    allow_unseen: bool = False,
) -> Model:
    """Turn a model spec (or an in-memory model) into a :class:`Model`.

    Parameters
    ----------
    spec : str, path or object
        A spec from the table in :mod:`probe.adapters` (file path, ``py:``, ``cmd:``,
        ``http(s)://``, ``column:``), or an in-memory object: a fitted estimator with
        ``predict_proba`` (or ``decision_function`` / ``predict``), or a function taking a
        DataFrame and returning one score per row. An in-memory object runs in this process.
    base_dir : str or Path, optional
        Where relative paths, ``py:`` module files and ``cmd:`` commands are resolved and run
        (the plan file's folder); default the current directory.
    positive : optional
        The label value of the positive class, matched to the model's ``classes_`` with
        ``1 == "1" == True``; default the last class.
    positive_class : optional
        The model's class that means the label's positive value, when the model's classes and
        the label's values differ (a model trained on 0/1, a holdout labelled yes/no).
    label_values : sequence, optional
        The label's values, named in the error when ``positive`` is none of the model's classes.
    trust_pickle : bool, default=False
        Allow loading pickle/joblib files, which executes code.
    sha256 : str, optional
        The SHA-256 (hex) the model file must have; any other file is refused. A pickle whose
        hash matches is trusted without ``trust_pickle``.
    trusted_types : sequence of str, default=()
        Types a skops file may use beyond skops' safe list.
    feature_names : sequence of str, optional
        The model's input columns in order, for models that do not record them; when the model
        does record them the two must name the same columns.
    batch_size : int, default=50000
        Rows per call to the model.
    timeout : float, default=600.0
        Seconds loading the model, and then each batch, may take, for every kind that runs
        outside this process: an isolated model file or ``py:`` module (its process is
        killed), a ``cmd:`` command (killed), an ``http(s)://`` endpoint (the request gives up
        when it stays silent that long). A model in this process (``isolate=False``, an
        in-memory object, ``column:``) has no time limit.
    isolate : bool, default=True
        Load and score model files and ``py:`` models in a child process of their own, so that
        a crash, a hang or an exit inside the model becomes a :class:`ModelError`.
    allow_unseen : bool, default=False
        Score rows whose categorical value the model never saw (as the model treats unknown
        values) instead of refusing them; the counts are in ``describe()["unseen_values"]``.

    Returns
    -------
    Model

    Raises
    ------
    ModelError
        The file is missing, unreadable or damaged, the spec is not understood, the model does
        not fit the protocol, or its process crashed, exited or gave no answer in time.
    TrustError
        The file would execute code (pickle) or use types (skops) that were not trusted, or its
        SHA-256 is not the pinned one.
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
    opts = load_model_iv(
        base_dir=base_dir, positive=positive, positive_class=positive_class,
        label_values=label_values, trust_pickle=trust_pickle, sha256=sha256,
        trusted_types=trusted_types, feature_names=feature_names, batch_size=batch_size,
        timeout=timeout, isolate=isolate, allow_unseen=allow_unseen,
    )
    if not isinstance(spec, (str, os.PathLike)):
        name = f"object:{type(spec).__name__}"
        return wrap_python(spec, spec=name, kind="object", sha256=None, opts=opts, details={})
    text = os.fspath(spec).strip()
    if not text:
        raise ModelError(f"the model spec is empty; accepted specs: {', '.join(ACCEPTED_SPECS)}")
    lower = text.lower()
    if opts.isolate and not lower.startswith(_OUTSIDE_OR_DATA):
        if not lower.startswith("py:"):
            _file_path(text, opts)  # refuse a missing file or an untrusted pickle without a child
        return load_isolated(text, opts)
    return load_spec(text, opts)


def load_spec(text: str, opts: Options) -> Model:
    """The Model of a (non-empty) spec, loaded in this process: the child's entry point too."""
    lower = text.lower()
    if lower.startswith("py:"):
        return load_python(text, opts)
    if lower.startswith(_OUTSIDE_OR_DATA):
        check_pin(None, text, opts.sha256)
    if lower.startswith("cmd:"):
        return load_command(text, opts)
    if lower.startswith(("http://", "https://")):
        return load_http(text, opts)
    if lower.startswith("column:"):
        return load_column(text, opts)
    return _load_file(text, opts)


def _file_path(text: str, opts: Options) -> Path:
    """The model file's path, once it exists; an untrusted, unpinned pickle is refused here,
    before a byte of it is loaded."""
    path = resolve(text, opts.base)
    if not path.exists():
        raise ModelError(f"model file `{text}` not found{close_files(path)}")
    if path.is_dir():
        raise ModelError(f"model file `{text}` is a folder, not a file")
    if path.suffix.lower() in _PICKLE_SUFFIXES and not (opts.trust_pickle or opts.sha256):
        sha = hashlib.sha256(read_bytes(path, text)).hexdigest()
        raise TrustError(
            f"model file `{text}` is a pickle, and loading a pickle executes arbitrary code; "
            "if you trust its source, pass --trust-pickle, or pin the file with "
            f'sha256 = "{sha}" under [model] in the plan'
        )
    return path


def _load_file(text: str, opts: Options) -> Model:
    path = _file_path(text, opts)
    suffix = path.suffix.lower()
    data = read_bytes(path, text)
    check_pin(hashlib.sha256(data).hexdigest(), text, opts.sha256)  # before a byte is loaded
    if suffix in _PICKLE_SUFFIXES:
        return load_pickle(data, text, opts, trust="sha256" if opts.sha256 else "flag")
    if suffix == ".skops":
        return load_skops(data, text, opts)
    if suffix == ".onnx":
        return load_onnx(data, text, opts)
    if suffix in (".txt", ".lgb") or data[:4] == b"tree":
        if data[:4] != b"tree":
            raise ModelError(
                f"model file `{text}` is not a LightGBM model file (those start with `tree`)"
            )
        return load_lightgbm(data, text, opts)
    raise ModelError(
        f"model file `{text}` has an extension probe does not know ({suffix or 'none'}); "
        f"accepted specs: {', '.join(ACCEPTED_SPECS)}"
    )
