"""Find and build the invented demo scenarios (what ``probe demo`` runs on).

Each scenario lives in a folder of ``scenarios/`` (shipped in the wheel as ``probe/_scenarios``):
``generate.py`` draws the data and trains the models, ``plan.toml`` is the probe plan and
``README.md`` tells the story and the planted truths. ``scenarios/_build/`` holds what the
scenarios share: the build recipe, the truth measurement, the training helpers and the predicate
evaluator. None of that is part of the probe package: :func:`scenario_module` imports it from the
scenarios folder. This module only finds the folder, keys the build, and runs the recipe into a
cache under :func:`cache_root`, keyed by the scenario's and the recipe's sources, the seed and the
versions of the libraries that shape the result.

The scenarios are invented: no real people, firms, places or brands.
"""

from __future__ import annotations

import hashlib
import importlib
import importlib.machinery
import importlib.metadata
import importlib.resources
import importlib.util
import json
import os
import shutil
import sys
import tempfile
from dataclasses import asdict, dataclass
from pathlib import Path
from types import ModuleType

import numpy as np

from probe.errors import DataError

__all__ = [
    "SCENARIOS",
    "DEFAULT_SCENARIO",
    "BuiltScenario",
    "build_scenario",
    "cache_root",
    "scenario_dir",
    "scenario_module",
    "scenarios_root",
]

SCENARIOS: tuple[str, ...] = ("lending", "hiring", "claims", "tenancy")
DEFAULT_SCENARIO = "lending"

_SHARED = "_build"  # the folder of scenarios/ that every scenario's build uses
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
        The content of ``truths.json``: the planted structure and the rates the trained models
        achieve on a fresh 200,000-row draw (``truths["build"]`` records the seeds and sizes).
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

def scenarios_root() -> Path:
    """The folder holding every scenario and ``_build/``.

    The installed copy (``probe/_scenarios``, put there by the wheel) if it exists, else
    ``scenarios/`` at the root of a source checkout.

    Raises
    ------
    DataError
        If neither folder exists.
    """
    installed = Path(str(importlib.resources.files("probe"))) / "_scenarios"
    if installed.is_dir():
        return installed
    checkout = Path(__file__).resolve().parent.parent / "scenarios"
    if checkout.is_dir():
        return checkout
    raise DataError(
        f"the scenarios have no folder: looked in `{installed}` and `{checkout}`; "
        "reinstall probe or run from a source checkout"
    )


def scenario_dir(name: str) -> Path:
    """The source folder of scenario ``name`` (in :func:`scenarios_root`).

    Raises
    ------
    DataError
        If ``name`` is not a known scenario or its folder is missing.
    """
    if name not in SCENARIOS:
        raise DataError(
            f"unknown scenario `{name}`: expected one of {', '.join(SCENARIOS)}"
        )
    folder = scenarios_root() / name
    if not folder.is_dir():
        raise DataError(
            f"scenario `{name}` has no folder `{folder}`; reinstall probe or run from a source "
            "checkout"
        )
    return folder


def scenario_module(dotted: str) -> ModuleType:
    """Import a module of the scenarios folder by its dotted path inside it.

    ``"lending.generate"`` is a scenario's generator, ``"_build.predicates"`` the shared
    predicate evaluator. The folder is imported as a package of its own, named after a digest of
    its files (so an edited file is imported afresh), which lets a generator reach the shared
    helpers with a relative import (``from .._build.predicates import slice_mask``) whether the
    folder sits in a checkout or in the installed wheel.

    Parameters
    ----------
    dotted : str
        The module's path inside the scenarios folder, dots for slashes, no ``.py``.

    Returns
    -------
    module
    """
    root = scenarios_root()
    digest = hashlib.sha256()
    _hash_files(digest, root, root)
    package = f"_probe_scenarios_{digest.hexdigest()[:16]}"
    if package not in sys.modules:
        spec = importlib.machinery.ModuleSpec(package, None, is_package=True)
        spec.submodule_search_locations = [str(root)]
        sys.modules[package] = importlib.util.module_from_spec(spec)
    return importlib.import_module(f"{package}.{dotted}")


def build_scenario(
    name: str = DEFAULT_SCENARIO,
    *,
    cache_dir: str | os.PathLike | None = None,
    force: bool = False,
    seed: int = 0,
) -> BuiltScenario:
    """Build scenario ``name`` (data, models, plan, truths) into the cache, or reuse a build.

    The recipe ``scenarios/_build/recipe.py`` runs the scenario's ``generate.py``: it draws the
    holdout (``seed``) and a separate training draw, trains the production model and the
    regression candidate on the training draw, and measures the rates recorded in the truths with
    the trained models on a large fresh draw. The build goes to a temporary folder that is renamed
    into place, so a half-written build is never seen; a second call with the same sources, seed
    and library versions returns the cached build without recomputing.

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
    scenario_dir(name)  # an unknown name or a missing folder fails before any work
    key = _build_key(name, scenarios_root(), seed)
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
        recipe = scenario_module(f"{_SHARED}.recipe")
        recipe.write_build(
            staging,
            scenario_module(f"{name}.generate"),
            seed=seed,
            key=key,
            versions={package: _package_version(package) for package in _KEY_PACKAGES},
        )
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


def _hash_files(digest, folder: Path, base: Path) -> None:
    """Feed every file under ``folder`` (path relative to ``base``, then bytes) to ``digest``."""
    for path in sorted(folder.rglob("*")):
        if not path.is_file() or "__pycache__" in path.parts or path.suffix == ".pyc":
            continue
        digest.update(path.relative_to(base).as_posix().encode() + b"\0")
        digest.update(path.read_bytes())


def _build_key(name: str, root: Path, seed: int) -> str:
    """Digest of the format, name, seed, library versions, this module, the scenario's folder
    and the shared ``_build/`` folder under ``root``."""
    digest = hashlib.sha256()
    digest.update(f"{_BUILD_FORMAT}\0{name}\0{seed}\0".encode())
    for package in _KEY_PACKAGES:
        digest.update(f"{package}={_package_version(package)}\0".encode())
    digest.update(Path(__file__).read_bytes())
    for folder in (root / name, root / _SHARED):
        _hash_files(digest, folder, root)
    return digest.hexdigest()[:16]


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
