"""Applicant screening at Orrin Hollow Contact Services (an invented call-centre employer).

Every name here (the employer, the home areas, the groups) is invented; the data are synthetic and
the effects are planted on purpose so that probe's analyses can be checked against them. See
README.md in this folder for the story and the planted truths with their measured rates.

This is the scenario with *direct dependence*: ``sex`` is a model input and the historical
screening decisions used as labels penalised women, so the model's decisions move when ``sex`` is
flipped.

The module is imported by ``probe.scenarios.scenario_module("hiring.generate")``, inside the
scenarios folder, so it reaches the shared helpers of ``../_build/`` by relative import; it needs
numpy, pandas, scikit-learn and skops. Its interface:

- ``generate(n_rows, *, seed)`` draws a table;
- ``train(frame, *, seed, defect)`` fits the scikit-learn pipeline and returns
  ``(pipeline, save)`` where ``save(path)`` writes it with skops;
- ``predict_proba(model, frame)`` scores a generated frame (probability of ``advanced == 1``);
- ``TRUTHS`` the planted structure (the build adds the measured rates).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .._build.predicates import slice_mask

MODEL_FILE = "model.skops"
CANDIDATE_FILE = "candidate.skops"

AREAS = (
    "Wrenfold", "Pellby", "Oxbarrow", "Kestle Green", "Marrowgate", "Tansy End",
    "Hobble Cross", "Brindle Row", "Cobhallow", "Siskin Vale",
)
AREA_SHARE = (0.16, 0.13, 0.12, 0.11, 0.10, 0.10, 0.08, 0.08, 0.07, 0.05)
GROUPS = ("Larch", "Myrtle", "Rowan")
# The group that dominates each home area (80% of its residents): `home_area` is the planted
# proxy for `group`.
AREA_GROUP = (0, 1, 0, 2, 0, 1, 2, 0, 1, 2)
AGE_BANDS = ("18-24", "25-34", "35-49", "50+")
AGE_EDGES = (18, 25, 35, 50, 200)
EDUCATION = ("secondary", "vocational", "degree")
SHIFTS = ("day", "evening", "any")

NUMERIC_INPUTS = ("years_experience", "typing_wpm", "assessment_score", "languages", "commute_km")
CATEGORICAL_INPUTS = (
    "sex", "part_time", "education", "previous_callcentre", "referral", "shift", "home_area",
)
MODEL_INPUTS = CATEGORICAL_INPUTS + NUMERIC_INPUTS

# Planted: experienced fast typists were screened against a list the data do not record (an
# undisclosed no-poach list of rival call centres kept by one recruiter): advancement there is a
# coin, P = 0.6, independent of every column. Their recorded signals are the strongest there are
# (call-centre experience and typing speed carry most of the label's weight elsewhere), so the
# model advances (almost) all of them, including the 40% the list turned down: the false-positive
# rate there is close to 1 and uniform, while elsewhere the label follows the recorded signals.
SLICE_ADVANCED_RATE = 0.6
# 55 wpm is (about) the 80th percentile of typing speed (normal, mean 45, sd 12; the column is an
# integer, so a quantile-bin search may put the edge at 55 or 56).
SEX_PENALTY = 1.2  # logit points the historical decisions took off for women (direct dependence)

TRUTHS = {
    "scenario": "hiring",
    "label": "advanced",
    "positive": 1,
    "favorable": "positive",
    "protected": ["sex", "age_band", "group"],
    "model_inputs": list(MODEL_INPUTS),
    "slices": [
        {
            "metric": "fpr",
            "predicates": [
                {"column": "previous_callcentre", "op": "==", "value": "yes"},
                {"column": "typing_wpm", "op": ">=", "value": 55},
            ],
            "mechanism": "labels in the region are a coin (P(advanced) = 0.6) set by an "
            "unrecorded practice, while the recorded signals there are the strongest, so the "
            "model advances (almost) the whole region",
        }
    ],
    "proxies": {"group": "home_area", "sex": "part_time", "age_band": "years_experience"},
    "direct": {
        "attribute": "sex",
        "expect": "decisions change",
        "from": "female",
        "to": "male",
        "direction": "to_favorable",
        "mechanism": f"the training labels take {SEX_PENALTY} logit points off women, all else "
        "equal, so flipping female -> male raises scores and male -> female lowers them",
    },
    "defect": {
        "predicates": [
            {"column": "home_area", "op": "==", "value": "Cobhallow"},
        ],
        "metric": "error",
        "description": "the candidate was trained with every applicant from Cobhallow marked as "
        "advanced (that office's export filled an empty status with the default 'advanced'), so "
        "it advances most of Cobhallow; the pipeline is linear, so a defect region of one level "
        "stays confined to it",
    },
}


def generate(n_rows: int = 24_000, *, seed: int = 0) -> pd.DataFrame:
    """Draw ``n_rows`` invented applications with the historical screening outcome.

    Parameters
    ----------
    n_rows : int, default=24_000
        Number of rows.
    seed : int, default=0
        Seed of the generator; the same seed gives the same frame.

    Returns
    -------
    pandas.DataFrame
        15 columns: the protected attributes ``sex`` (a model input), ``age_band`` and ``group``
        (not model inputs), the other eleven model inputs, and the label ``advanced``.
    """
    rng = np.random.default_rng([seed, 202])
    n = int(n_rows)

    area = rng.choice(len(AREAS), size=n, p=AREA_SHARE)
    dominant = np.asarray(AREA_GROUP)[area]
    other = (dominant + rng.integers(1, len(GROUPS), size=n)) % len(GROUPS)
    group = np.where(rng.random(n) < 0.8, dominant, other)

    female = rng.random(n) < 0.55
    age = np.clip(rng.gamma(3.0, 5.5, size=n) + 18.0, 18.0, 70.0)
    age_band = np.searchsorted(AGE_EDGES, age, side="right") - 1
    # Proxy for sex: asking for part-time hours.
    part_time = rng.random(n) < np.where(female, 0.45, 0.08)
    # Proxy for age: years of work experience are a fraction of the years since 17.
    experience = np.round((age - 17.0) * rng.beta(4.0, 2.0, size=n), 1)

    wpm = np.round(np.clip(rng.normal(45.0, 12.0, size=n), 10, 110))
    assessment = np.round(100 * rng.beta(5.0, 3.0, size=n))
    languages = np.minimum(1 + rng.poisson(0.4, size=n), 4)
    education = rng.choice(len(EDUCATION), size=n, p=(0.45, 0.35, 0.20))
    commute = np.round(np.exp(rng.normal(np.log(11.0), 0.7, size=n)), 1)
    previous = rng.random(n) < 0.35
    referral = rng.random(n) < 0.3
    shift = rng.choice(len(SHIFTS), size=n, p=(0.45, 0.30, 0.25))

    logit = (
        -3.3
        + 0.07 * (assessment - 62.0)
        + 0.28 * (wpm - 45.0)
        + 3.5 * previous
        + 1.4 * referral
        + 0.7 * (languages - 1)
        + 0.5 * (education == 2)
        + 0.1 * np.minimum(experience, 15.0)
        - 0.07 * (commute - 11.0)
        + 0.7 * (shift == 2)
        - SEX_PENALTY * female
    )
    advanced = rng.random(n) < 1.0 / (1.0 + np.exp(-logit))
    planted = previous & (wpm >= 55)
    advanced = np.where(planted, rng.random(n) < SLICE_ADVANCED_RATE, advanced)

    # Missing values: education not recorded (3%), shift preference not stated (5%). The
    # numeric inputs are complete: the pipeline is saved with skops and must load with skops'
    # default trusted types, which rules out scikit-learn's SimpleImputer.
    education_label = np.asarray(EDUCATION, dtype=object)[education]
    education_label[rng.random(n) < 0.03] = None
    shift_label = np.asarray(SHIFTS, dtype=object)[shift]
    shift_label[rng.random(n) < 0.05] = None

    yes_no = np.asarray(["no", "yes"], dtype=object)
    return pd.DataFrame(
        {
            "sex": np.where(female, "female", "male"),
            "age_band": np.asarray(AGE_BANDS)[age_band],
            "group": np.asarray(GROUPS)[group],
            "home_area": np.asarray(AREAS)[area],
            "part_time": yes_no[part_time.astype(int)],
            "education": education_label,
            "previous_callcentre": yes_no[previous.astype(int)],
            "referral": yes_no[referral.astype(int)],
            "shift": shift_label,
            "years_experience": experience,
            "typing_wpm": wpm.astype(np.int64),
            "assessment_score": assessment,
            "languages": languages.astype(np.int64),
            "commute_km": commute,
            "advanced": advanced.astype(np.int64),
        }
    )


def model_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """The model's inputs in the pipeline's column order (strings as plain objects)."""
    X = frame.loc[:, list(MODEL_INPUTS)].copy()
    for column in CATEGORICAL_INPUTS:
        X[column] = X[column].astype(object)
    return X


def defect_mask(frame: pd.DataFrame) -> np.ndarray:
    """Rows of the candidate's defect region (``TRUTHS["defect"]``)."""
    return slice_mask(frame, TRUTHS["defect"]["predicates"])


