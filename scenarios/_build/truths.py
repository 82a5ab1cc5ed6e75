"""Measure a scenario's planted truths with its trained models on a large fresh draw.

The planted structure (``TRUTHS`` of a generator: slices, defect region, direct dependence,
protected attributes) says *where* the effects are; this module says *how big* they really are
for the models that were trained: each rate is the share of the model's decisions (score >=
:data:`THRESHOLD`) on a fresh draw from the same generator, with its binomial standard error.
The tests compare the holdout's counts with these rates, so they must not come from probe's own
analyses.
"""

from __future__ import annotations

import json
import math
from types import ModuleType
from typing import Any

import numpy as np
import pandas as pd

from probe.errors import DataError

from .predicates import slice_mask

#: Decision threshold the truths are measured at (the plans use the same).
THRESHOLD = 0.5


def measure_truths(
    generator: ModuleType, model: Any, candidate: Any, fresh: pd.DataFrame
) -> dict:
    """The generator's ``TRUTHS`` with the rates both models achieve on ``fresh``.

    Parameters
    ----------
    generator : module
        A scenario's ``generate.py`` (``TRUTHS``, ``predict_proba``).
    model, candidate : object
        The trained production model and regression candidate.
    fresh : pandas.DataFrame
        A large draw from the generator, used by nothing else.

    Returns
    -------
    dict
        A copy of ``TRUTHS`` with ``definition``, ``overall`` and ``groups`` added and the
        measured rates written into each slice, the defect and the direct dependence.
    """
    truths = json.loads(json.dumps(generator.TRUTHS))  # a deep copy of the planted structure
    label = (fresh[truths["label"]] == truths["positive"]).to_numpy()
    score = generator.predict_proba(model, fresh)
    score_candidate = generator.predict_proba(candidate, fresh)
    decision = score >= THRESHOLD
    decision_candidate = score_candidate >= THRESHOLD
    everyone = np.ones(len(fresh), dtype=bool)
    definition = (
        f"rate of the decisions (score >= {THRESHOLD}) of the model on a fresh draw of "
        f"{len(fresh):,} rows from the same generator (another seed); error = P(decision != "
        "label), fpr = P(decision = 1 | label = 0), fnr = P(decision = 0 | label = 1), "
        "selection = P(decision = 1); rest = every row outside the slice; se = binomial "
        "standard error of the measured rate"
    )
    truths["definition"] = definition
    truths["overall"] = {
        metric: _rate(metric, label, decision, everyone)["rate"]
        for metric in ("error", "fpr", "fnr", "selection")
    }
    truths["overall"]["positive_rate"] = float(label.mean())

    for planted in truths["slices"]:
        rows = slice_mask(fresh, planted["predicates"])
        inside = _rate(planted["metric"], label, decision, rows)
        outside = _rate(planted["metric"], label, decision, ~rows)
        planted.update(
            true_rate=inside["rate"],
            true_rate_se=inside["se"],
            rest_rate=outside["rate"],
            ratio=inside["rate"] / outside["rate"],
            share=float(rows.mean()),
            base_share=inside["base_rows"] / len(fresh),
            candidate_rate=_rate(planted["metric"], label, decision_candidate, rows)["rate"],
            other_metrics={
                metric: {
                    "rate": _rate(metric, label, decision, rows)["rate"],
                    "rest_rate": _rate(metric, label, decision, ~rows)["rate"],
                }
                for metric in ("error", "fpr", "fnr", "selection")
            },
            quantile_edges={
                p["column"]: _quantile_edges(fresh[p["column"]])
                for p in planted["predicates"]
                if _quantile_edges(fresh[p["column"]]) is not None
            },
        )

    defect = truths["defect"]
    rows = slice_mask(fresh, defect["predicates"])
    metric = defect.get("metric", "error")
    defect.update(
        metric=metric,
        share=float(rows.mean()),
        production_rate=_rate(metric, label, decision, rows)["rate"],
        candidate_rate=_rate(metric, label, decision_candidate, rows)["rate"],
        production_rest_rate=_rate(metric, label, decision, ~rows)["rate"],
        candidate_rest_rate=_rate(metric, label, decision_candidate, ~rows)["rate"],
        overall_change=float(
            (decision_candidate != label).mean() - (decision != label).mean()
        ),
    )

    if truths.get("direct"):
        truths["direct"]["measured"] = {
            "model": _direct_flips(generator, model, fresh, truths["direct"], decision),
            "candidate": _direct_flips(
                generator, candidate, fresh, truths["direct"], decision_candidate
            ),
        }

    truths["groups"] = _group_rates(fresh, truths["protected"], label, decision)
    return truths


def _direct_flips(
    generator: ModuleType, model: Any, fresh: pd.DataFrame, direct: dict, decision: np.ndarray
) -> list[dict]:
    """Flip the attribute between its two planted levels, both ways, and count moved decisions."""
    attribute = direct["attribute"]
    out = []
    pairs = ((direct["from"], direct["to"]), (direct["to"], direct["from"]))
    for source_level, target_level in pairs:
        rows = (fresh[attribute] == source_level).to_numpy()
        flipped = fresh.loc[rows].copy()
        flipped[attribute] = target_level
        before = decision[rows]
        after = generator.predict_proba(model, flipped) >= THRESHOLD
        out.append(
            {
                "from": source_level,
                "to": target_level,
                "rows": int(rows.sum()),
                "flip_rate": float((after != before).mean()),
                "to_favorable": float((after & ~before).mean()),
                "to_unfavorable": float((~after & before).mean()),
            }
        )
    return out


def _group_rates(
    fresh: pd.DataFrame, protected: list[str], label: np.ndarray, decision: np.ndarray
) -> dict:
    groups: dict[str, dict] = {}
    for attribute in protected:
        levels = {}
        for level in sorted(fresh[attribute].dropna().unique()):
            rows = (fresh[attribute] == level).to_numpy()
            levels[str(level)] = {
                "share": float(rows.mean()),
                **{
                    f"{metric}_rate" if metric in ("error", "selection") else metric: _rate(
                        metric, label, decision, rows
                    )["rate"]
                    for metric in ("selection", "error", "fpr", "fnr")
                },
            }
        best = max(v["selection_rate"] for v in levels.values())
        for v in levels.values():
            v["impact_ratio"] = v["selection_rate"] / best
        groups[attribute] = levels
    return groups


def _outcome(metric: str, label: np.ndarray, decision: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(base rows, event per row) of a rate metric; the rate is event[base].mean()."""
    if metric == "error":
        return np.ones_like(label, dtype=bool), decision != label
    if metric == "fpr":
        return ~label, decision
    if metric == "fnr":
        return label, ~decision
    if metric == "selection":
        return np.ones_like(label, dtype=bool), decision
    raise DataError(f"metric `{metric}` is not one of error, fpr, fnr, selection")


def _rate(metric: str, label: np.ndarray, decision: np.ndarray, rows: np.ndarray) -> dict:
    base, event = _outcome(metric, label, decision)
    chosen = base & rows
    n = int(chosen.sum())
    value = float(event[chosen].mean()) if n else math.nan
    se = math.sqrt(value * (1.0 - value) / n) if n else math.nan
    return {"rate": value, "se": se, "base_rows": n}


def _quantile_edges(series: pd.Series) -> list[float] | None:
    if not pd.api.types.is_numeric_dtype(series):
        return None
    values = series.dropna().to_numpy(dtype=float)
    return [float(q) for q in np.quantile(values, [0.2, 0.4, 0.6, 0.8])]
