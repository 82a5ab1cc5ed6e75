"""A realistic report dict (``probe.report/2``) for the report-file renderers' tests.

The numbers come from invented counts for an invented lending scenario, pushed through
``probe.stats`` (Wilson, Newcombe, MOVER-R, the two-proportion test, Benjamini–Hochberg), so every
estimate is internally consistent: the same shape and kind of values a real run writes. Planted on
purpose, to exercise the renderers:

- a group name that is an HTML ``<script>`` tag (must be escaped everywhere);
- slice labels with brackets (``income in [25, 34)``) and a level holding a pipe (``contract|temp``);
- a group with no positive labels, so its TPR, FNR and EOD are null (NaN became None);
- an impossible flip test (all values null), a rule with a null value;
- ``comparison`` null unless asked for (a section that was not run).
"""

from __future__ import annotations

import numpy as np

from probe import stats

SCRIPT_GROUP = '<script>alert("x")</script>'
BRACKET_LABEL = "income in [25, 34)"
PIPE_LEVEL = "contract|temp"

_NULL = {"value": None, "low": None, "high": None, "method": "wilson"}


def _est(x: float, n: float) -> dict:
    return dict(_NULL) if n == 0 else stats.wilson(x, n).to_dict()


def _diff(x1, n1, x2, n2) -> dict:
    if n1 == 0 or n2 == 0:
        return {"value": None, "low": None, "high": None, "method": "newcombe"}
    return stats.newcombe(x1, n1, x2, n2).to_dict()


# attribute -> [(group, rows, selected, errors, positives, true_positives, false_positives)]
_GROUP_COUNTS = {
    "sex": [
        ("M", 5210, 2970, 880, 3300, 2610, 360),
        ("F", 4630, 1870, 905, 2790, 1640, 230),
        (SCRIPT_GROUP, 40, 12, 9, 0, 0, 12),
    ],
    "age_band": [
        ("18-24", 1210, 510, 260, 640, 440, 70),
        ("25-54", 6420, 3250, 1090, 3960, 2950, 300),
        ("55+", 2250, 1172, 444, 1490, 920, 252),
    ],
}
_UNKNOWN = {"sex": 120, "age_band": 0}


def _groups() -> list[dict]:
    rows_total = sum(c[1] for c in _GROUP_COUNTS["sex"]) + _UNKNOWN["sex"]
    out = []
    for attribute, counts in _GROUP_COUNTS.items():
        # the reference group is the one with the highest selection rate (common practice)
        ref = max(counts, key=lambda c: c[2] / c[1])
        _, n_r, sel_r, _, pos_r, tp_r, _ = ref
        for group, n, sel, err, pos, tp, fp in counts:
            neg = n - pos
            ir = stats.impact_ratio(sel, n, sel_r, n_r).to_dict()
            out.append(
                {
                    "attribute": attribute,
                    "group": group,
                    "rows": n,
                    "share": n / rows_total,
                    "small": n / rows_total < 0.02,
                    "selection_rate": _est(sel, n),
                    "error_rate": _est(err, n),
                    "tpr": _est(tp, pos),
                    "fpr": _est(fp, neg),
                    "fnr": _est(pos - tp, pos),
                    "ppv": _est(tp, sel),
                    "impact_ratio": ir,
                    "reference_group": ref[0],
                    "four_fifths_flag": ir["value"] is not None and ir["value"] < 0.8,
                    "spd": _diff(sel, n, sel_r, n_r),
                    "eod": _diff(tp, pos, tp_r, pos_r),
                }
            )
    return out


# (predicates, rows, errors) measured on the estimate half of 5000 rows
_SLICES = [
    (
        [
            {"column": "income", "op": "in", "value": [25, 34]},
            {"column": "employment", "op": "==", "value": "self-employed"},
        ],
        312,
        121,
    ),
    ([{"column": "employment", "op": "==", "value": PIPE_LEVEL}], 455, 142),
    ([{"column": "region", "op": "missing", "value": None}], 140, 46),
    ([{"column": "tenure_months", "op": "in", "value": [None, 6]}], 610, 170),
]


def _label(predicates: list[dict]) -> str:
    parts = []
    for p in predicates:
        if p["op"] == "in":
            low, high = p["value"]
            if low is None:
                parts.append(f"{p['column']} < {high}")
            elif high is None:
                parts.append(f"{p['column']} >= {low}")
            else:
                parts.append(f"{p['column']} in [{low}, {high})")
        elif p["op"] == "missing":
            parts.append(f"{p['column']} is missing")
        else:
            parts.append(f"{p['column']} = {p['value']}")
    return " and ".join(parts)


