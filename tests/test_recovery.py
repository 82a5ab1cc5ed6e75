"""Recovery: the slice search finds every scenario's planted worst slice.

For each invented scenario the production model is scored on the holdout, the search runs with the
plan's ``[slices]`` settings, and each planted slice (``truths["slices"]``) must be among the top
three found, with a reported rate interval that covers the planted true rate. The true rate is
independent of the search: the build measures it with the trained model on a fresh 200,000-row
draw from the scenario's generator (a planted truth, see scenarios/README.md).

"Among the top three" is judged on rows, not on predicate text: the search states numeric
thresholds as quantile-bin edges of the holdout (``typing_wpm >= 56`` where the plant says 55),
so a found slice matches a planted one when their rows on the holdout overlap with Jaccard
similarity >= 0.8.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from probe.adapters import load_model
from probe.plan import load_plan
from probe.scenarios import SCENARIOS
from probe.slices import find_slices

pytestmark = pytest.mark.slow

TOP = 3
MIN_JACCARD = 0.8


def _jaccard(a: np.ndarray, b: np.ndarray) -> float:
    return float((a & b).sum() / (a | b).sum())


@pytest.mark.parametrize("name", SCENARIOS)
def test_planted_slices_come_out_in_the_top_three_with_covering_intervals(
    name, built, slice_mask
):
    scenario = built(name)
    truths = scenario.truths
    plan = load_plan(scenario.plan_path)
    settings = plan.slices
    holdout = pd.read_parquet(scenario.data_path)
    model = load_model(str(scenario.model_path))  # production: the model the truths describe
    decision = model.scores(holdout) >= 0.5
    label = (holdout[truths["label"]] == truths["positive"]).to_numpy()
    X = holdout.drop(columns=[truths["label"]])

    findings = find_slices(
        X, label, decision, metric=settings.metric, depth=settings.depth,
        min_rows=settings.min_rows, bins=settings.bins, top=settings.top, split=settings.split,
        interval=settings.interval, confidence_level=plan.confidence_level, rng=plan.seed,
    )
    top = findings.found[:TOP]
    assert len(top) == TOP
    for planted in truths["slices"]:
        assert planted["metric"] == settings.metric
        planted_rows = slice_mask(holdout, planted["predicates"])
        overlaps = [_jaccard(slice_mask(holdout, list(s.predicates)), planted_rows) for s in top]
        matches = [s for s, j in zip(top, overlaps) if j >= MIN_JACCARD]
        assert matches, (name, planted["predicates"], [(s.label, round(j, 2)) for s, j in
                                                       zip(top, overlaps)])
        best = matches[0]
        assert best.rate.low <= planted["true_rate"] <= best.rate.high, (
            name, best.label, best.rate.to_dict(), planted["true_rate"])
