"""Writes ``holdout.csv``: the small invented holdout behind the design golden files.

Run once (``python tests/golden/design/make_data.py``); the CSV is committed so the golden files do
not depend on a random generator's stream across numpy versions. A stratified sample with repeated
people: stratum `b` is a quarter of the population but half the sample (weight 0.5 against 1.5),
each `person` has 1 to 4 rows, `sex` is recorded and `origin` is known only as the probabilities
`p_north` / `p_south` given `area`. The model's score is a column (`score`).
"""

from pathlib import Path

import numpy as np
import pandas as pd

# P(origin = north | area)
AREA_NORTH = {"hill": 0.9, "mill": 0.6, "ford": 0.3, "moor": 0.15}


def make(n: int = 600, seed: int = 5) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    visits = rng.choice([1, 2, 3, 4], size=n, p=[0.4, 0.3, 0.2, 0.1])
    person = np.repeat(np.arange(n), visits)[:n]
    people = int(person[-1]) + 1
    stratum = np.where(rng.random(people) < 0.5, "b", "a")[person]
    area = rng.choice(list(AREA_NORTH), size=people)[person]
    p_north = np.vectorize(AREA_NORTH.get)(area)
    north = rng.random(people)[person] < p_north
    sex = rng.choice(["F", "M"], size=people)[person]
    ability = rng.normal(0.0, 1.0, people)[person]
    logit = 0.4 + ability - 0.8 * (stratum == "b") - 0.6 * ~north + 0.3 * (sex == "M")
    score = np.round(1 / (1 + np.exp(-(logit + rng.normal(0.0, 0.5, n)))), 3)
    y = rng.random(n) < 1 / (1 + np.exp(-logit))
    return pd.DataFrame({
        "person": [f"P{k:03d}" for k in person], "stratum": stratum,
        "weight": np.where(stratum == "b", 0.5, 1.5), "sex": sex, "area": area,
        "p_north": p_north, "p_south": np.round(1 - p_north, 2), "score": score,
        "approved": y.astype(int),
    })


if __name__ == "__main__":
    make().to_csv(Path(__file__).with_name("holdout.csv"), index=False)
