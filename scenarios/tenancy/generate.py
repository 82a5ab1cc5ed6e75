"""Tenancy screening at Marrowfield Housing Trust (an invented landlord), from a stratified sample.

Every name here (the trust, the districts, the heritage groups) is invented; the data are
synthetic and the effects are planted on purpose so that probe's analyses can be checked against
them. See README.md in this folder for the story and the planted truths with their numbers.

The holdout is not a simple random sample of independent people:

- **design weights**: applicants referred by the support scheme are 10% of the population but 60%
  of the sample (an oversampled stratum); ``design_weight`` is population share over sample share
  (1/6 for the referred, 9/4 for the rest), a Kish design effect of about 2;
- **repeated people**: an applicant (``applicant_id``) applies 1 to 5 times and keeps a personal
  effect on the outcome, so rows of one person are correlated;
- **membership known only as probabilities**: the heritage group (``heritage``) is drawn here but
  left out of the holdout (:data:`HIDDEN`); the holdout carries ``p_amber``, ``p_slate``,
  ``p_ochre``, the group's probability given the district (the generator's own composition table,
  so calibrated by construction).

The positive class is ``kept_up == 1``: the tenancy ran its first year with the rent kept up;
the model's positive decision (offer the tenancy) is the favourable one.

The module is imported by ``probe.scenarios.scenario_module("tenancy.generate")``; its interface
is the other scenarios' (``generate``, ``train``, ``predict_proba``, ``TRUTHS``) plus
:data:`HIDDEN` (columns the recipe keeps out of the holdout) and :func:`design_truths`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .._build.predicates import slice_mask
from .._build.training import categorical_design, train_lightgbm

MODEL_FILE = "model.txt"
CANDIDATE_FILE = "candidate.txt"

DISTRICTS = (
    "Cobble Reach", "Pellow Green", "Ashgrove Rise", "Tamsin Quay", "Hartsmoor", "Nettlebank",
    "Elderwell", "Quarry Lanes",
)
DISTRICT_SHARE = (0.34, 0.13, 0.11, 0.10, 0.10, 0.08, 0.08, 0.06)
HERITAGE = ("Amber", "Slate", "Ochre")
# P(heritage | district): mixed districts, so most rows' largest probability is below 0.8.
COMPOSITION = np.array([
    (0.55, 0.35, 0.10), (0.10, 0.80, 0.10), (0.70, 0.20, 0.10), (0.10, 0.20, 0.70),
    (0.90, 0.05, 0.05), (0.20, 0.70, 0.10), (0.10, 0.10, 0.80), (0.45, 0.45, 0.10),
])
PROBABILITY_COLUMNS = {"Amber": "p_amber", "Slate": "p_slate", "Ochre": "p_ochre"}
AGE_BANDS = ("18-29", "30-44", "45-59", "60+")
AGE_EDGES = (18, 30, 45, 60, 200)
CHANNELS = ("online", "office", "agent")
EMPLOYMENT = ("employed", "self_employed", "benefits", "student")
LEASES = (6, 12, 24, 36)

#: The design: the referred stratum's share of the population and of the sample.
REFERRED_POPULATION, REFERRED_SAMPLE = 0.10, 0.60
WEIGHTS = "design_weight"
PERSON = "applicant_id"
#: Columns drawn (the true heritage group) but kept out of the holdout the plan reads.
HIDDEN = ("heritage",)
# Applications per person: 1 to 5.
VISITS, VISITS_P = (1, 2, 3, 4, 5), (0.45, 0.25, 0.15, 0.10, 0.05)
# The Slate group's incomes are lower within every district (log scale) and its applicants have a
# guarantor less often (8% against 25%): the outcome, and so the model, differ between the true
# groups beyond what the district (the probabilities' only source) says.
SLATE_LOG_INCOME = -0.6

CATEGORICAL_INPUTS = ("district", "channel", "employment", "pets", "guarantor")
LEVELS = {
    "district": DISTRICTS,
    "channel": CHANNELS,
    "employment": EMPLOYMENT,
    "pets": ("no", "yes"),
    "guarantor": ("no", "yes"),
}
MODEL_INPUTS = CATEGORICAL_INPUTS + (
    "income", "rent_burden", "lease_months", "arrears_12m", "years_renting", "deposit_weeks",
)

# Planted: in this region the outcome is set by a factor the model never sees (a landlord-wide
# rent review in Cobble Reach that hit agent-placed tenancies of high rent burden): it is a coin
# with P(kept_up) = 0.20, so the model declines (almost) the whole region, its keepers included.
SLICE_KEPT_RATE = 0.20
# rent as a share of monthly income: 0.6 is about the 80th percentile of the sample's burden.
BURDEN_EDGE = 0.6

TRUTHS = {
    "scenario": "tenancy",
    "label": "kept_up",
    "positive": 1,
    "favorable": "positive",
    "protected": ["age_band"],
    "model_inputs": list(MODEL_INPUTS),
    "slices": [
        {
            "metric": "fnr",
            "predicates": [
                {"column": "district", "op": "==", "value": "Cobble Reach"},
                {"column": "channel", "op": "==", "value": "agent"},
                {"column": "rent_burden", "op": ">=", "value": BURDEN_EDGE},
            ],
            "mechanism": "labels in the region are a coin (P(kept_up) = 0.20) driven by a factor "
            "that is not a column, so the model declines (almost) the whole region",
        }
    ],
    "proxies": {"age_band": "years_renting"},
    "direct": None,
    "defect": {
        "predicates": [
            {"column": "channel", "op": "==", "value": "online"},
            {"column": "lease_months", "op": ">=", "value": 24},
        ],
        "metric": "error",
        "description": "the candidate was trained with every online application for a lease of "
        "24 months or more labelled as not kept up (a faulty join with the arrears ledger), so "
        "it declines that region wholesale",
    },
}


def _people(rng, n: int):
    """Persons and their applications: each person's row count, until ``n`` rows are reached."""
    visits = rng.choice(VISITS, size=n, p=VISITS_P)  # more persons than needed; cut below
    person = np.repeat(np.arange(n), visits)[:n]
    return person, int(person[-1]) + 1


