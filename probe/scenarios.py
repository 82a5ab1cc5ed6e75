"""Find and build the invented demo scenarios.

Each scenario lives in a folder of ``scenarios/`` (shipped in the wheel as ``probe/_scenarios``):
``generate.py`` draws the data and trains the models, ``plan.toml`` is the probe plan and
``README.md`` tells the story and the planted truths. :func:`build_scenario` turns a folder into
files a plan can run on (a holdout, a production model, a regression candidate, the plan) plus
``truths.json``, the planted structure with the rates the trained models really achieve there,
measured on a large fresh draw. Builds are cached under :func:`cache_root`, keyed by the
scenario's sources, the seed and the versions of the libraries that shape the result.

The scenarios are invented: no real people, firms, places or brands.
"""

from __future__ import annotations

import hashlib
import importlib.metadata
import importlib.resources
import importlib.util
import json
import math
import os
import shutil
import tempfile
from dataclasses import asdict, dataclass
from pathlib import Path
from types import ModuleType
from typing import Any

import numpy as np
import pandas as pd

from probe.errors import DataError

__all__ = [
    "SCENARIOS",
    "DEFAULT_SCENARIO",
    "BuiltScenario",
    "build_scenario",
    "cache_root",
    "scenario_dir",
    "slice_mask",
]

SCENARIOS: tuple[str, ...] = ("lending", "hiring", "claims")
DEFAULT_SCENARIO = "lending"

#: Decision threshold the truths are measured at (the plans use the same).
THRESHOLD = 0.5
#: Rows of the fresh draw on which the true rates are measured.
TRUTH_ROWS = 200_000
# Offsets that give the training and the truth draws seeds of their own, away from the holdout's.
_TRAIN_SEED_OFFSET = 1_000_003
_TRUTH_SEED_OFFSET = 2_000_003
_KEY_PACKAGES = ("numpy", "pandas", "pyarrow", "scikit-learn", "lightgbm", "skops")
_BUILD_FORMAT = "probe.scenario-build/1"


@dataclass(frozen=True)
class BuiltScenario:
    """A built scenario: the files a plan runs on and the planted truths.

    Attributes
    ----------
    name : str
        The scenario's name (one of :data:`SCENARIOS`).
    directory : pathlib.Path
        The build folder in the cache.
    plan_path : pathlib.Path
        ``plan.toml`` (paths inside it are relative to it). It probes the candidate against the
        production model.
    data_path : pathlib.Path
        ``holdout.parquet``, the labelled holdout (protected attributes included).
    model_path : pathlib.Path
        The production model (the one the slice, proxy, group and flip truths describe).
    baseline_path : pathlib.Path
        The production model again, named for its role in a comparison.
    candidate_path : pathlib.Path
        The regression candidate, trained with the defect described in ``truths["defect"]``.
    truths : dict
        The content of ``truths.json``: the planted structure and the measured rates.
    """

    name: str
    directory: Path
    plan_path: Path
    data_path: Path
    model_path: Path
    baseline_path: Path
    candidate_path: Path
    truths: dict

    def to_dict(self) -> dict:
        """JSON-ready form (paths as strings)."""
        out = asdict(self)
        for key, value in out.items():
            if isinstance(value, Path):
                out[key] = str(value)
        return out


def cache_root() -> Path:
    """The cache folder: ``$PROBE_CACHE_DIR`` if set, else ``~/.cache/probe``."""
    env = os.environ.get("PROBE_CACHE_DIR")
    if env:
        return Path(env).expanduser()
    return Path.home() / ".cache" / "probe"


def scenario_dir(name: str) -> Path:
    """The source folder of scenario ``name``.

    The installed copy (``probe/_scenarios/<name>``, put there by the wheel) if it exists, else
    ``scenarios/<name>`` at the root of a source checkout.

    Raises
    ------
    DataError
        If ``name`` is not a known scenario or its folder is missing.
    """
    if name not in SCENARIOS:
        raise DataError(
            f"unknown scenario `{name}`: expected one of {', '.join(SCENARIOS)}"
        )
    installed = Path(str(importlib.resources.files("probe"))) / "_scenarios" / name
    if installed.is_dir():
        return installed
    checkout = Path(__file__).resolve().parent.parent / "scenarios" / name
    if checkout.is_dir():
        return checkout
    raise DataError(
        f"scenario `{name}` has no folder: looked in `{installed}` and `{checkout}`; "
        "reinstall probe or run from a source checkout"
    )


def categorical_design(frame: pd.DataFrame, inputs, levels: dict) -> pd.DataFrame:
    """A scenario model's inputs, string columns as ``category`` with their fixed level lists."""
    X = frame.loc[:, list(inputs)].copy()
    for column, column_levels in levels.items():
        X[column] = pd.Categorical(X[column], categories=list(column_levels))
    return X


