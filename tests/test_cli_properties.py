"""Property: whatever small table and command line arrive, ``main(argv)`` ends in a documented way.

The only allowed outcomes (docs/contracts.md): exit 0 or 1 with a report written, or exit 2 with
exactly one ``error:`` line on stderr. Never exit 3 (an internal error), never an exception out of
``main``, never a traceback. Tables are random and small (5-60 rows; ints, floats with NaN / inf /
1e308, all-missing columns, dates, strings with unicode, control characters and empty values,
booleans, categories of 1-6 levels, constant columns); the command line is random too (sub-command, model, options in and out
of range).

Two generators share the strategies, to keep the default run short:

- ``test_cheap_commands_end_in_a_documented_way``: 2,000 examples of groups / slices / compare,
  which run in milliseconds on a tiny table and reach every data, plan and option check;
- ``test_flips_and_proxies_end_in_a_documented_way``: 200 examples of flips and proxies, which
  fit models (nearest neighbours, gradient boosting), so cost tens of milliseconds to a second.
"""

from __future__ import annotations

import functools
import importlib.util
import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, Phase, given, settings
from hypothesis import strategies as st

_spec = importlib.util.spec_from_file_location("hostile", Path(__file__).with_name("hostile.py"))
hostile = sys.modules.setdefault("hostile", importlib.util.module_from_spec(_spec))
if not hasattr(hostile, "Workspace"):
    _spec.loader.exec_module(hostile)

EXIT_BAD_INPUT = hostile.EXIT_BAD_INPUT

_MODEL = '''\
import numpy as np


def score(frame):
    """A fixed function of the numeric inputs (booleans and text ignored), in (0, 1)."""
    x = frame.select_dtypes("number").to_numpy(dtype=float)
    v = np.nan_to_num(x, nan=0.0, posinf=3.0, neginf=-3.0).sum(axis=1) if x.size else 0.0
    return 1.0 / (1.0 + np.exp(-np.clip(np.zeros(len(frame)) + v, -30.0, 30.0)))
'''

# text values: unicode, control characters, empty (read back as missing), spelled like missing or
# like numbers, CSV-special characters
_TEXT = ["a", "b", "NA", "", "é", "日本", "\x1b[1m", "\u202e", " ", "x,y", '"q"', "None", "nan",
         "inf", "1", "0", "\t", "<b>"]
_NAMES = ["c0", "c1", "é", "a b", "[x]", "c5"]
_KINDS = ["int", "float", "text", "bool", "cat", "const", "date", "wild-float", "huge", "missing"]
_TAME_KINDS = _KINDS[:7]  # the last three only in wild tables


def _column(kind: str, n: int, rng: np.random.Generator, levels: int):
    if kind == "int":
        return rng.integers(-3, 40, size=n)
    if kind == "float":
        return rng.normal(size=n).round(2)
    if kind == "wild-float":  # NaN, inf, -inf and the largest finite values among ordinary ones
        values = rng.normal(size=n)
        special = np.array([np.nan, np.inf, -np.inf, 1e308, -1e308])
        hit = rng.uniform(size=n) < 0.3
        values[hit] = rng.choice(special, size=hit.sum())
        return values
    if kind == "huge":  # finite, at the edge of float64
        return rng.choice([1e308, -1e308, 0.0], size=n)
    if kind == "missing":
        return np.full(n, np.nan)
    if kind == "date":
        return rng.choice(pd.date_range("2024-01-01", periods=levels + 1).astype(str), size=n)
    if kind == "text":
        return rng.choice(_TEXT, size=n)
    if kind == "bool":
        return rng.uniform(size=n) < 0.5
    if kind == "cat":
        return rng.choice([f"L{i}" for i in range(levels)], size=n)
    return np.full(n, "same")


_LABELS = {
    "01": lambda n, rng: rng.integers(0, 2, size=n),
    "yes/no": lambda n, rng: rng.choice(["yes", "no"], size=n),
    "bool": lambda n, rng: rng.uniform(size=n) < 0.5,
    "constant": lambda n, rng: np.ones(n, dtype=int),
    "three": lambda n, rng: rng.integers(0, 3, size=n),
    "some missing": lambda n, rng: np.where(rng.uniform(size=n) < 0.2, np.nan,
                                            rng.integers(0, 2, n)),
}
_SCORES = {
    "unit": lambda n, rng: rng.uniform(size=n).round(3),
    "0/1": lambda n, rng: rng.integers(0, 2, size=n).astype(float),
    "outside": lambda n, rng: rng.normal(0.5, 1.0, size=n),
    "some missing": lambda n, rng: np.where(rng.uniform(size=n) < 0.1, np.nan, rng.uniform(size=n)),
}