def train(frame: pd.DataFrame, *, seed: int = 0, defect: bool = False):
    """Fit the screening pipeline on a training draw.

    Parameters
    ----------
    frame : pandas.DataFrame
        A draw from :func:`generate` (not the holdout).
    seed : int, default=0
        The classifier's ``random_state``.
    defect : bool, default=False
        Train the regression candidate: labels of the defect region are set to 1 first.

    Returns
    -------
    (sklearn.pipeline.Pipeline, callable)
        The fitted pipeline and ``save(path)`` that writes it with ``skops.io.dump``.
    """
    from sklearn.compose import ColumnTransformer
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import Pipeline
    from sklearn.preprocessing import OneHotEncoder, StandardScaler

    y = frame["advanced"].to_numpy().copy()
    if defect:
        y[defect_mask(frame)] = 1
    # OneHotEncoder treats a missing level as a category of its own; every step here is a type
    # skops trusts by default, so the file loads without widening the trusted set.
    prepare = ColumnTransformer(
        [
            (
                "categorical",
                OneHotEncoder(handle_unknown="ignore", sparse_output=False),
                list(CATEGORICAL_INPUTS),
            ),
            ("numeric", StandardScaler(), list(NUMERIC_INPUTS)),
        ]
    )
    classify = LogisticRegression(C=1.0, max_iter=2000, random_state=seed)
    pipeline = Pipeline([("prepare", prepare), ("classify", classify)])
    pipeline.fit(model_frame(frame), y)

    def save(path) -> None:
        import skops.io

        skops.io.dump(pipeline, str(path))

    return pipeline, save


def predict_proba(model, frame: pd.DataFrame) -> np.ndarray:
    """Probability of ``advanced == 1`` for each row of a generated frame."""
    return np.asarray(model.predict_proba(model_frame(frame))[:, 1], dtype=np.float64)
