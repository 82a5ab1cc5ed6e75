"""`load_model`: a model spec (or an in-memory model) to the loader of its kind.

Specs with a prefix (``py:``, ``cmd:``, ``http(s)://``, ``column:``) go to their module; anything
else is a model file, recognised by its extension (or, for LightGBM, by its first bytes). Pickles
are refused here, before a byte is read, unless ``trust_pickle`` is set.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from probe.errors import ModelError, TrustError

from .column import load_column
from .files import close_files, read_bytes, resolve
from .lightgbm_file import load_lightgbm
from .model import Model
from .onnx_file import load_onnx
from .options import Options, load_model_iv
from .pickle_file import load_pickle
from .python import load_python, wrap_python
from .remote import load_command, load_http
from .skops_file import load_skops

__all__ = ["ACCEPTED_SPECS", "load_model"]

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
        A spec from the table in :mod:`probe.adapters` (file path, ``py:``, ``cmd:``,
        ``http(s)://``, ``column:``), or an in-memory object: a fitted estimator with
        ``predict_proba`` (or ``decision_function`` / ``predict``), or a function taking a
        DataFrame and returning one score per row.
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
        Seconds one batch may take; only ``cmd:`` and ``http(s)://`` models honour it (the
        command is killed; the request gives up when the endpoint stays silent that long).
        Model files, ``py:``, in-memory objects and ``column:`` run in this process with no
        time limit.

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
    opts = load_model_iv(
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
        return wrap_python(spec, spec=name, kind="object", sha256=None, opts=opts, details={})
    text = os.fspath(spec).strip()
    if not text:
        raise ModelError(f"the model spec is empty; accepted specs: {', '.join(ACCEPTED_SPECS)}")
    lower = text.lower()
    if lower.startswith("py:"):
        return load_python(text, opts)
    if lower.startswith("cmd:"):
        return load_command(text, opts)
    if lower.startswith(("http://", "https://")):
        return load_http(text, opts)
    if lower.startswith("column:"):
        return load_column(text, opts)
    return _load_file(text, opts)


def _load_file(text: str, opts: Options) -> Model:
    path = resolve(text, opts.base)
    if not path.exists():
        raise ModelError(f"model file `{text}` not found{close_files(path)}")
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
        data = read_bytes(path, text)
        return load_pickle(data, text, opts)
    if suffix == ".skops":
        return load_skops(read_bytes(path, text), text, opts)
    if suffix == ".onnx":
        return load_onnx(read_bytes(path, text), text, opts)
    data = read_bytes(path, text)
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