@st.composite
def frames(draw):
    """A random small table: features named from ``_NAMES``, a label ``y``, a score column ``s``.
    A third of the tables are wild: any label and score kind, and floats with NaN / inf / 1e308."""
    n = draw(st.integers(5, 60))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))  # even coins (see _flags)
    wild = rng.uniform() < 0.3
    pick = (lambda options: options[rng.integers(len(options))])
    kinds = [pick(_KINDS if wild else _TAME_KINDS) for _ in range(rng.integers(1, 6))]
    levels = int(rng.integers(1, 7))
    label = pick(list(_LABELS) if wild else ["01", "01", "bool", "yes/no"])
    scores = pick(list(_SCORES) if wild else ["unit", "unit", "0/1"])
    frame = pd.DataFrame({_NAMES[i]: _column(k, n, rng, levels) for i, k in enumerate(kinds)})
    frame["y"] = _LABELS[label](n, rng)
    frame["s"] = _SCORES[scores](n, rng)
    return frame


def _flags(rng: np.random.Generator, rough: bool):
    """``flag(name, good, bad)``: ``[name, value]`` with probability ``p``, the value drawn from
    ``good``. In a rough example one flag (at most) takes a value from ``bad`` instead, so that
    the bad value is the only one and reaches as deep as it can. The coins come from a seeded
    generator: hypothesis' own draws lean towards their first choice."""
    left = [1 if rough else 0]

    def flag(name, good, bad=(), p=0.35):
        if rng.uniform() >= p:
            return []
        pool = good
        if bad and left[0] and rng.uniform() < 0.35:
            pool, left[0] = bad, 0
        value = pool[rng.integers(len(pool))]
        return [name] if value is None else [name, str(value)]
    return flag


@st.composite
def command_lines(draw, frame: pd.DataFrame, commands: tuple, spec: str, out: str | None):
    """A random command line over ``frame``'s columns (and a few that are not there); a third of
    the examples (rough ones) also draw option values out of range and names that do not exist."""
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    rough = rng.uniform() < 0.3
    flag = _flags(rng, rough)
    features = [c for c in frame.columns if c not in ("y", "s")]
    f0, nope = features[0], ["nope"] if rough else []
    sub = draw(st.sampled_from(commands))
    model = [spec, "column:s"][int(rng.integers(2))]
    argv = [sub, "--data", "DATA"]
    if sub != "proxies":
        argv += ["--model", model]
    if sub in ("groups", "slices", "compare") or rng.uniform() < 0.5:
        wrong = rough and rng.uniform() < 0.3
        argv += ["--label", str(rng.choice(features + nope)) if wrong else "y"]
    varied = [c for c in features if rough or frame[c].nunique() > 1] or features
    protected = list(rng.choice(varied + nope, size=rng.integers(0, 4), replace=True))
    protected = list(dict.fromkeys(protected))
    if sub in ("flips", "proxies") or rng.uniform() < 0.7:
        empty = [",,", ""] if rough else [f0]
        argv += ["--protected", ",".join(protected) or str(rng.choice(empty))]
    if sub != "proxies":
        argv += flag("--threshold", [0, 0.3, 0.5, 1], [-0.1, 1.5, "nan"])
        argv += flag("--favorable", ["positive", "negative"])
        values = [str(v) for v in pd.unique(frame["y"].dropna())][:2] or ["1"]
        needs = not set(values) <= {"0", "1", "True", "False", "0.0", "1.0"}
        argv += flag("--positive", values, ["7", "yes"], p=0.9 if needs else 0.2)
        argv += flag("--features", [",".join(features), f0], ["nope"], p=0.15)
        argv += flag("--batch-size", [1, 7], [0], p=0.15)
        if len(features) > 1:
            argv += flag("--intersection", [f"{f0},{features[1]}"], [f0])
        argv += flag("--reference-group", [f"{f0}={frame[f0].iloc[0]}"],
                     ["x=y", "junk", f"{f0}=L9"],
                     p=0.2)
    argv += flag("--seed", [0, 3, 2**40], [-1], p=0.3)
    argv += flag("--confidence-level", [0.5, 0.9, 0.999], [1, 0, "nan"], p=0.3)
    if sub in ("slices", "compare"):
        argv += flag("--depth", [1, 2, 3], [-1, 0, 5])
        argv += flag("--min-rows", [2, 5, 10], [1, 100], p=0.9)
        argv += flag("--bins", [2, 3], [1, 21])
        argv += flag("--top", [1, 5], [0, 2000])
        argv += flag("--max-share", [0, 0.3, 1], [1.5])
        argv += flag("--no-split", [None], p=0.7)
        argv += flag("--interval", ["wilson", "bootstrap"], p=0.1)
        argv += flag("--columns", [",".join(features), f0], ["nope"], p=0.2)
        argv += flag("--exclude", [f0, "y"], [",".join(features)], p=0.2)
        argv += flag("--metric", ["error", "fpr", "fnr", "selection"], ["bogus"])
    if sub == "compare":
        argv += ["--baseline", str(rng.choice(["column:s", spec] + nope))]
    if sub == "flips":
        argv += flag("--mode", ["direct", "transport", "twins", "direct,twins"], ["bogus"], p=0.9)
        argv += flag("--k", [1, 3], [0])
        argv += flag("--n-proxies", [1, 2], [0])
        argv += flag("--reference", ["L0", "a"], ["zz"], p=0.2)
        argv += flag("--proxies", [f0], ["nope"], p=0.2)
    if sub == "proxies":
        argv += flag("--features", [",".join(features)], ["nope"], p=0.2)
    # the cheap generator prints only the verdict line (rendering the tables costs more than a
    # tiny run); the full one renders half the time and writes the report JSON
    argv += ["--quiet"] if not out or rng.uniform() < 0.5 else []
    return argv + (["--json", out] if out else [])