def generate(n_rows: int = 24_000, *, seed: int = 0) -> pd.DataFrame:
    """Draw ``n_rows`` invented tenancy applications (a stratified sample) with their outcome.

    Parameters
    ----------
    n_rows : int, default=24_000
        Number of rows (applications).
    seed : int, default=0
        Seed of the generator; the same seed gives the same frame.

    Returns
    -------
    pandas.DataFrame
        The protected attribute ``age_band`` and the true ``heritage`` (neither a model input;
        ``heritage`` is :data:`HIDDEN`), the design columns ``applicant_id``, ``design_weight``,
        ``referred`` and the probabilities ``p_amber``, ``p_slate``, ``p_ochre``, the model inputs,
        ``rent_burden`` and the label ``kept_up``.
    """
    rng = np.random.default_rng([seed, 404])
    n = int(n_rows)
    person, n_people = _people(rng, n)

    # person-level draws, then broadcast to the person's applications
    referred_p = rng.random(n_people) < REFERRED_SAMPLE
    district_p = rng.choice(len(DISTRICTS), size=n_people, p=DISTRICT_SHARE)
    u = rng.random(n_people)
    heritage_p = (u[:, None] > np.cumsum(COMPOSITION[district_p], axis=1)).sum(axis=1)
    heritage_p = np.minimum(heritage_p, len(HERITAGE) - 1)
    age_p = np.where(referred_p, rng.normal(26.0, 6.0, n_people), rng.normal(45.0, 14.0, n_people))
    age_p = np.clip(age_p, 18.0, 88.0)
    # Proxy for age: years renting are a fraction of the adult years.
    years_p = np.round((age_p - 18.0) * rng.beta(5.0, 2.0, size=n_people), 1)
    log_income_p = (rng.normal(7.75, 0.35, n_people) + SLATE_LOG_INCOME * (heritage_p == 1)
                    - 0.35 * referred_p)
    effect_p = rng.normal(0.0, 1.0, n_people)  # the person's own effect: rows of one person agree
    pets_p = rng.random(n_people) < 0.25

    referred, district, heritage = referred_p[person], district_p[person], heritage_p[person]
    age, years = age_p[person], years_p[person]
    age_band = np.searchsorted(AGE_EDGES, age, side="right") - 1
    income = np.round(np.exp(log_income_p[person] + rng.normal(0.0, 0.08, n)), -1)
    rent = np.round(np.exp(rng.normal(np.log(560.0), 0.3, n)), -1)
    burden = np.round(rent / income, 3)
    channel = rng.choice(len(CHANNELS), size=n, p=(0.35, 0.20, 0.45))
    employment = rng.choice(len(EMPLOYMENT), size=n, p=(0.66, 0.14, 0.14, 0.06))
    lease = rng.choice(LEASES, size=n, p=(0.15, 0.45, 0.25, 0.15))
    arrears = rng.poisson(0.15 + 0.5 * referred)
    guarantor = rng.random(n) < np.where(heritage == 1, 0.08, 0.25)
    deposit = rng.choice((4, 5, 6), size=n, p=(0.3, 0.5, 0.2)).astype(np.int64)

    logit = (
        1.2
        + 0.9 * (np.log(income) - 7.6)
        - 1.8 * (burden - 0.35)
        - 0.6 * arrears
        + 0.04 * np.minimum(years, 25.0)
        + 0.8 * guarantor
        - 0.4 * (employment == 2)
        + 0.15 * (lease >= 24)
        + effect_p[person]
    )
    kept = rng.random(n) < 1.0 / (1.0 + np.exp(-logit))
    planted = (district == 0) & (channel == 2) & (burden >= BURDEN_EDGE)
    kept = np.where(planted, rng.random(n) < SLICE_KEPT_RATE, kept)

    weight = np.where(referred, REFERRED_POPULATION / REFERRED_SAMPLE,
                      (1 - REFERRED_POPULATION) / (1 - REFERRED_SAMPLE))
    income = np.where(rng.random(n) < 0.05, np.nan, income)  # income not declared
    employment_label = np.asarray(EMPLOYMENT, dtype=object)[employment]
    employment_label[rng.random(n) < 0.03] = None  # not recorded
    yes_no = np.asarray(["no", "yes"], dtype=object)
    probs = COMPOSITION[district]
    return pd.DataFrame({
        "applicant_id": np.char.add("A", np.char.zfill(person.astype(str), 6)),
        "design_weight": weight,
        "referred": yes_no[referred.astype(int)],
        "age_band": np.asarray(AGE_BANDS)[age_band],
        "heritage": np.asarray(HERITAGE)[heritage],
        **{column: probs[:, k] for k, column in enumerate(PROBABILITY_COLUMNS.values())},
        "district": np.asarray(DISTRICTS)[district],
        "channel": np.asarray(CHANNELS)[channel],
        "employment": employment_label,
        "pets": yes_no[pets_p[person].astype(int)],
        "guarantor": yes_no[guarantor.astype(int)],
        "income": income,
        "rent_burden": burden,
        "lease_months": lease.astype(np.int64),
        "arrears_12m": arrears.astype(np.int64),
        "years_renting": years,
        "deposit_weeks": deposit,
        "kept_up": kept.astype(np.int64),
    })


