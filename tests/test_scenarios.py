"""Tests of the invented demo scenarios, their build recipe (scenarios/_build/) and the builder
(probe/scenarios.py).

The planted truths are checked against independent computations: the models are loaded with
lightgbm / skops directly (not through probe's adapter), rates are counted with pandas, the
binomial interval comes from scipy.stats.binom, and mutual information from
sklearn.metrics.mutual_info_score.
"""

from __future__ import annotations

import json
import shutil
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.metrics import mutual_info_score

from probe.errors import DataError
from probe.scenarios import (
    DEFAULT_SCENARIO,
    SCENARIOS,
    _build_key,
    build_scenario,
    cache_root,
    scenario_dir,
    scenario_module,
    scenarios_root,
)

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib


@pytest.fixture(scope="session")
def scenario_cache(tmp_path_factory):
    return tmp_path_factory.mktemp("probe-cache")


@pytest.fixture(scope="session")
def built(scenario_cache):
    """Every scenario built once per session into a temporary cache."""
    return {name: build_scenario(name, cache_dir=scenario_cache) for name in SCENARIOS}


def _scores(model_path: Path, frame: pd.DataFrame) -> np.ndarray:
    """Positive-class probability, loading the model file with its own library."""
    if model_path.suffix == ".skops":
        import skops.io

        pipeline = skops.io.load(model_path)  # default trusted types only
        return pipeline.predict_proba(frame[list(pipeline.feature_names_in_)])[:, 1]
    import lightgbm as lgb

    booster = lgb.Booster(model_file=str(model_path))
    X = frame[booster.feature_name()].copy()
    categorical = [c for c in X.columns if not pd.api.types.is_numeric_dtype(X[c])]
    for column, levels in zip(categorical, booster.pandas_categorical):
        X[column] = pd.Categorical(X[column], categories=levels)
    return booster.predict(X)


def _rate(metric: str, y: np.ndarray, decision: np.ndarray, rows: np.ndarray):
    """(events, base rows) of a rate metric, counted directly."""
    if metric == "error":
        base, event = rows, decision != y
    elif metric == "fpr":
        base, event = rows & ~y, decision
    elif metric == "fnr":
        base, event = rows & y, ~decision
    else:
        base, event = rows, decision
    return int(event[base].sum()), int(base.sum())


def _codes(series: pd.Series) -> np.ndarray:
    """Integer codes for mutual information: 10 quantile bins for numerics, levels otherwise;
    a missing value is a code of its own."""
    if pd.api.types.is_numeric_dtype(series) and series.nunique() > 10:
        return pd.qcut(series, 10, labels=False, duplicates="drop").fillna(-1).to_numpy()
    return pd.factorize(series.astype(object), use_na_sentinel=False)[0]


@pytest.fixture(scope="session")
def holdouts(built):
    return {name: pd.read_parquet(b.data_path) for name, b in built.items()}


# ------------------------------------------------------------------------------ generators


@pytest.mark.parametrize("name", SCENARIOS)
def test_generate_is_deterministic_for_a_seed_and_differs_across_seeds(name):
    generator = scenario_module(f"{name}.generate")
    first = generator.generate(3_000, seed=7)
    pd.testing.assert_frame_equal(first, generator.generate(3_000, seed=7))
    other = generator.generate(3_000, seed=8)
    assert not first.equals(other)
    assert (first[generator.TRUTHS["label"]] != other[generator.TRUTHS["label"]]).any()


@pytest.mark.parametrize("name", SCENARIOS)
def test_holdout_is_a_large_mixed_table_with_missing_values_and_protected_columns(
    name, built, holdouts
):
    frame, truths = holdouts[name], built[name].truths
    assert len(frame) >= 20_000
    assert frame.shape[1] >= 12
    assert frame.isna().any().sum() >= 2  # at least two columns carry missing values
    assert set(frame[truths["label"]].unique()) == {0, 1}
    numeric = [c for c in truths["model_inputs"] if pd.api.types.is_numeric_dtype(frame[c])]
    assert len(numeric) >= 4 and len(truths["model_inputs"]) - len(numeric) >= 4
    assert set(truths["protected"]) <= set(frame.columns)
    assert set(truths["model_inputs"]) <= set(frame.columns)
    assert set(truths["protected"]) - set(truths["model_inputs"])  # some are not inputs
    assert truths["label"] not in truths["model_inputs"]


