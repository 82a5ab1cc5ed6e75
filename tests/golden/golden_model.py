"""Two deterministic scoring functions for the golden run (``py:golden_model:candidate``).

Closed-form logistic scores, so the golden files depend on no training library. The candidate
reads `sex` directly (a direct flip moves decisions) and is worse than production where
`region = north` and `tenure` is missing.
"""

import numpy as np
import pandas as pd


def _base(frame: pd.DataFrame) -> np.ndarray:
    income = frame["income"].to_numpy(dtype=float)
    tenure = frame["tenure"].to_numpy(dtype=float)
    return -0.6 + 3.6 * (np.log(income) - 10.4) + 0.11 * np.nan_to_num(tenure, nan=5.0)


def production(frame: pd.DataFrame) -> np.ndarray:
    z = _base(frame) - 0.7 * (frame["region"].to_numpy() == "north")
    return 1.0 / (1.0 + np.exp(-z))


def candidate(frame: pd.DataFrame) -> np.ndarray:
    north_missing = (frame["region"].to_numpy() == "north") & frame["tenure"].isna().to_numpy()
    z = _base(frame) + 0.35 * (frame["sex"].to_numpy() == "M") + 1.5 * north_missing
    return 1.0 / (1.0 + np.exp(-z))
