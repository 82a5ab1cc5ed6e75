"""Training helpers shared by the LightGBM scenarios (``lending`` and ``claims``)."""

from __future__ import annotations

import numpy as np
import pandas as pd


def categorical_design(frame: pd.DataFrame, inputs, levels: dict) -> pd.DataFrame:
    """A scenario model's inputs, string columns as ``category`` with their fixed level lists."""
    X = frame.loc[:, list(inputs)].copy()
    for column, column_levels in levels.items():
        X[column] = pd.Categorical(X[column], categories=list(column_levels))
    return X


def train_lightgbm(design: pd.DataFrame, y: np.ndarray, *, seed: int = 0):
    """The scenarios' LightGBM recipe: 100 trees of 31 leaves, one thread, deterministic.

    Returns ``(booster, save)`` where ``save(path)`` writes the LightGBM model file.
    """
    import lightgbm as lgb

    params = {
        "objective": "binary",
        "learning_rate": 0.1,
        "num_leaves": 31,
        "min_data_in_leaf": 20,
        "feature_fraction": 0.9,
        "seed": seed,
        "deterministic": True,
        "force_col_wise": True,
        "num_threads": 1,  # one thread: fast at this size, and immune to a busy machine
        "verbosity": -1,
    }
    data = lgb.Dataset(design, label=y, categorical_feature="auto", free_raw_data=True)
    booster = lgb.train(params, data, num_boost_round=100)

    def save(path) -> None:
        booster.save_model(str(path))

    return booster, save