def test_exactly_one_scenario_uses_a_protected_attribute_as_input(built):
    direct = {name: b.truths["direct"] for name, b in built.items()}
    assert [name for name, d in direct.items() if d] == ["hiring"]
    for name, b in built.items():
        inputs = set(b.truths["model_inputs"]) & set(b.truths["protected"])
        assert inputs == ({"sex"} if name == "hiring" else set())


# ------------------------------------------------------------------------------ planted truths


@pytest.mark.parametrize("name", SCENARIOS)
def test_planted_slice_rate_on_the_holdout_matches_its_true_rate(
    name, built, holdouts, slice_mask
):
    b, frame = built[name], holdouts[name]
    y = (frame[b.truths["label"]] == b.truths["positive"]).to_numpy()
    decision = _scores(b.model_path, frame) >= b.truths["build"]["threshold"]
    for planted in b.truths["slices"]:
        rows = slice_mask(frame, planted["predicates"])
        events, n = _rate(planted["metric"], y, decision, rows)
        rest_events, rest_n = _rate(planted["metric"], y, decision, ~rows)
        # The holdout is a sample of the truth: the count must sit in the binomial 99% interval
        # around the true rate (scipy.stats.binom), with n the slice's base rows.
        low, high = stats.binom.interval(0.99, n, planted["true_rate"])
        assert low <= events <= high, (name, events, n, planted["true_rate"])
        assert events / n >= 2 * rest_events / rest_n
        assert rows.mean() >= 0.02 and planted["share"] >= 0.02
        assert 2 <= len(planted["predicates"]) <= 3
        assert planted["true_rate"] >= 2 * planted["rest_rate"]


@pytest.mark.parametrize("name", SCENARIOS)
def test_planted_proxy_has_the_highest_mutual_information(name, built, holdouts):
    truths, frame = built[name].truths, holdouts[name]
    assert set(truths["proxies"]) == set(truths["protected"])
    for attribute, proxy in truths["proxies"].items():
        target = _codes(frame[attribute])
        scores = {
            column: mutual_info_score(target, _codes(frame[column]))
            for column in truths["model_inputs"]
            if column != attribute
        }
        ranked = sorted(scores, key=scores.get, reverse=True)
        assert ranked[0] == proxy, (attribute, scores)
        assert scores[proxy] >= 2 * scores[ranked[1]]


@pytest.mark.parametrize("name", SCENARIOS)
def test_defect_candidate_is_worse_in_the_defect_slice_only(name, built, holdouts, slice_mask):
    b, frame = built[name], holdouts[name]
    y = (frame[b.truths["label"]] == b.truths["positive"]).to_numpy()
    production = _scores(b.baseline_path, frame) >= 0.5
    candidate = _scores(b.candidate_path, frame) >= 0.5
    rows = slice_mask(frame, b.truths["defect"]["predicates"])
    assert rows.mean() >= 0.02
    inside = [(d[rows] != y[rows]).mean() for d in (production, candidate)]
    outside = [(d[~rows] != y[~rows]).mean() for d in (production, candidate)]
    assert inside[1] - inside[0] >= 0.2
    assert abs(outside[1] - outside[0]) <= 0.01
    low, high = stats.binom.interval(0.99, int(rows.sum()), b.truths["defect"]["candidate_rate"])
    assert low <= (candidate[rows] != y[rows]).sum() <= high


def test_direct_flip_moves_hiring_decisions_in_the_recorded_direction(built, holdouts):
    b, frame = built["hiring"], holdouts["hiring"]
    direct = b.truths["direct"]
    source = (frame[direct["attribute"]] == direct["from"]).to_numpy()
    flipped = frame.copy()
    flipped.loc[source, direct["attribute"]] = direct["to"]
    before = _scores(b.model_path, frame)[source] >= 0.5
    after = _scores(b.model_path, flipped)[source] >= 0.5
    assert direct["direction"] == "to_favorable"
    to_favorable, to_unfavorable = (after & ~before).mean(), (~after & before).mean()
    assert to_favorable >= 0.05 and to_unfavorable <= 0.01
    measured = direct["measured"]["model"][0]
    n = int(source.sum())
    low, high = stats.binom.interval(0.99, n, measured["to_favorable"])
    assert low <= (after & ~before).sum() <= high


def test_skops_model_loads_with_default_trusted_types(built):
    import skops.io

    for path in (built["hiring"].model_path, built["hiring"].candidate_path):
        assert skops.io.get_untrusted_types(file=path) == []


# ------------------------------------------------------------------------------ the design (tenancy)