def train_lightgbm(design: pd.DataFrame, y: np.ndarray, *, seed: int = 0):
    """The scenarios' LightGBM recipe: 100 trees of 31 leaves, one thread, deterministic.

    Returns ``(booster, save)`` where ``save(path)`` writes the LightGBM model file.
    """
    import lightgbm as lgb

    params = {
        "objective": "binary",
        "learning_rate": 0.1,
        "num_leaves": 31,
        "min_data_in_leaf": 20,
        "feature_fraction": 0.9,
        "seed": seed,
        "deterministic": True,
        "force_col_wise": True,
        "num_threads": 1,  # one thread: fast at this size, and immune to a busy machine
        "verbosity": -1,
    }
    data = lgb.Dataset(design, label=y, categorical_feature="auto", free_raw_data=True)
    booster = lgb.train(params, data, num_boost_round=100)

    def save(path) -> None:
        booster.save_model(str(path))

    return booster, save


def slice_mask(frame: pd.DataFrame, predicates: list[dict]) -> np.ndarray:
    """Rows of ``frame`` that satisfy every predicate (a conjunction).

    Parameters
    ----------
    frame : pandas.DataFrame
        The data.
    predicates : list of dict
        Each ``{"column", "op", "value"}`` with ``op`` one of ``"=="``, ``"!="``, ``">="``,
        ``">"``, ``"<"``, ``"<="``, ``"missing"`` (value ignored), ``"in"`` (value a list of
        levels, or ``[low, high)`` for a numeric column with ``None`` for an open end) or
        ``"not in"`` (a present value outside the listed levels: the slice search's ``other``
        level). Comparisons are false on missing values.

    Returns
    -------
    numpy.ndarray of bool
    """
    mask = np.ones(len(frame), dtype=bool)
    for predicate in predicates:
        column, op, value = predicate["column"], predicate["op"], predicate.get("value")
        if column not in frame.columns:
            raise DataError(f"predicate column `{column}` is not in the data")
        series = frame[column]
        present = series.notna().to_numpy()
        if op == "missing":
            mask &= ~present
        elif op == "==":
            mask &= (series == value).to_numpy(dtype=bool, na_value=False)
        elif op == "!=":
            mask &= present & (series != value).to_numpy(dtype=bool, na_value=False)
        elif op in (">=", ">", "<", "<="):
            numbers = pd.to_numeric(series, errors="coerce").to_numpy(dtype=float)
            with np.errstate(invalid="ignore"):
                hit = {
                    ">=": numbers >= value,
                    ">": numbers > value,
                    "<": numbers < value,
                    "<=": numbers <= value,
                }[op]
            mask &= hit & present
        elif op == "in":
            is_interval = (
                isinstance(value, (list, tuple))
                and len(value) == 2
                and pd.api.types.is_numeric_dtype(series)
            )
            if is_interval:
                numbers = series.to_numpy(dtype=float, na_value=np.nan)
                low, high = value
                hit = present.copy()
                if low is not None:
                    hit &= numbers >= low
                if high is not None:
                    hit &= numbers < high
                mask &= hit
            else:
                mask &= series.isin(list(value)).to_numpy(dtype=bool)
        elif op == "not in":
            mask &= present & ~series.isin(list(value)).to_numpy(dtype=bool)
        else:
            raise DataError(
                f"predicate op `{op}` on `{column}` is not one of ==, !=, >=, >, <, <=, in, "
                "not in, missing"
            )
    return mask


def build_scenario(
    name: str = DEFAULT_SCENARIO,
    *,
    cache_dir: str | os.PathLike | None = None,
    force: bool = False,
    seed: int = 0,
) -> BuiltScenario:
    """Build scenario ``name`` (data, models, plan, truths) into the cache, or reuse a build.

    The scenario's ``generate.py`` draws the holdout (``seed``) and a separate training draw,
    trains the production model and the regression candidate on the training draw, and the rates
    recorded in the truths are measured with the trained models on a fresh draw of
    :data:`TRUTH_ROWS` rows. The build goes to a temporary folder that is renamed into place, so a
    half-written build is never seen; a second call with the same sources, seed and library
    versions returns the cached build without recomputing.

    Parameters
    ----------
    name : str, default="lending"
        One of :data:`SCENARIOS`.
    cache_dir : path-like, optional
        The cache root (default :func:`cache_root`); builds go to
        ``<root>/scenarios/<name>-<key>/``.
    force : bool, default=False
        Rebuild even if a cached build exists (and replace it).
    seed : int, default=0
        Seed of the holdout; the training and truth draws use seeds derived from it.

    Returns
    -------
    BuiltScenario

    Raises
    ------
    DataError
        If the scenario is unknown or the cache cannot be written.
    """
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise DataError(f"`seed` must be a non-negative integer, got {seed!r}")
    seed = int(seed)
    source = scenario_dir(name)
    key = _build_key(name, source, seed)
    root = Path(cache_dir).expanduser() if cache_dir is not None else cache_root()
    parent = root / "scenarios"
    target = parent / f"{name}-{key}"
    if not force and (target / "truths.json").is_file():
        return _built(name, target)
    try:
        parent.mkdir(parents=True, exist_ok=True)
        staging = Path(tempfile.mkdtemp(prefix=f".{name}-{key}-", dir=parent))
        staging.chmod(0o755)  # mkdtemp makes it private; a cache folder is ordinary
    except OSError as exc:
        raise DataError(
            f"cannot write the scenario cache at `{parent}`: {exc.strerror or exc}; "
            "set PROBE_CACHE_DIR to a writable folder"
        ) from None
    try:
        _build_into(staging, name, source, key, seed)
        _publish(staging, target, force=force)
    finally:
        if staging.exists():
            shutil.rmtree(staging, ignore_errors=True)
    return _built(name, target)


