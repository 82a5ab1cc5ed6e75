"""Writes ``holdout.csv``: the small invented holdout behind the golden report files.

Run once (``python tests/golden/make_data.py``); the CSV is committed so the golden files do not
depend on a random generator's stream across numpy versions. Planted: selection moves with `sex`
directly (the model reads it), `region` stands in for `group` (a proxy; `group` is not a model
input), and the model errs more often for `region = north & tenure missing`.
"""

from pathlib import Path

import numpy as np
import pandas as pd


def make(n: int = 3000, seed: int = 11) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    group = rng.choice(["a", "b", "c"], size=n, p=[0.6, 0.3, 0.1])
    sex = rng.choice(["F", "M"], size=n)
    age = rng.integers(18, 75, size=n)
    age_band = np.where(age < 30, "18-29", np.where(age < 55, "30-54", "55+"))
    # region stands in for group
    region = np.where(rng.random(n) < 0.7,
                      np.select([group == "a", group == "b"], ["south", "north"], "east"),
                      rng.choice(["south", "north", "east", "west"], size=n))
    income = np.round(rng.lognormal(10.4, 0.4, size=n) * np.where(sex == "M", 1.1, 1.0), -2)
    tenure = rng.integers(0, 20, size=n).astype(float)
    tenure[rng.random(n) < 0.08] = np.nan
    logit = -0.6 + 4.0 * (np.log(income) - 10.4) + 0.12 * np.nan_to_num(tenure, nan=5) \
        - 0.8 * (region == "north")
    y = rng.random(n) < 1 / (1 + np.exp(-logit))
    return pd.DataFrame({"group": group, "sex": sex, "age": age, "age_band": age_band,
                         "region": region, "income": income, "tenure": tenure,
                         "repaid": y.astype(int)})


if __name__ == "__main__":
    make().to_csv(Path(__file__).with_name("holdout.csv"), index=False)