def _slices() -> dict:
    n_all, err_all = 5000, 1020
    rng = np.random.default_rng(20240601)
    found = []
    p_values = []
    for predicates, n, err in _SLICES:
        p_values.append(float(stats.two_proportion_pvalue(err, n, err_all - err, n_all - n)))
    # the other 408 hypotheses tested: unremarkable p-values
    q_values = stats.bh_adjust(np.concatenate([p_values, rng.uniform(0.02, 1, 408)]))
    for rank, ((predicates, n, err), p, q) in enumerate(zip(_SLICES, p_values, q_values), 1):
        rate = _est(err, n)
        gap = _diff(err, n, err_all - err, n_all - n)
        label = _label(predicates)
        found.append(
            {
                "rank": rank,
                "predicates": predicates,
                "label": label,
                "rows": n,
                "share": n / n_all,
                "rate": rate,
                "gap": gap,
                "p_value": p,
                "q_value": float(q),
                "sentence": (
                    f"Where {label}, the error rate is {rate['value']:.1%} against "
                    f"{(err_all - err) / (n_all - n):.1%} elsewhere ({n} rows)."
                ),
            }
        )
    return {
        "metric": "error",
        "direction": "higher",
        "overall": _est(err_all, n_all),
        "family": 412,
        "significant": int(sum(q <= 0.05 for q in q_values[: len(found)])),
        "search_rows": 4880,
        "estimate_rows": n_all,
        "found": found,
    }


def _flip(attribute, mode, frm, to, n, flips, fav, score_change):
    null = dict(_NULL)
    if n == 0:
        return {
            "attribute": attribute,
            "mode": mode,
            "from": frm,
            "to": to,
            "rows": 0,
            "flip_rate": null,
            "to_favorable": null,
            "to_unfavorable": null,
            "mean_score_change": {**null, "method": "bootstrap-percentile"},
            "impossible": True,
            "sentence": f"`{attribute}` is not a model input, so a direct flip cannot be run.",
        }
    rate = _est(flips, n)
    return {
        "attribute": attribute,
        "mode": mode,
        "from": frm,
        "to": to,
        "rows": n,
        "flip_rate": rate,
        "to_favorable": _est(fav, n),
        "to_unfavorable": _est(flips - fav, n),
        "mean_score_change": {
            "value": score_change,
            "low": score_change - 0.004,
            "high": score_change + 0.004,
            "method": "bootstrap-percentile",
        },
        "impossible": False,
        "sentence": (
            f"Changing {attribute} from {frm} to {to} ({mode}) changes {rate['value']:.1%} of "
            f"decisions; {fav} of {flips} changes favour the person."
        ),
    }


def _flips() -> list[dict]:
    return [
        _flip("sex", "direct", "F", "M", 4630, 46, 41, 0.012),
        _flip("sex", "direct", "M", "F", 5210, 57, 6, -0.011),
        _flip("sex", "transport", "F", "M", 4630, 231, 205, 0.041),
        _flip("sex", "twins", "F", "M", 4630, 139, 120, 0.02),
        _flip("sex", "direct", SCRIPT_GROUP, "F", 40, 3, 1, 0.002),
        _flip("age_band", "direct", "55+", "25-54", 0, 0, 0, None),
    ]


def _comparison() -> dict:
    metrics = []
    for metric, cand, base, p in [
        ("error_rate", (1794, 9880), (1702, 9880), 0.0031),
        ("fpr", (602, 3790), (571, 3790), 0.081),
        ("fnr", (1840, 6090), (1805, 6090), 0.29),
    ]:
        c, b = _est(*cand), _est(*base)
        d = c["value"] - b["value"]
        metrics.append(
            {
                "metric": metric,
                "candidate": c,
                "baseline": b,
                "difference": {
                    "value": d,
                    "low": d - 0.006,
                    "high": d + 0.006,
                    "method": "tango-score",
                },
                "p_value": p,
                "test": "mcnemar",
            }
        )
    worse = dict(_slices()["found"][1])
    worse = {
        **worse,
        "rank": 1,
        "sentence": "The candidate errs more often where " + worse["label"] + ".",
    }
    return {
        "baseline": {"spec": "models/production.skops", "kind": "skops", "sha256": "9f" * 32},
        "metrics": metrics,
        "worse_slices": [worse],
    }


