"""Build one scenario into a folder: the holdout, both models, the plan and ``truths.json``.

``probe.scenarios.build_scenario`` imports this module from the scenarios folder and runs
:func:`write_build` in a staging folder that it then renames into its cache. Where the cache is,
its key and when a build is reused are probe's business; what a build contains is decided here.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path
from types import ModuleType

from .truths import THRESHOLD, measure_truths

#: Rows of the fresh draw on which the true rates are measured.
TRUTH_ROWS = 200_000
# Offsets that give the training and the truth draws seeds of their own, away from the holdout's.
_TRAIN_SEED_OFFSET = 1_000_003
_TRUTH_SEED_OFFSET = 2_000_003


def write_build(
    folder: Path, generator: ModuleType, *, seed: int, key: str, versions: dict[str, str]
) -> None:
    """Draw, train, measure and write a scenario's build into ``folder``.

    The generator draws the holdout (``seed``) and a separate training draw, trains the
    production model and the regression candidate on the training draw, and the truths are
    measured with both models on a fresh draw of :data:`TRUTH_ROWS` rows
    (:func:`truths.measure_truths`). ``plan.toml`` and ``README.md`` are copied from the
    generator's folder. A generator with ``HIDDEN`` columns (drawn, but not for the holdout: a
    true group known only as probabilities) has them dropped from ``holdout.parquet``; one with
    ``design_truths(candidate, fresh, threshold)`` gets its result as ``truths["design"]``.

    Parameters
    ----------
    folder : pathlib.Path
        An empty, writable folder.
    generator : module
        The scenario's ``generate.py`` (``generate``, ``train``, ``predict_proba``, ``TRUTHS``,
        ``MODEL_FILE``, ``CANDIDATE_FILE``; optionally ``HIDDEN`` and ``design_truths``).
    seed : int
        Seed of the holdout; the training and truth draws use seeds derived from it.
    key : str
        The cache key, recorded in ``truths["build"]``.
    versions : dict
        Versions of the libraries that shape the result, recorded in ``truths["build"]``.
    """
    source = Path(generator.__file__).parent
    train_seed = seed + _TRAIN_SEED_OFFSET
    truth_seed = seed + _TRUTH_SEED_OFFSET

    holdout = generator.generate(seed=seed)
    training = generator.generate(seed=train_seed)
    model, save_model = generator.train(training, seed=seed)
    candidate, save_candidate = generator.train(training, seed=seed, defect=True)

    hidden = list(getattr(generator, "HIDDEN", ()))
    holdout.drop(columns=hidden).to_parquet(folder / "holdout.parquet", index=False)
    save_model(folder / generator.MODEL_FILE)
    save_candidate(folder / generator.CANDIDATE_FILE)
    shutil.copyfile(source / "plan.toml", folder / "plan.toml")
    if (source / "README.md").is_file():
        shutil.copyfile(source / "README.md", folder / "README.md")

    fresh = generator.generate(TRUTH_ROWS, seed=truth_seed)
    truths = measure_truths(generator, model, candidate, fresh)
    if hasattr(generator, "design_truths"):
        truths["design"] = generator.design_truths(candidate, fresh, THRESHOLD)
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
        "versions": dict(versions),
    }
    text = json.dumps(truths, indent=2, allow_nan=False)
    (folder / "truths.json").write_text(text + "\n", encoding="utf-8")
