"""Instalment-loan approvals at Tollymere Lending Co-operative (an invented regional lender).

Every name here (the lender, the districts, the groups) is invented; the data are synthetic and
the effects are planted on purpose so that probe's analyses can be checked against them. See
README.md in this folder for the story and the planted truths with their measured rates.

The module is imported by ``probe.scenarios.scenario_module("lending.generate")``, inside the
scenarios folder, so it reaches the shared helpers of ``../_build/`` by relative import; it needs
numpy, pandas and lightgbm. Its interface:

- ``generate(n_rows, *, seed)`` draws a table (the holdout, a training draw, or a large draw used
  to measure the true rates);
- ``train(frame, *, seed, defect)`` fits the LightGBM model and returns ``(booster, save)`` where
  ``save(path)`` writes the LightGBM model file;
- ``predict_proba(model, frame)`` scores a generated frame (probability of ``repaid == 1``);
- ``TRUTHS`` the planted structure (the build adds the measured rates).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .._build.predicates import slice_mask
from .._build.training import categorical_design, train_lightgbm

MODEL_FILE = "model.txt"
CANDIDATE_FILE = "candidate.txt"

DISTRICTS = (
    "Harrowmere", "Quillbeck", "Ashvane", "Dunmarrow", "Brackenholt", "Fernhollow",
    "Greywick", "Lantry Moss", "Sorrelby", "Wexcombe", "Corvane", "Millistow",
)
DISTRICT_SHARE = (0.30, 0.09, 0.08, 0.08, 0.07, 0.07, 0.06, 0.06, 0.05, 0.05, 0.05, 0.04)
GROUPS = ("Aster", "Birch", "Cedar")
# The group that dominates each district (80% of its residents); the rest split evenly.
# This is what makes `district` the planted proxy for `group`.
DISTRICT_GROUP = (2, 0, 0, 1, 0, 1, 0, 2, 0, 1, 0, 2)
AGE_BANDS = ("18-24", "25-34", "35-49", "50-64", "65+")
AGE_EDGES = (18, 25, 35, 50, 65, 200)
EMPLOYMENT = ("salaried", "self_employed", "contract")
CHANNELS = ("branch", "online", "broker")
TERMS = (12, 24, 36, 48, 60)

CATEGORICAL_INPUTS = ("district", "channel", "employment", "part_time", "existing_customer")
LEVELS = {
    "district": DISTRICTS,
    "channel": CHANNELS,
    "employment": EMPLOYMENT,
    "part_time": ("no", "yes"),
    "existing_customer": ("no", "yes"),
}
MODEL_INPUTS = (
    "district", "channel", "employment", "part_time", "existing_customer", "income",
    "loan_amount", "term_months", "utilisation", "missed_payments_12m", "credit_history_years",
)

# Planted: in this region the repayment outcome is set by a factor the model never sees (a
# district-wide collections campaign aimed at highly utilised online borrowers): it is a coin
# with P(repaid) = 0.20, independent of every column. The model learns the region's average,
# well below the threshold, so it declines (almost) the whole region, including the 20% who
# repay: the false-negative rate there is close to 1 and uniform, so no refinement of the region
# and no natural slice comes near it.
SLICE_REPAID_RATE = 0.20
# 0.75 is (about) the 80th percentile of Beta(2.5, 2.05), so "the top quintile bin" expresses it.
UTILISATION_BETA = (2.5, 2.05)

TRUTHS = {
    "scenario": "lending",
    "label": "repaid",
    "positive": 1,
    "favorable": "positive",
    "protected": ["sex", "age_band", "group"],
    "model_inputs": list(MODEL_INPUTS),
    "slices": [
        {
            "metric": "fnr",
            "predicates": [
                {"column": "district", "op": "==", "value": "Harrowmere"},
                {"column": "channel", "op": "==", "value": "online"},
                {"column": "utilisation", "op": ">=", "value": 0.75},
            ],
            "mechanism": "labels in the region are a coin (P(repaid) = 0.20) driven by a factor "
            "that is not a column, so the model declines (almost) the whole region",
        }
    ],
    "proxies": {"group": "district", "sex": "part_time", "age_band": "credit_history_years"},
    "direct": None,
    "defect": {
        "predicates": [
            {"column": "channel", "op": "==", "value": "broker"},
            {"column": "term_months", "op": ">=", "value": 48},
        ],
        "metric": "error",
        "description": "the candidate was trained with every broker loan of 48 months or more "
        "labelled as not repaid (a faulty join with the collections ledger), so it declines "
        "that region wholesale",
    },
}


def generate(n_rows: int = 24_000, *, seed: int = 0) -> pd.DataFrame:
    """Draw ``n_rows`` invented loan applications with their repayment outcome.

    Parameters
    ----------
    n_rows : int, default=24_000
        Number of rows.
    seed : int, default=0
        Seed of the generator; the same seed gives the same frame.

    Returns
    -------
    pandas.DataFrame
        15 columns: the protected attributes ``sex``, ``age_band``, ``group`` (not model
        inputs), the eleven model inputs, and the label ``repaid`` (1 = repaid).
    """
    rng = np.random.default_rng([seed, 101])
    n = int(n_rows)

    district = rng.choice(len(DISTRICTS), size=n, p=DISTRICT_SHARE)
    dominant = np.asarray(DISTRICT_GROUP)[district]
    other = (dominant + rng.integers(1, len(GROUPS), size=n)) % len(GROUPS)
    group = np.where(rng.random(n) < 0.8, dominant, other)

    female = rng.random(n) < 0.5
    age = np.clip(rng.normal(43.0, 14.0, size=n), 18.0, 90.0)
    age_band = np.searchsorted(AGE_EDGES, age, side="right") - 1
    # Proxy for sex: part-time work is far more common among women in this invented population.
    part_time = rng.random(n) < np.where(female, 0.42, 0.07)
    # Proxy for age: the length of the credit file is a fraction of the adult years.
    credit_history = np.round((age - 18.0) * rng.beta(5.0, 2.0, size=n), 1)

    employment = rng.choice(len(EMPLOYMENT), size=n, p=(0.68, 0.20, 0.12))
    log_income = rng.normal(10.45, 0.5, size=n) + np.where(part_time, np.log(0.55), 0.0)
    income = np.round(np.exp(log_income), -1)
    loan = np.clip(np.round(np.exp(rng.normal(np.log(9000.0), 0.6, size=n)), -1), 500, 60_000)
    term = rng.choice(TERMS, size=n, p=(0.15, 0.25, 0.30, 0.15, 0.15))
    utilisation = np.round(rng.beta(*UTILISATION_BETA, size=n), 3)
    missed = rng.poisson(0.25 + 1.0 * utilisation**2)
    channel = rng.choice(len(CHANNELS), size=n, p=(0.25, 0.55, 0.20))
    existing = rng.random(n) < 0.35

    burden = loan / income
    logit = (
        1.75
        + 0.9 * (log_income - 10.2)
        - 1.6 * (burden - 0.35)
        - 3.0 * (utilisation - 0.55)
        - 0.7 * missed
        + 0.05 * (credit_history - 10.0)
        + 0.5 * existing
        - 0.45 * (employment == 1)
        - 0.2 * (employment == 2)
        + 0.2 * (term <= 24)
    )
    repaid = rng.random(n) < 1.0 / (1.0 + np.exp(-logit))
    planted = (district == 0) & (channel == 1) & (utilisation >= 0.75)
    repaid = np.where(planted, rng.random(n) < SLICE_REPAID_RATE, repaid)

    # Missing values: income not declared (6%), employment not recorded (2%).
    income = np.where(rng.random(n) < 0.06, np.nan, income)
    employment_label = np.asarray(EMPLOYMENT, dtype=object)[employment]
    employment_label[rng.random(n) < 0.02] = None

    yes_no = np.asarray(["no", "yes"], dtype=object)
    return pd.DataFrame(
        {
            "sex": np.where(female, "female", "male"),
            "age_band": np.asarray(AGE_BANDS)[age_band],
            "group": np.asarray(GROUPS)[group],
            "district": np.asarray(DISTRICTS)[district],
            "channel": np.asarray(CHANNELS)[channel],
            "employment": employment_label,
            "part_time": yes_no[part_time.astype(int)],
            "existing_customer": yes_no[existing.astype(int)],
            "income": income,
            "loan_amount": loan.astype(float),
            "term_months": term.astype(np.int64),
            "utilisation": utilisation,
            "missed_payments_12m": missed.astype(np.int64),
            "credit_history_years": credit_history,
            "repaid": repaid.astype(np.int64),
        }
    )


def model_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """The model's inputs, string columns as ``category`` with the fixed level lists."""
    return categorical_design(frame, MODEL_INPUTS, {c: LEVELS[c] for c in CATEGORICAL_INPUTS})


def defect_mask(frame: pd.DataFrame) -> np.ndarray:
    """Rows of the candidate's defect region (``TRUTHS["defect"]``)."""
    return slice_mask(frame, TRUTHS["defect"]["predicates"])


def train(frame: pd.DataFrame, *, seed: int = 0, defect: bool = False):
    """Fit the approval model on a training draw.

    Parameters
    ----------
    frame : pandas.DataFrame
        A draw from :func:`generate` (not the holdout).
    seed : int, default=0
        LightGBM's seed.
    defect : bool, default=False
        Train the regression candidate: labels of the defect region are set to 0 first.

    Returns
    -------
    (lightgbm.Booster, callable)
        The booster and ``save(path)`` that writes it as a LightGBM model file.
    """
    y = frame["repaid"].to_numpy().copy()
    if defect:
        y[defect_mask(frame)] = 0
    return train_lightgbm(model_frame(frame), y, seed=seed)


def predict_proba(model, frame: pd.DataFrame) -> np.ndarray:
    """Probability of ``repaid == 1`` for each row of a generated frame."""
    return np.asarray(model.predict(model_frame(frame), num_threads=1), dtype=np.float64)
