"""The :class:`Model`: one protocol over every model kind; batches; checks on the output.

Each kind's loader hands :class:`Model` a ``score_batch`` function (one batch of rows, already
restricted to the model's inputs, to raw scores). The ``Model`` selects and orders the columns,
cuts the rows into batches, and turns every problem into one :class:`~probe.errors.ModelError`
line naming the model and the rows of the failing batch. A loader signals a problem it detects
itself by raising :class:`BatchFailure` with the cause.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd

from probe.errors import DataError, ModelError, ProbeError

from .messages import cause, close_names, first_line, plural, ticks
from .unseen import unseen_rows

__all__ = ["BatchFailure", "Model", "ProcessFailure", "ScoreFn"]

ScoreFn = Callable[[pd.DataFrame], Any]


class BatchFailure(Exception):
    """A scoring problem the adapter itself detected; the message is the cause, one line."""


class ProcessFailure(Exception):
    """The model's own process crashed, exited or went silent (see :mod:`.isolated`).

    ``what`` reads after the model's name ("crashed (SIGSEGV)"), ``advice`` after what it was
    doing ("; a model must not end the process").
    """

    def __init__(self, what: str, advice: str = "") -> None:
        super().__init__(what)
        self.what, self.advice = what, advice

    def line(self, spec: str, doing: str) -> str:
        """The one-line message: ``model `x` <what> while <doing><advice>``."""
        return f"model `{spec}` {self.what} while {doing}{self.advice}"


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
        For categorical inputs, the levels the model knows (empty when unknown). Rows holding
        another value are counted before scoring and refused unless ``allow_unseen``.
    isolated : bool
        Whether the model runs in a child process of its own (:mod:`.isolated`).
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
        "_allow_unseen",
        "_unseen",
        "_worker",
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
        allow_unseen: bool = False,
        worker: Any = None,
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
        self._allow_unseen = allow_unseen
        self._unseen: dict[str, int] = {}  # the most rows with unseen values in one call
        self._worker = worker
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

    isolated = property(lambda self: self._worker is not None,
                        doc="Whether the model runs in a child process of its own.")

    def parts(self) -> dict[str, Any]:
        """What rebuilds this Model around another ``score_batch`` (the isolated proxy)."""
        return {"spec": self._spec, "kind": self._kind, "sha256": self._sha256,
                "feature_names": self._feature_names, "categories": self._categories,
                "transform": self._transform, "probability": self._probability,
                "details": self._details, "batch_size": self._batch_size,
                "n_inputs": self._n_inputs, "required": self._required,
                "allow_unseen": self._allow_unseen}

    def close(self) -> None:
        """Stop the model's child process, if it has one (it also stops with the Model)."""
        if self._worker is not None:
            self._worker.close()

    def __enter__(self) -> "Model":
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()

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
        self._check_unseen(X)
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
            ``batch_size``, ``isolated``, ``unseen_values`` (per column, the rows scored with a
            value the model never saw, when ``allow_unseen`` let any through), and kind-specific
            keys (``trust`` for pickles: ``"flag"`` or ``"sha256"``; ``trusted_types`` for skops,
            ``objective`` for LightGBM, ``classes`` and ``positive`` where known).
        """
        out: dict[str, Any] = {
            "spec": self._spec,
            "kind": self._kind,
            "sha256": self._sha256,
            "feature_names": None if self._feature_names is None else list(self._feature_names),
            "score": self._transform,
            "probability": self._probability,
            "batch_size": self._batch_size,
            "isolated": self.isolated,
        }
        if self._unseen:
            out["unseen_values"] = dict(sorted(self._unseen.items()))
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
                f"{plural(len(missing), 'column')} {ticks(missing)} that the data lacks"
                f"{close_names(missing, [str(c) for c in frame.columns])}"
            )
        names = [str(c) for c in frame.columns]
        dupes = sorted({c for c in cols if names.count(c) > 1})
        if dupes:
            raise ModelError(
                f"model `{self._spec}` reads {ticks(dupes)}, which the data has more than once"
            )
        if names == list(cols):
            return frame
        by_name = {str(c): c for c in frame.columns}
        return frame.loc[:, [by_name[c] for c in cols]]

    def _check_unseen(self, X: pd.DataFrame) -> None:
        found = unseen_rows(X, self._categories)
        if not found:
            return
        if not self._allow_unseen:
            col, (n, example) = next(iter(found.items()))
            raise DataError(
                f"column `{col}` has {n} rows ({100 * n / len(X):.1f} %) with values the model "
                f"`{self._spec}` never saw, e.g. {example!r}; pass --allow-unseen (allow_unseen "
                "= true under [model]) to score them as the model treats unknown values"
            )
        for col, (n, _) in found.items():
            self._unseen[col] = max(n, self._unseen.get(col, 0))

    def _score_rows(self, batch: pd.DataFrame, start: int, stop: int) -> np.ndarray:
        where = f"model `{self._spec}` failed on rows {start}\u2013{stop - 1}"
        try:
            raw = self._score_batch(batch)
            values = _as_scores(raw, stop - start, batch.index)
        except ProcessFailure as exc:
            raise ModelError(exc.line(self._spec, f"scoring rows {start}\u2013{stop - 1}")) \
                from None
        except BatchFailure as exc:
            raise ModelError(f"{where}: {exc}") from exc
        except ProbeError as exc:
            raise ModelError(f"{where}: {first_line(str(exc))}") from exc
        except (Exception, SystemExit) as exc:  # the model's own failure, sys.exit() included
            raise ModelError(f"{where}: {cause(exc)}") from exc
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


def _as_scores(raw: Any, n: int, index: pd.Index | None = None) -> np.ndarray:
    """One float per row, or a `BatchFailure` saying what arrived instead. A pandas answer is
    aligned to the batch's ``index`` (a model may return its rows in another order)."""
    if isinstance(raw, (pd.Series, pd.DataFrame)) and index is not None and len(raw) == n:
        if not raw.index.equals(index):
            if raw.index.has_duplicates or not raw.index.sort_values().equals(index.sort_values()):
                raise BatchFailure(
                    "the model returned scores indexed by other rows than it was given"
                )
            raw = raw.loc[index]
    if isinstance(raw, (pd.Series, pd.DataFrame)):
        raw = raw.to_numpy()
    try:
        arr = np.asarray(raw, dtype=np.float64)
    except (TypeError, ValueError):
        raise BatchFailure(
            f"the model returned {type(raw).__name__} values that are not numbers"
        ) from None
    if arr.ndim == 2 and arr.shape[1] == 1:
        arr = arr[:, 0]
    if arr.ndim != 1:
        raise BatchFailure(
            f"the model returned an array of shape {arr.shape}; one score per row expected"
        )
    if arr.shape[0] != n:
        raise BatchFailure(f"the model returned {arr.shape[0]} scores for {n} rows")
    return arr


def _jsonable(value: Any) -> Any:
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    return value