def _verdict(groups: list[dict], slices: dict, flips: list[dict]) -> dict:
    ir_f = next(g for g in groups if g["group"] == "F")["impact_ratio"]
    ir_young = next(g for g in groups if g["group"] == "18-24")["impact_ratio"]
    flip = flips[0]["flip_rate"]
    gap = slices["found"][0]["gap"]

    def rule(name, subject, threshold, value, status, message):
        passed = {"pass": True, "fail": False, "inconclusive": None}[status]
        return {
            "name": name,
            "subject": subject,
            "threshold": threshold,
            "value": value,
            "level": 0.95,
            "family": 1,
            "status": status,
            "passed": passed,
            "message": message,
        }

    return {
        "passed": False,
        "fail_on_inconclusive": False,
        "error_control": {"error_rate": 0.05, "adjustment": "bonferroni", "rules_judged": 2,
                          "min_rows": 30},
        "rules": [
            rule(
                "min_impact_ratio",
                "sex = F",
                0.8,
                ir_f,
                "fail",
                "the whole interval lies below the bound",
            ),
            rule(
                "min_impact_ratio",
                "age_band = 18-24",
                0.8,
                ir_young,
                "inconclusive",
                "the interval straddles the bound",
            ),
            rule(
                "min_impact_ratio",
                f"sex = {SCRIPT_GROUP}",
                0.8,
                dict(_NULL),
                "inconclusive",
                "too few rows to judge (40 rows, under 2 % of the data)",
            ),
            rule(
                "max_flip_rate",
                "sex: F -> M (direct)",
                0.01,
                flip,
                "inconclusive",
                "the interval straddles the bound",
            ),
            rule(
                "max_slice_gap",
                f"slice 1 ({slices['found'][0]['label']})",
                0.10,
                gap,
                "fail",
                "the whole interval lies above the bound",
            ),
            rule(
                "max_regression",
                "error_rate",
                0.02,
                {"value": 0.0093, "low": 0.0033, "high": 0.0153, "method": "tango-score"},
                "pass",
                "the whole interval lies below the bound",
            ),
        ],
    }


def example_report(*, with_comparison: bool = False) -> dict:
    """A fresh, JSON-ready ``probe.report/2`` dict; ``comparison`` is null unless asked for."""
    groups = _groups()
    slices = _slices()
    flips = _flips()
    return {
        "schema": "probe.report/2",
        "caution": (
            "A statistical screen, not a legal finding. The four-fifths rule is a rule of thumb. "
            "Defer to counsel, local law and licensed practice."
        ),
        "provenance": {
            "probe_version": "0.1.0",
            "created": "2024-06-01T09:30:00+00:00",
            "command": "probe run plans/lending.toml --out reports/lending",
            "seed": 20240601,
            "confidence_level": 0.95,
            "model": {
                "spec": "models/candidate.skops",
                "kind": "skops",
                "sha256": "3a" * 32,
                "feature_names": ["income", "employment", "tenure_months", "region", "debt_ratio"],
                "score": "predict_proba[:, 1]",
            },
            "data": {"path": "data/holdout.parquet", "sha256": "c4" * 32, "rows": 9880},
            "plan": {
                "data": {
                    "path": "data/holdout.parquet",
                    "label": "repaid",
                    "positive": 1,
                    "protected": ["sex", "age_band"],
                },
                "model": {
                    "spec": "models/candidate.skops",
                    "threshold": 0.5,
                    "favorable": "positive",
                },
                "slices": {"metric": "error", "depth": 3, "min_rows": 50},
                "policy": {
                    "min_impact_ratio": 0.8,
                    "max_flip_rate": 0.01,
                    "max_slice_gap": 0.1,
                    "max_regression": 0.02,
                },
            },
            "plan_sha256": "5e" * 32,
            "versions": {
                "python": "3.11.9",
                "numpy": "1.26.4",
                "pandas": "2.2.2",
                "scikit-learn": "1.5.0",
            },
            "timings": {
                "load": 0.41,
                "score": 1.92,
                "groups": 0.08,
                "slices": 6.3,
                "flips": 3.1,
                "compare": 2.2,
            },
        },
        "groups": groups,
        "groups_unknown": dict(_UNKNOWN),
        "slices": slices,
        "flips": flips,
        "comparison": _comparison() if with_comparison else None,
        "verdict": _verdict(groups, slices, flips),
    }