# --------------------------------------------------------------------------------------------
# helpers


def _package_version(package: str) -> str:
    try:
        return importlib.metadata.version(package)
    except importlib.metadata.PackageNotFoundError:
        return "absent"


def _build_key(name: str, source: Path, seed: int) -> str:
    digest = hashlib.sha256()
    digest.update(f"{_BUILD_FORMAT}\0{name}\0{seed}\0".encode())
    for package in _KEY_PACKAGES:
        digest.update(f"{package}={_package_version(package)}\0".encode())
    digest.update(Path(__file__).read_bytes())
    for path in sorted(source.rglob("*")):
        if not path.is_file() or "__pycache__" in path.parts or path.suffix == ".pyc":
            continue
        digest.update(path.relative_to(source).as_posix().encode() + b"\0")
        digest.update(path.read_bytes())
    return digest.hexdigest()[:16]


def _load_generator(name: str, source: Path, key: str) -> ModuleType:
    spec = importlib.util.spec_from_file_location(
        f"_probe_scenario_{name}_{key}", source / "generate.py"
    )
    if spec is None or spec.loader is None:
        raise DataError(f"scenario `{name}` has no loadable `{source / 'generate.py'}`")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _build_into(staging: Path, name: str, source: Path, key: str, seed: int) -> None:
    generator = _load_generator(name, source, key)
    train_seed = seed + _TRAIN_SEED_OFFSET
    truth_seed = seed + _TRUTH_SEED_OFFSET

    holdout = generator.generate(seed=seed)
    training = generator.generate(seed=train_seed)
    model, save_model = generator.train(training, seed=seed)
    candidate, save_candidate = generator.train(training, seed=seed, defect=True)

    holdout.to_parquet(staging / "holdout.parquet", index=False)
    save_model(staging / generator.MODEL_FILE)
    save_candidate(staging / generator.CANDIDATE_FILE)
    shutil.copyfile(source / "plan.toml", staging / "plan.toml")
    if (source / "README.md").is_file():
        shutil.copyfile(source / "README.md", staging / "README.md")

    fresh = generator.generate(TRUTH_ROWS, seed=truth_seed)
    truths = _measure_truths(generator, model, candidate, fresh)
    truths["build"] = {
        "key": key,
        "seed": seed,
        "seeds": {"holdout": seed, "train": train_seed, "truth": truth_seed},
        "holdout_rows": int(len(holdout)),
        "train_rows": int(len(training)),
        "truth_rows": int(len(fresh)),
        "threshold": THRESHOLD,
        "files": {
            "data": "holdout.parquet",
            "model": generator.MODEL_FILE,
            "baseline": generator.MODEL_FILE,
            "candidate": generator.CANDIDATE_FILE,
            "plan": "plan.toml",
        },
        "versions": {package: _package_version(package) for package in _KEY_PACKAGES},
    }
    text = json.dumps(truths, indent=2, allow_nan=False)
    (staging / "truths.json").write_text(text + "\n", encoding="utf-8")


def _publish(staging: Path, target: Path, *, force: bool) -> None:
    """Move the finished build into place; on a race the first finished build wins."""
    if target.exists():
        if not force:
            return
        retired = target.with_name(f".{target.name}-old-{os.getpid()}")
        os.replace(target, retired)
        shutil.rmtree(retired, ignore_errors=True)
    try:
        os.replace(staging, target)
    except OSError:
        if not (target / "truths.json").is_file():
            raise


def _built(name: str, directory: Path) -> BuiltScenario:
    truths = json.loads((directory / "truths.json").read_text(encoding="utf-8"))
    files = truths["build"]["files"]
    return BuiltScenario(
        name=name,
        directory=directory,
        plan_path=directory / files["plan"],
        data_path=directory / files["data"],
        model_path=directory / files["model"],
        baseline_path=directory / files["baseline"],
        candidate_path=directory / files["candidate"],
        truths=truths,
    )


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


def _measure_truths(generator: ModuleType, model: Any, candidate: Any, fresh: pd.DataFrame) -> dict:
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
