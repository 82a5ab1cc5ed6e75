"""The evidence of one run: everything the analyses read, prepared once.

:class:`Evidence` holds the holdout (never modified), the label, the row weights, each model's
scores and decisions, the favourable decision, and the slice columns encoded once by the one encoder
(:func:`probe.encode.encode_columns`):

- groups and intersections read the holdout and :meth:`Evidence.decision`;
- the slice search, the comparison and the flip breakdown read :attr:`Evidence.encoding`;
- flip tests reuse the scores already computed (:meth:`Evidence.scores`);
- :meth:`Evidence.outcome` gives a metric's per-row outcome and base population (from
  :mod:`probe.metrics`), derived on first use and kept.

The sampling design (:class:`probe.design.Design`: row weights, clusters, attributes known as
membership probabilities) is part of the evidence, so that it reaches every analysis from here.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np
import pandas as pd

from .data import Holdout
from .design import Design
from .encode import Encoding
from .metrics import as_favorable, get_metric
from .values import read_only

__all__ = ["Evidence", "ModelRun"]


@dataclass(frozen=True)
class ModelRun:
    """One model scored on the holdout.

    Attributes
    ----------
    model : object
        The loaded :class:`probe.adapters.Model` (None when scores were given directly).
    scores : ndarray of float64
        Score of the positive class per row, read-only.
    decision : ndarray of bool
        ``scores >= threshold``, read-only.
    """

    model: Any
    scores: np.ndarray
    decision: np.ndarray

    @classmethod
    def from_scores(cls, model, scores, threshold: float) -> "ModelRun":
        scores = read_only(np.asarray(scores, dtype=np.float64))
        return cls(model, scores, read_only(scores >= threshold))


@dataclass(frozen=True)
class Evidence:
    """The prepared table of one run.

    Attributes
    ----------
    holdout : Holdout
        The data with its column roles (``frame`` is never modified).
    inputs : pandas.DataFrame
        What the models see: the holdout without the label.
    runs : mapping of str to ModelRun
        ``"candidate"`` always; ``"baseline"`` when a comparison is asked for.
    encoding : Encoding
        The slice columns, encoded once (label and score columns left out).
    threshold : float
    favorable : bool
        True when the positive decision is the favourable one.
    design : Design
        Row weights, clusters and membership probabilities (:mod:`probe.design`); plain unless
        given.
    groups : pandas.DataFrame
        The frame as the groups see it: a binned protected attribute as its bands
        (:func:`probe.bins.group_view`); default the frame itself.
    """

    holdout: Holdout
    inputs: pd.DataFrame
    runs: Mapping[str, ModelRun]
    encoding: Encoding
    threshold: float = 0.5
    favorable: bool = True
    design: Design = None
    groups: pd.DataFrame = None
    _cache: dict = field(default_factory=dict, repr=False, compare=False)

    def __post_init__(self):
        object.__setattr__(self, "favorable", as_favorable(self.favorable))
        if self.groups is None:
            object.__setattr__(self, "groups", self.holdout.frame)
        if self.design is None:
            object.__setattr__(self, "design", Design())

    @property
    def weights(self) -> np.ndarray:
        """Row weights (all ones unless given), read-only."""
        return read_only(self.design.row_weights(self.n_rows))

    @property
    def frame(self) -> pd.DataFrame:
        return self.holdout.frame

    @property
    def y_true(self) -> np.ndarray | None:
        return self.holdout.y_true

    @property
    def n_rows(self) -> int:
        return len(self.holdout.frame)

    def model(self, run: str = "candidate"):
        return self.runs[run].model

    def scores(self, run: str = "candidate") -> np.ndarray:
        return self.runs[run].scores

    def decision(self, run: str = "candidate") -> np.ndarray:
        return self.runs[run].decision

    def outcome(self, metric: str, run: str = "candidate") -> tuple[np.ndarray, np.ndarray]:
        """The metric's per-row 0/1 outcome and its base population (see :mod:`probe.metrics`)."""
        m = get_metric(metric)
        return self._cached(("outcome", m.name, run), lambda: tuple(
            read_only(a) for a in m.outcome(self.y_true, self.decision(run),
                                             favorable=self.favorable)))

    def _cached(self, key, make):
        if key not in self._cache:
            self._cache[key] = make()
        return self._cache[key]