@pytest.fixture(scope="session")
def tenancy_groups(built):
    """The groups section of the tenancy plan, run alone (slices, flips and comparison dropped)."""
    from dataclasses import replace

    from probe.pipeline import run_plan
    from probe.plan import load_plan

    plan = load_plan(built["tenancy"].plan_path)
    report = run_plan(replace(plan, slices=None, flips=None, compare=None))
    return report, {(g["attribute"], g["group"]): g for g in report["groups"]}


def test_tenancy_holdout_carries_the_design_but_not_the_true_group(built, holdouts):
    frame, design = holdouts["tenancy"], built["tenancy"].truths["design"]
    assert "heritage" not in frame.columns
    w = frame[design["weights"]].to_numpy()
    # Kish's design effect n sum(w^2) / (sum w)^2, computed here from the column
    deff = len(w) * (w * w).sum() / w.sum() ** 2
    assert 1.8 <= deff <= 2.3 and abs(deff - design["kish_design_effect"]) < 0.1
    per_person = frame.groupby(design["cluster"]).size()
    assert per_person.min() == 1 and per_person.max() >= 4
    probs = frame[list(design["membership"]["columns"].values())].to_numpy()
    np.testing.assert_allclose(probs.sum(axis=1), 1.0, atol=1e-9)
    assert 0.5 <= (probs.max(axis=1) < 0.8).mean() <= 0.9


@pytest.mark.slow
def test_tenancy_groups_are_weighted_with_clusters_as_units(built, holdouts, tenancy_groups):
    report, rows = tenancy_groups
    frame, design = holdouts["tenancy"], built["tenancy"].truths["design"]
    assert report["provenance"]["design"]["clusters"] == frame[design["cluster"]].nunique()
    young = rows[("age_band", "18-29")]
    mask = (frame["age_band"] == "18-29").to_numpy()
    assert young["rows"] == mask.sum()
    assert young["weight"] == pytest.approx(frame.loc[mask, design["weights"]].sum())
    assert young["clusters"] == frame.loc[mask, design["cluster"]].nunique()
    rate = young["selection_rate"]
    assert rate["n_effective"] < young["rows"] / 1.5  # the design costs precision
    # planted: the weighted rate targets the population (the fresh draw's weighted rate, measured
    # by the generator); the sample's plain rate is far off, outside the interval
    truth = design["weighted_vs_unweighted"]
    assert rate["low"] <= truth["weighted"] <= rate["high"]
    assert truth["weighted"] - truth["unweighted"] >= 0.08
    assert truth["unweighted"] < rate["low"]


@pytest.mark.slow
def test_tenancy_probability_weighted_gap_is_attenuated_as_planted(built, tenancy_groups):
    report, rows = tenancy_groups
    m = built["tenancy"].truths["design"]["membership"]
    slate = rows[("heritage", m["group"])]
    ref = slate["reference_group"]  # the highest weighted selection rate on the holdout
    true, weighted = m["true_selection_rate"], m["probability_weighted_selection_rate"]
    spd = slate["spd"]
    # probe's probability-weighted gap covers the population's probability-weighted gap ...
    assert spd["low"] <= weighted["Slate"] - weighted[ref] <= spd["high"]
    # ... and is far short of the true groups' gap (the attenuation the caution warns about)
    assert true["Slate"] - true[ref] < spd["low"] and m["attenuation"] < 0.5
    assert slate["impact_ratio"]["low"] > true["Slate"] / true[ref]
    assert ("heritage & age_band", "Slate & 18-29") in rows
    assert "`heritage`" in report["caution"] and "Fairness under unawareness" in report["caution"]


# ------------------------------------------------------------------------------ build and cache


@pytest.mark.parametrize("name", SCENARIOS)
def test_built_plan_is_valid_toml_whose_relative_paths_exist(name, built):
    b = built[name]
    plan = tomllib.loads(b.plan_path.read_text(encoding="utf-8"))
    assert (b.directory / plan["data"]["path"]) == b.data_path
    assert (b.directory / plan["model"]["spec"]) == b.candidate_path
    assert (b.directory / plan["compare"]["baseline"]) == b.baseline_path == b.model_path
    assert plan["data"]["label"] == b.truths["label"]
    assert plan["slices"]["metric"] == b.truths["slices"][0]["metric"]
    for path in (b.data_path, b.model_path, b.candidate_path, b.plan_path):
        assert path.is_file()
    on_disk = json.loads((b.directory / "truths.json").read_text(encoding="utf-8"))
    assert on_disk == b.truths