def model_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """The model's inputs, string columns as ``category`` with the fixed level lists."""
    return categorical_design(frame, MODEL_INPUTS, {c: LEVELS[c] for c in CATEGORICAL_INPUTS})


def defect_mask(frame: pd.DataFrame) -> np.ndarray:
    """Rows of the candidate's defect region (``TRUTHS["defect"]``)."""
    return slice_mask(frame, TRUTHS["defect"]["predicates"])


def train(frame: pd.DataFrame, *, seed: int = 0, defect: bool = False):
    """Fit the screening model on a training draw (unweighted, as the trust's vendor did).

    Returns
    -------
    (lightgbm.Booster, callable)
        The booster and ``save(path)`` that writes it as a LightGBM model file.
    """
    y = frame["kept_up"].to_numpy().copy()
    if defect:
        y[defect_mask(frame)] = 0
    return train_lightgbm(model_frame(frame), y, seed=seed)


def predict_proba(model, frame: pd.DataFrame) -> np.ndarray:
    """Probability of ``kept_up == 1`` for each row of a generated frame."""
    return np.asarray(model.predict(model_frame(frame), num_threads=1), dtype=np.float64)


def design_truths(candidate, fresh: pd.DataFrame, threshold: float) -> dict:
    """The design's planted truths, measured on the fresh draw with the candidate's decisions.

    The fresh draw is a stratified sample like the holdout, so a population quantity is its
    ``design_weight``-weighted value. Measured here, with numpy on the true ``heritage`` the
    holdout does not carry: the Kish design effect of the weights, the rows per applicant, the
    selection rate of ``age_band = 18-29`` weighted and unweighted, and per heritage group the
    selection rate with the true labels and the probability-weighted one (every row counted in
    each group with weight ``w * p_group``), the gaps of Slate to the reference (the group of the
    highest probability-weighted rate) of both and their ratio (the attenuation).
    """
    selected = predict_proba(candidate, fresh) >= threshold
    w = fresh[WEIGHTS].to_numpy()
    young = (fresh["age_band"] == "18-29").to_numpy()
    true_rate, weighted_rate = {}, {}
    for group, column in PROBABILITY_COLUMNS.items():
        member = (fresh["heritage"] == group).to_numpy()
        true_rate[group] = float(np.sum(w * member * selected) / np.sum(w * member))
        p = fresh[column].to_numpy()
        weighted_rate[group] = float(np.sum(w * p * selected) / np.sum(w * p))
    reference = max(weighted_rate, key=weighted_rate.get)  # as probe chooses, on the population
    true_gap = true_rate["Slate"] - true_rate[reference]
    weighted_gap = weighted_rate["Slate"] - weighted_rate[reference]
    probs = fresh[list(PROBABILITY_COLUMNS.values())].to_numpy()
    return {
        "model": "candidate",
        "definition": "population values: design_weight-weighted over the fresh draw (a "
                      "stratified sample like the holdout), decisions of the candidate at the "
                      "threshold; unweighted = the sample's plain share",
        "weights": WEIGHTS,
        "kish_design_effect": float(len(w) * np.sum(w * w) / np.sum(w) ** 2),
        "cluster": PERSON,
        "rows_per_cluster": float(len(fresh) / fresh[PERSON].nunique()),
        "weighted_vs_unweighted": {
            "attribute": "age_band", "group": "18-29",
            "weighted": float(np.sum(w * young * selected) / np.sum(w * young)),
            "unweighted": float(selected[young].mean()),
        },
        "membership": {
            "attribute": "heritage", "columns": dict(PROBABILITY_COLUMNS),
            "uncertain_share": float(np.mean(probs.max(axis=1) < 0.8)),
            "true_selection_rate": true_rate,
            "probability_weighted_selection_rate": weighted_rate,
            "group": "Slate", "reference": reference,
            "true_gap": true_gap, "probability_weighted_gap": weighted_gap,
            "attenuation": weighted_gap / true_gap,
        },
    }
