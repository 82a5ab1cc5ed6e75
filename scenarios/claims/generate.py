"""Fast-track triage of insurance claims at Kestrelby Mutual (an invented insurer).

Every name here (the insurer, the regions, the groups) is invented; the data are synthetic and
the effects are planted on purpose so that probe's analyses can be checked against them. See
README.md in this folder for the story and the planted truths with their measured rates.

The positive class is ``straightforward == 1``: the claim turned out to need no adjustment, and
the model's positive decision (fast-track, pay without investigation) is the favourable one.

The module is imported by ``probe.scenarios.scenario_module("claims.generate")``, inside the
scenarios folder, so it reaches the shared helpers of ``../_build/`` by relative import; it needs
numpy, pandas and lightgbm. Its interface:

- ``generate(n_rows, *, seed)`` draws a table;
- ``train(frame, *, seed, defect)`` fits the LightGBM model and returns ``(booster, save)`` where
  ``save(path)`` writes the LightGBM model file;
- ``predict_proba(model, frame)`` scores a generated frame;
- ``TRUTHS`` the planted structure (the build adds the measured rates).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .._build.predicates import slice_mask
from .._build.training import categorical_design, train_lightgbm

MODEL_FILE = "model.txt"
CANDIDATE_FILE = "candidate.txt"

REGIONS = (
    "Norwold", "Easterby Fen", "Saltmarch", "Upper Lathe", "Cindergate", "Broomhaven",
    "Wickhollow", "Tarnside", "Glimmerton", "Oakrest",
)
REGION_SHARE = (0.15, 0.13, 0.12, 0.11, 0.10, 0.10, 0.09, 0.08, 0.07, 0.05)
GROUPS = ("Heron", "Kite", "Plover")
# The group that dominates each region (80% of its policyholders): `region` is the planted proxy
# for `group`.
REGION_GROUP = (0, 0, 1, 2, 0, 1, 2, 0, 1, 2)
AGE_BANDS = ("18-29", "30-44", "45-59", "60+")
AGE_EDGES = (18, 30, 45, 60, 200)
OCCUPATIONS = ("trades", "office", "care", "transport", "retail")
# P(occupation | sex): strongly sex-typed in this invented book, so `occupation_band` is the
# planted proxy for `sex`.
OCCUPATION_P = {
    "female": (0.05, 0.30, 0.40, 0.05, 0.20),
    "male": (0.40, 0.25, 0.05, 0.25, 0.05),
}
CLAIM_TYPES = ("collision", "theft", "glass", "weather", "fire")
CLAIM_TYPE_P = (0.30, 0.10, 0.20, 0.32, 0.08)
CHANNELS = ("phone", "app", "agent")

CATEGORICAL_INPUTS = (
    "region", "occupation_band", "claim_type", "channel", "has_photos", "police_report",
    "third_party",
)
LEVELS = {
    "region": REGIONS,
    "occupation_band": OCCUPATIONS,
    "claim_type": CLAIM_TYPES,
    "channel": CHANNELS,
    "has_photos": ("no", "yes"),
    "police_report": ("no", "yes"),
    "third_party": ("no", "yes"),
}
MODEL_INPUTS = CATEGORICAL_INPUTS + (
    "claim_amount", "days_to_report", "prior_claims_3y", "policy_tenure_years", "vehicle_age",
)

# Planted: weather claims reported 9 days or more after the event were re-assessed under a rule
# that changed mid-year and is recorded nowhere; whether they needed adjustment is a coin
# (P = 0.5) independent of every column, so the model's error rate there is about 1/2.
SLICE_STRAIGHTFORWARD_RATE = 0.5
# days_to_report ~ floor(lognormal(log 4, 1)), whose 80th percentile is about 9.

TRUTHS = {
    "scenario": "claims",
    "label": "straightforward",
    "positive": 1,
    "favorable": "positive",
    "protected": ["sex", "age_band", "group"],
    "model_inputs": list(MODEL_INPUTS),
    "slices": [
        {
            "metric": "error",
            "predicates": [
                {"column": "claim_type", "op": "==", "value": "weather"},
                {"column": "days_to_report", "op": ">=", "value": 9},
            ],
            "mechanism": "labels in the region are a coin (P(straightforward) = 0.5) set by an "
            "unrecorded change of rule, so about half of the model's decisions there are wrong",
        }
    ],
    "proxies": {"group": "region", "sex": "occupation_band", "age_band": "policy_tenure_years"},
    "direct": None,
    "defect": {
        "predicates": [
            {"column": "claim_type", "op": "==", "value": "glass"},
            {"column": "channel", "op": "==", "value": "app"},
        ],
        "metric": "error",
        "description": "the candidate was trained with every glass claim submitted through the "
        "app marked as needing adjustment (a migration mapped the app's photo-review flag onto "
        "the label), so it refuses to fast-track that region",
    },
}


def generate(n_rows: int = 24_000, *, seed: int = 0) -> pd.DataFrame:
    """Draw ``n_rows`` invented claims with their triage outcome.

    Parameters
    ----------
    n_rows : int, default=24_000
        Number of rows.
    seed : int, default=0
        Seed of the generator; the same seed gives the same frame.

    Returns
    -------
    pandas.DataFrame
        16 columns: the protected attributes ``sex``, ``age_band``, ``group`` (not model
        inputs), the twelve model inputs, and the label ``straightforward``.
    """
    rng = np.random.default_rng([seed, 303])
    n = int(n_rows)

    region = rng.choice(len(REGIONS), size=n, p=REGION_SHARE)
    dominant = np.asarray(REGION_GROUP)[region]
    other = (dominant + rng.integers(1, len(GROUPS), size=n)) % len(GROUPS)
    group = np.where(rng.random(n) < 0.8, dominant, other)

    female = rng.random(n) < 0.48
    cumulative_f = np.cumsum(OCCUPATION_P["female"])
    cumulative_m = np.cumsum(OCCUPATION_P["male"])
    u = rng.random(n)
    occupation = np.where(
        female,
        np.searchsorted(cumulative_f, u, side="right"),
        np.searchsorted(cumulative_m, u, side="right"),
    )
    occupation = np.minimum(occupation, len(OCCUPATIONS) - 1)
    age = np.clip(rng.normal(47.0, 15.0, size=n), 18.0, 92.0)
    age_band = np.searchsorted(AGE_EDGES, age, side="right") - 1
    # Proxy for age: years with the insurer are a fraction of the years since 18.
    tenure = np.round((age - 18.0) * rng.beta(2.0, 2.5, size=n), 1)

    claim_type = rng.choice(len(CLAIM_TYPES), size=n, p=CLAIM_TYPE_P)
    type_scale = np.asarray((2200.0, 3500.0, 450.0, 1800.0, 6000.0))[claim_type]
    amount = np.round(type_scale * np.exp(rng.normal(0.0, 0.75, size=n)), 0)
    days = np.floor(np.exp(rng.normal(np.log(4.0), 1.0, size=n))).astype(np.int64)
    prior = rng.poisson(0.35, size=n)
    photos = rng.random(n) < 0.7
    police_applies = (claim_type == 0) | (claim_type == 1)
    police = rng.random(n) < 0.6
    third_party = rng.random(n) < np.where(claim_type == 0, 0.45, 0.05)
    channel = rng.choice(len(CHANNELS), size=n, p=(0.40, 0.40, 0.20))
    vehicle_age = np.round(rng.gamma(2.5, 2.6, size=n), 1)

    type_effect = np.asarray((0.0, -1.4, 1.8, 0.3, -1.0))[claim_type]
    logit = (
        1.3
        + type_effect
        - 1.1 * np.log(amount / type_scale)
        + 1.3 * photos
        - 1.0 * prior
        - 0.12 * (np.minimum(days, 30) - 4)
        + 1.2 * (police_applies & police)
        - 0.9 * third_party
        + 0.05 * np.minimum(tenure, 20.0)
        - 0.04 * (vehicle_age - 6.0)
    )
    straightforward = rng.random(n) < 1.0 / (1.0 + np.exp(-logit))
    planted = (claim_type == 3) & (days >= 9)
    straightforward = np.where(
        planted, rng.random(n) < SLICE_STRAIGHTFORWARD_RATE, straightforward
    )

    yes_no = np.asarray(["no", "yes"], dtype=object)
    police_label = yes_no[police.astype(int)]
    police_label[~police_applies] = None  # not applicable to glass, weather, fire
    photos_label = yes_no[photos.astype(int)]
    photos_label[rng.random(n) < 0.05] = None  # not recorded
    vehicle_age = np.where(rng.random(n) < 0.07, np.nan, vehicle_age)  # unknown

    return pd.DataFrame(
        {
            "sex": np.where(female, "female", "male"),
            "age_band": np.asarray(AGE_BANDS)[age_band],
            "group": np.asarray(GROUPS)[group],
            "region": np.asarray(REGIONS)[region],
            "occupation_band": np.asarray(OCCUPATIONS)[occupation],
            "claim_type": np.asarray(CLAIM_TYPES)[claim_type],
            "channel": np.asarray(CHANNELS)[channel],
            "has_photos": photos_label,
            "police_report": police_label,
            "third_party": yes_no[third_party.astype(int)],
            "claim_amount": amount,
            "days_to_report": days,
            "prior_claims_3y": prior.astype(np.int64),
            "policy_tenure_years": tenure,
            "vehicle_age": vehicle_age,
            "straightforward": straightforward.astype(np.int64),
        }
    )


def model_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """The model's inputs, string columns as ``category`` with the fixed level lists."""
    return categorical_design(frame, MODEL_INPUTS, {c: LEVELS[c] for c in CATEGORICAL_INPUTS})


def defect_mask(frame: pd.DataFrame) -> np.ndarray:
    """Rows of the candidate's defect region (``TRUTHS["defect"]``)."""
    return slice_mask(frame, TRUTHS["defect"]["predicates"])


def train(frame: pd.DataFrame, *, seed: int = 0, defect: bool = False):
    """Fit the triage model on a training draw.

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
    y = frame["straightforward"].to_numpy().copy()
    if defect:
        y[defect_mask(frame)] = 0
    return train_lightgbm(model_frame(frame), y, seed=seed)


def predict_proba(model, frame: pd.DataFrame) -> np.ndarray:
    """Probability of ``straightforward == 1`` for each row of a generated frame."""
    return np.asarray(model.predict(model_frame(frame), num_threads=1), dtype=np.float64)