def test_second_build_is_a_cache_hit_and_force_rebuilds(built, scenario_cache):
    first = built[DEFAULT_SCENARIO]
    stamp = first.model_path.stat().st_mtime_ns
    start = time.perf_counter()
    again = build_scenario(cache_dir=scenario_cache)
    assert time.perf_counter() - start < 0.5
    assert again == first and first.model_path.stat().st_mtime_ns == stamp

    rebuilt = build_scenario(DEFAULT_SCENARIO, cache_dir=scenario_cache, force=True)
    assert rebuilt.directory == first.directory
    assert rebuilt.model_path.stat().st_mtime_ns != stamp
    assert rebuilt.truths == first.truths  # same sources and seed: the same numbers
    siblings = [p.name for p in (scenario_cache / "scenarios").iterdir()]
    assert not [s for s in siblings if s.startswith(".")]  # no staging folder left behind


@pytest.mark.parametrize("changed", ["lending/generate.py", "_build/truths.py", "_build/training.py"])
def test_build_key_changes_with_the_sources_and_the_seed(tmp_path, changed):
    root = tmp_path / "scenarios"
    shutil.copytree(scenarios_root(), root, ignore=shutil.ignore_patterns("__pycache__"))
    key = _build_key("lending", root, 0)
    assert _build_key("lending", root, 0) == key
    assert _build_key("lending", root, 1) != key
    other = _build_key("hiring", root, 0)
    with (root / "claims" / "generate.py").open("a", encoding="utf-8") as handle:
        handle.write("\n# changed\n")
    assert _build_key("lending", root, 0) == key  # another scenario's file is not a source
    with (root / changed).open("a", encoding="utf-8") as handle:
        handle.write("\n# changed\n")
    assert _build_key("lending", root, 0) != key
    assert (_build_key("hiring", root, 0) != other) == changed.startswith("_build/")


def test_scenario_module_imports_the_scenarios_folder_as_one_package():
    generator = scenario_module("lending.generate")
    predicates = scenario_module("_build.predicates")
    assert Path(generator.__file__) == scenario_dir("lending") / "generate.py"
    assert Path(predicates.__file__) == scenarios_root() / "_build" / "predicates.py"
    assert generator.slice_mask is predicates.slice_mask  # one shared copy, not one per loader
    assert scenario_module("lending.generate") is generator


def test_unknown_scenario_is_a_data_error_listing_the_names(tmp_path):
    with pytest.raises(DataError, match="unknown scenario `banking`.*lending, hiring, claims, tenancy"):
        scenario_dir("banking")
    with pytest.raises(DataError, match="unknown scenario"):
        build_scenario("banking", cache_dir=tmp_path)
    with pytest.raises(DataError, match="`seed`"):
        build_scenario("lending", cache_dir=tmp_path, seed=-1)
    assert not list(tmp_path.iterdir())


def test_cache_root_follows_the_environment(monkeypatch, tmp_path):
    monkeypatch.setenv("PROBE_CACHE_DIR", str(tmp_path / "c"))
    assert cache_root() == tmp_path / "c"
    monkeypatch.delenv("PROBE_CACHE_DIR")
    monkeypatch.setenv("HOME", str(tmp_path))
    assert cache_root() == tmp_path / ".cache" / "probe"


def test_slice_mask_agrees_with_direct_pandas_filters(slice_mask):
    frame = pd.DataFrame(
        {
            "a": ["x", "y", None, "x", "z"],
            "u": [0.1, 0.8, 0.75, np.nan, 0.9],
        }
    )
    both = [{"column": "a", "op": "==", "value": "x"}, {"column": "u", "op": "<", "value": 0.5}]
    assert slice_mask(frame, both).tolist() == [True, False, False, False, False]
    high = [{"column": "u", "op": ">=", "value": 0.75}]
    assert slice_mask(frame, high).tolist() == [False, True, True, False, True]
    interval = [{"column": "u", "op": "in", "value": [0.75, None]}]
    assert slice_mask(frame, interval).tolist() == slice_mask(frame, high).tolist()
    levels = [{"column": "a", "op": "in", "value": ["y", "z"]}]
    assert slice_mask(frame, levels).tolist() == [False, True, False, False, True]
    assert slice_mask(frame, [{"column": "a", "op": "missing"}]).tolist() == [
        False, False, True, False, False,
    ]
    other = [{"column": "a", "op": "not in", "value": ["x"]}]
    assert slice_mask(frame, other).tolist() == [False, True, False, False, True]
    with pytest.raises(DataError, match="`nope`"):
        slice_mask(frame, [{"column": "nope", "op": "==", "value": 1}])
    with pytest.raises(DataError, match="op `~`"):
        slice_mask(frame, [{"column": "a", "op": "~", "value": 1}])
