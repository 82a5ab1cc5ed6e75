"""Kind ``column``: ``column:NAME``, the scores are already a column of the data."""

from __future__ import annotations

import numpy as np
import pandas as pd

from probe.errors import ModelError

from .inputs import numeric
from .model import Model
from .options import Options

__all__ = ["load_column"]


def load_column(text: str, opts: Options) -> Model:
    """A Model that reads its scores from the data column ``column:NAME`` names."""
    name = text[len("column:"):].strip()
    if not name:
        raise ModelError(f"model spec `{text}` names no column (column:NAME)")

    def score(batch: pd.DataFrame) -> np.ndarray:
        return numeric(batch.iloc[:, 0], name)

    return Model(
        spec=text, kind="column", sha256=None, feature_names=None, categories={},
        score_batch=score, transform=f"scores read from the data column `{name}`",
        probability=True, details={"column": name}, batch_size=opts.batch_size,
        allow_unseen=opts.allow_unseen,
        required=(name,),
    )