@pytest.fixture(scope="module")
def space(tmp_path_factory):
    """A folder with the ``py:`` model; each example writes its table (and report) there."""
    from probe import assemble

    root = tmp_path_factory.mktemp("properties")
    (root / "pm.py").write_text(_MODEL)
    # the py: model runs in this process once the flag exists (it is cheap and deterministic)
    no_isolate = ["--no-isolate"] if "--no-isolate" in _subcommand_help("groups") else []
    with pytest.MonkeyPatch.context() as mp:
        # the library versions in the provenance are read from package metadata on every run
        # (a third of a tiny run's time); they cannot change within the test
        mp.setattr(assemble, "versions", functools.cache(assemble.versions))
        yield {"root": root, "spec": f"py:{root / 'pm.py'}:score", "no_isolate": no_isolate}


def _subcommand_help(name: str) -> str:
    from probe.cli import build_parser

    parser = build_parser()
    sub = next(a for a in parser._actions if getattr(a, "choices", None) and name in a.choices)
    return sub.choices[name].format_help()


def _check(space, frame: pd.DataFrame, argv: list) -> None:
    """Run one example and hold it to the contract: exit 0 / 1 with a report, or exit 2 with one
    ``error:`` line; nothing escapes ``main``, no traceback, no other exit code."""
    data, report = space["root"] / "d.csv", space["root"] / "r.json"
    frame.to_csv(data, index=False)
    report.unlink(missing_ok=True)
    argv = [str(data) if a == "DATA" else a for a in argv]
    if "--model" in argv and argv[argv.index("--model") + 1].startswith("py:"):
        argv += space["no_isolate"]
    outcome = hostile.run_in_process(argv)
    hostile.check_outcome(outcome, hostile.Case(argv, codes=(0, 1, EXIT_BAD_INPUT), seconds=60))
    if outcome.code in (0, 1):
        assert "verdict:" in outcome.out, f"exit {outcome.code} without the verdict line"
        if "--json" in argv:
            assert json.loads(report.read_text(encoding="utf-8"))["verdict"]


def _property(commands, *, json_report: bool):
    @given(data=st.data())
    def run(space, data):
        frame = data.draw(frames(), label="frame")
        out = str(space["root"] / "r.json") if json_report else None
        argv = data.draw(command_lines(frame, commands, space["spec"], out), label="argv")
        _check(space, frame, argv)
    return run


_SETTINGS = dict(deadline=None, derandomize=True, database=None,
                 suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                        HealthCheck.filter_too_much])

CHEAP = ("groups", "slices", "compare")
MODELLING = ("flips", "proxies")

test_cheap_commands_end_in_a_documented_way = settings(max_examples=2000, **_SETTINGS)(
    _property(CHEAP, json_report=False))
# no shrinking here: a failing example of this generator may be a slow one, and shrinking re-runs
# it hundreds of times; the tables are small already and the failing draws are printed
test_flips_and_proxies_end_in_a_documented_way = settings(
    max_examples=200, phases=(Phase.explicit, Phase.reuse, Phase.generate), **_SETTINGS)(
    _property(MODELLING, json_report=True))

