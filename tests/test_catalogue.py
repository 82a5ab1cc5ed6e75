"""A catalogue of malformed and hostile inputs, each held to the command line's contract.

Every case is one ``probe`` run on a hostile file, plan, flag, model or output path. The contract
(docs/contracts.md, issue 10): a bad input or a failing model ends with exit 2 and exactly one line
on stderr starting ``error: `` (an internal error would be exit 3; a signal 130 / 143); no traceback
anywhere; every input file byte-identical afterwards; no ``*.tmp`` file left; nothing written
outside the run's folder; a bounded time. A few inputs are not errors but must be handled right
(a level spelled ``NA``, control characters in values, a pickle pinned by its SHA-256): those cases
allow exit 0 and check the report instead.

Runs happen in process through ``probe.cli.main(argv)``, except where the model may take the process
down (damaged LightGBM files, ``os._exit``, signals, hangs): those run as ``python -m probe``.
"""

from __future__ import annotations

import hashlib
import importlib.util
import io
import pickle
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

_spec = importlib.util.spec_from_file_location("hostile", Path(__file__).with_name("hostile.py"))
hostile = sys.modules.setdefault("hostile", importlib.util.module_from_spec(_spec))
if not hasattr(hostile, "Workspace"):
    _spec.loader.exec_module(hostile)

Case, Workspace, small_frame = hostile.Case, hostile.Workspace, hostile.small_frame
PY = sys.executable


# ------------------------------------------------------------------------------------------------
# shared models: one small real LightGBM booster, one scikit-learn pickle, a pickle payload


@pytest.fixture(scope="session")
def models():
    """``lgb``: the text of a LightGBM booster on ``r`` (categorical), ``x1``, ``x2``;
    ``pickle``: a fitted logistic regression on ``x1``, ``x2`` (joblib bytes)."""
    import joblib
    import lightgbm
    from sklearn.linear_model import LogisticRegression

    frame = small_frame(n=200, seed=1)
    frame["r"] = frame["r"].astype("category")
    target = (frame["x1"] + 0.3 * frame["x2"] > 0.6).astype(int)
    params = {"objective": "binary", "num_leaves": 4, "min_data_in_leaf": 5, "verbose": -1,
              "num_threads": 1, "seed": 0}
    booster = lightgbm.train(params, lightgbm.Dataset(frame[["r", "x1", "x2"]], target),
                             num_boost_round=12)
    buffer = io.BytesIO()
    joblib.dump(LogisticRegression().fit(frame[["x1", "x2"]], target), buffer)
    return {"lgb": booster.model_to_string(), "pickle": buffer.getvalue()}


class _Payload:
    """Unpickling this creates the file ``path`` (a harmless stand-in for code a pickle runs)."""

    def __init__(self, path):
        self.path = path

    def __reduce__(self):
        return (open, (self.path, "w"))


def _payload(w: Workspace, name="model.pkl") -> str:
    return w.file(name, pickle.dumps(_Payload(str(w.root / "PWNED"))))


def _not_created(name):
    def check(w, outcome):
        assert not (w.root / name).exists(), f"`{name}` was created: code ran that must not"
    return check


def _groups_hold(attribute, level):
    def check(w, outcome):
        groups = {(g["attribute"], g["group"]) for g in w.report()["groups"]}
        assert (attribute, level) in groups, sorted(groups)
    return check


def _at_most_groups(attribute, n):
    def check(w, outcome):
        if outcome.code == 0:
            levels = [g for g in w.report()["groups"] if g["attribute"] == attribute]
            assert 1 < len(levels) <= n, f"{len(levels)} groups of `{attribute}`"
    return check


def _no_raw_controls(w, outcome):
    texts = {"terminal": outcome.out}
    for name in ("report.md", "report.html"):
        path = w.root / "out" / name
        if path.exists():
            texts[name] = path.read_text(encoding="utf-8")
    assert len(texts) == 3, "expected report.md and report.html in --out"
    for where, text in texts.items():
        # markup is harmless in a terminal, not in Markdown (viewers render inline HTML) or HTML
        for raw in ("\x1b", "\u202e", "\x07") + (("<script>",) if where != "terminal" else ()):
            assert raw not in text, f"{raw!r} reached the {where} raw"


def _not_a_pass(w, outcome):
    if outcome.code in (0, 1):
        assert w.report()["verdict"]["status"] != "pass", "flips on a score column passed"


# ------------------------------------------------------------------------------------------------
# model sources


_LINEAR = ("import numpy as np\n"
           "def score(frame):\n"
           "    x = np.nan_to_num(frame['x1'].to_numpy(float), posinf=5.0, neginf=-5.0)\n"
           "    return 1 / (1 + np.exp(-np.clip(x, -30, 30)))\n")


def _py(w: Workspace, body: str, top: str = "") -> str:
    """A ``py:`` model whose ``score(frame)`` runs ``body`` (numpy as np, frame as frame)."""
    return w.module("m.py", "import numpy as np, os, sys, time, signal\n" + top +
                    "def score(frame):\n" + "".join(f"    {ln}\n" for ln in body.splitlines()))


_STARTED = "open('started', 'w').close()\n"  # the run's folder is the working directory


def _cmd(w: Workspace, code: str) -> str:
    script = w.file("c.py", code)
    return f"cmd:{PY} {script}"


def _lgb(w: Workspace, text: str | bytes, name="model.txt") -> str:
    return w.file(name, text)


def _cut(fraction):
    return lambda w: w.case("groups", model=_lgb(w, w.lgb[: int(len(w.lgb) * fraction)]),
                            process=True, seconds=30)


def _tree_blocks(text):
    head, _, rest = text.partition("Tree=0")
    body, _, tail = rest.partition("end of trees")
    trees = ("Tree=0" + body).split("\n\n")
    return head, [t for t in trees if t.strip()], "end of trees" + tail


def _trees_removed(w):
    head, trees, tail = _tree_blocks(w.lgb)
    return w.case("groups", model=_lgb(w, head + "\n\n".join(trees[:3]) + "\n\n" + tail),
                  process=True, seconds=30)


def _tree_boundary(w):
    head, trees, tail = _tree_blocks(w.lgb)
    return w.case("groups", model=_lgb(w, head + "\n\n".join(trees[:5]) + "\n"),
                  process=True, seconds=30)


def _edited(old, new):
    def build(w):
        lines = w.lgb.splitlines(keepends=True)
        at = next(i for i, ln in enumerate(lines) if ln.startswith(old))
        lines[at] = new
        return w.case("groups", model=_lgb(w, "".join(lines)), process=True, seconds=30)
    return build


# ------------------------------------------------------------------------------------------------
# the catalogue: id -> builder(workspace) -> Case


def _plan_run(body: str, *extra, **kw):
    return lambda w: Case(["run", w.plan(body), *extra], **kw)


def _good_run(extra="", *flags, top="", model="column:s", **kw):
    return lambda w: Case(["run", w.good_plan(extra, model=model, top=top), *flags], **kw)


_NUMERIC_AGE = {"age": lambda f: 18 + (np.arange(len(f)) % 62)}

CASES = {
    # -- data files ------------------------------------------------------------------------
    "data-empty": lambda w: w.case("groups", data=w.file("e.csv", b"")),
    "data-header-only": lambda w: w.case("groups", data=w.file("e.csv", "g,r,x1,x2,y,s\n")),
    "data-blank-lines": lambda w: w.case("groups", data=w.file("e.csv", "\n\n\n")),
    "data-binary-junk": lambda w: w.case(
        "groups", data=w.file("j.csv", np.random.default_rng(0).bytes(4000))),
    "data-nul-bytes": lambda w: w.case(
        "groups", data=w.file("n.csv", "g,y,s\n" + "a\x00,1,0.5\nb,0,0.2\n" * 40),
        codes=(0, 2)),
    "data-utf16-bom": lambda w: w.case(
        "groups", data=w.file("u.csv", small_frame().to_csv(index=False).encode("utf-16")),
        codes=(0, 2)),
    "data-utf8-bom-first-column-is-protected": lambda w: w.case(
        "groups", "--json", "r.json", codes=(0,),
        data=w.file("b.csv", b"\xef\xbb\xbf" + small_frame().to_csv(index=False).encode())),
    "data-latin1": lambda w: w.case(
        "groups", "--protected", "r", protected=None, codes=(0, 2),
        data=w.file("l.csv", small_frame().assign(r="caf\xe9").to_csv(index=False)
                    .encode("latin-1"))),
    "data-ragged-long-row": lambda w: w.case(
        "groups",
        data=w.file("r.csv", small_frame().to_csv(index=False) + "a,x,1,2,1,0.5,EXTRA,9\n")),
    "data-duplicate-label-header": lambda w: w.case(
        "slices", data=w.file("dup.csv", small_frame().to_csv(index=False).replace(
            "g,r,x1,x2,y,s", "g,r,x1,y,y,s", 1))),
    "data-duplicate-feature-header": lambda w: w.case(
        "groups", data=w.file("dup.csv", small_frame().to_csv(index=False).replace(
            "g,r,x1,x2,y,s", "g,r,x1,x1,y,s", 1))),
    "data-duplicate-protected-header": lambda w: w.case(
        "groups", protected="g", data=w.file("dup.csv", small_frame().to_csv(index=False).replace(
            "g,r,x1,x2,y,s", "g,g,x1,x2,y,s", 1))),
    "data-huge-field": lambda w: w.case(
        "groups", codes=(0, 2), seconds=20,
        data=w.variant("h.csv", r=lambda f: ["x" * 2_000_000] + ["y"] * (len(f) - 1))),
    "data-label-three-values": lambda w: w.case(
        "groups", data=w.variant(y=lambda f: np.arange(len(f)) % 3)),
    "data-label-constant": lambda w: w.case("groups", data=w.variant(y=1)),
    "data-label-all-missing": lambda w: w.case("groups", data=w.variant(y=np.nan)),
    "data-label-partly-missing": lambda w: w.case(
        "groups", codes=(0, 2), data=w.variant(y=lambda f: f["y"].where(f.index % 7 > 0))),
    "data-label-yes-no-without-positive": lambda w: w.case(
        "groups", data=w.variant(y=lambda f: np.where(f["y"] == 1, "yes", "no"))),
    "data-positive-not-present": lambda w: w.case("groups", "--positive", "7"),
    "data-label-missing-column": lambda w: w.case("groups", label="outcome"),
    "data-label-is-protected": lambda w: w.case("groups", protected="y"),
    "data-protected-missing": lambda w: w.case("groups", protected="gender"),
    "data-protected-commas-only": lambda w: w.case("groups", protected=",,"),
    "data-protected-absent-groups": lambda w: w.case("groups", protected=None),
    "data-protected-all-missing": lambda w: w.case("groups", data=w.variant(g=np.nan)),
    "data-protected-one-level": lambda w: w.case("groups", data=w.variant(g="a")),
    "data-protected-newline-in-name": lambda w: w.case("groups", protected="ge\nnder"),
    "data-label-newline-in-name": lambda w: w.case("groups", label="y\nz"),
    "data-protected-120-string-levels": lambda w: w.case(
        "groups", data=w.variant(g=lambda f: [f"id{i}" for i in range(len(f))] * 1)),
    "data-protected-numeric-62-ages": lambda w: w.case(
        "groups", "--json", "r.json", protected="age", codes=(0, 2),
        check=_at_most_groups("age", 10), data=w.variant(**_NUMERIC_AGE)),
    "data-protected-float-values": lambda w: w.case("groups", "--json", "r.json", protected="x1",
                                                    codes=(0, 2), check=_at_most_groups("x1", 10)),
    "data-protected-datetime-groups": lambda w: w.case(
        "groups", "--json", "r.json", protected="when", codes=(0, 2),
        data=w.variant(when=lambda f: ["2024-01-0%d" % (1 + i % 3) for i in range(len(f))])),
    "data-protected-mixed-types": lambda w: w.case(
        "groups", codes=(0, 2), data=w.variant(g=lambda f: [1, "a", 2.5, True] * (len(f) // 4))),
    "data-na-spelled-level": lambda w: w.case(
        "groups", "--json", "r.json", protected="r", codes=(0,), check=_groups_hold("r", "NA"),
        data=w.variant(r=lambda f: np.where(f["r"] == "z", "NA", f["r"]))),
    "data-na-spelled-initial-intersection": lambda w: w.case(
        "groups", "--json", "r.json", "--intersection", "g,r", codes=(0,),
        check=_groups_hold("g & r", "a & NA"),
        data=w.variant(r=lambda f: np.where(f["r"] == "z", "NA", f["r"]))),
    "data-control-characters-escaped": lambda w: w.case(
        "groups", "--out", "out", protected="r", codes=(0,), check=_no_raw_controls,
        data=w.variant(r=lambda f: np.select(
            [f["r"] == "x", f["r"] == "y"],
            ["\x1b[31mred\x1b[0m\x07", "\u202eevil"], "<script>alert(1)</script>"))),
    "data-score-inf": lambda w: w.case("groups", data=w.variant(s=lambda f: f["s"].where(
        f.index != 3, np.inf))),
    "data-score-minus-inf": lambda w: w.case("groups", data=w.variant(s=lambda f: f["s"].where(
        f.index != 3, -np.inf))),
    "data-score-1e308": lambda w: w.case("groups", data=w.variant(s=1e308)),
    "data-score-nan": lambda w: w.case("groups", data=w.variant(s=lambda f: f["s"].where(
        f.index != 5))),
    "data-score-strings": lambda w: w.case("groups", data=w.variant(s="high")),
    "data-feature-inf-slices": lambda w: w.case(
        "slices", "--no-split", codes=(0, 2),
        data=w.variant(x1=lambda f: f["x1"].where(f.index % 9 > 0, np.inf))),
    "data-feature-object-inf-slices": lambda w: w.case(
        "slices", "--no-split", codes=(0, 2),
        data=w.variant(x1=lambda f: np.where(f.index % 9 > 0, "inf", "abc"))),
    "data-feature-mixed-types-slices": lambda w: w.case(
        "slices", "--no-split", codes=(0, 2),
        data=w.variant(x2=lambda f: np.where(f.index % 2 == 0, f["x2"].astype(str), "n/a!"))),
    "data-feature-1e308-twins": lambda w: w.case(
        "flips", "--mode", "twins", codes=(0, 2), model=_py(w, "return np.full(len(frame), 0.5)"),
        data=w.variant(x1=lambda f: np.where(f.index % 2 == 0, 1e308, -1e308))),
    "data-feature-all-missing-proxies": lambda w: w.case(
        "proxies", codes=(0, 2), data=w.variant(x1=np.nan)),
    "data-datetime-proxies-attribute": lambda w: w.case(
        "proxies", protected="when", codes=(0, 2), data=w.variant(
            when=lambda f: pd.date_range("2020-01-01", periods=len(f)).astype(str))),
    "data-datetime-flip-attribute": lambda w: w.case(
        "flips", "--mode", "direct", protected="when", codes=(0, 2),
        model=w.module("lin.py", _LINEAR),
        data=w.variant(when=lambda f: ["2024-01-0%d" % (1 + i % 2) for i in range(len(f))])),
    "data-one-row": lambda w: w.case("groups", codes=(0, 2),
                                     data=w.file("one.csv", "g,r,x1,x2,y,s\na,x,1,2,1,0.7\n")),
    "data-tsv-with-commas": lambda w: w.case(
        "groups", data=w.file("t.tsv", small_frame().to_csv(index=False))),
    "data-parquet-that-is-csv": lambda w: w.case(
        "groups", data=w.file("p.parquet", small_frame().to_csv(index=False))),
    "data-parquet-truncated": lambda w: w.case(
        "groups", data=w.file("p.parquet", _parquet()[:300])),
    "data-feather-junk": lambda w: w.case("groups",
                                          data=w.file("f.feather", b"ARROW1" + b"\0" * 64)),
    "data-unknown-extension": lambda w: w.case("groups", data=w.file("d.xlsx", b"PK\x03\x04junk")),
    "data-is-a-directory": lambda w: w.case("groups", data=str(w.root)),
    "data-missing-file": lambda w: w.case("groups", data=str(w.root / "nope.csv")),
    # -- plans ----------------------------------------------------------------------------
    "plan-bad-toml": _plan_run("[data\npath = 3"),
    "plan-binary": lambda w: Case(["run", w.file("plan.toml", b"\xff\xfe\x00junk")]),
    "plan-missing": lambda w: Case(["run", str(w.root / "nope.toml")]),
    "plan-is-directory": lambda w: Case(["run", str(w.root)]),
    "plan-empty": _plan_run(""),
    "plan-duplicate-key": _plan_run('[data]\npath = "{data}"\npath = "x"\n'),
    "plan-unknown-top-key": _good_run(top='nmae = "x"\n'),
    "plan-unknown-section": _good_run("[slicez]\ndepth = 2\n"),
    "plan-unknown-model-key": _good_run("thresold = 0.4\n"),
    "plan-section-not-table": _good_run(top="policy = 3\n"),
    "plan-threshold-string": _good_run('threshold = "high"\n'),
    "plan-threshold-out-of-range": _good_run("threshold = 1.5\n"),
    "plan-threshold-nan": _good_run("threshold = nan\n"),
    "plan-batch-size-zero": _good_run("batch_size = 0\n"),
    "plan-timeout-zero": _good_run("timeout = 0\n"),
    "plan-timeout-negative": _good_run("timeout = -5\n"),
    "plan-depth-nine": _good_run("[slices]\ndepth = 9\n"),
    "plan-top-zero": _good_run("[slices]\ntop = 0\n"),
    "plan-metric-unknown": _good_run('[slices]\nmetric = "accuracy"\n'),
    "plan-modes-unknown": _good_run('[flips]\nattributes = ["g"]\nmodes = ["direkt"]\n'),
    "plan-n-proxies-zero": _good_run('[flips]\nattributes = ["g"]\nn_proxies = 0\n'),
    "plan-policy-ratio-above-one": _good_run("[policy]\nmin_impact_ratio = 2\n"),
    "plan-policy-gap-rule-out-of-range": _good_run("[policy]\nmax_fpr_gap = -0.1\n"),
    "plan-seed-negative-slices": _good_run("[slices]\ndepth = 1\n", top="seed = -1\n"),
    "plan-seed-negative-flips": _good_run('[flips]\nattributes = ["g"]\n', top="seed = -1\n",
                                          model="py:lin.py:score"),
    "plan-seed-float": _good_run(top="seed = 1.5\n"),
    "plan-seed-too-large": _good_run(top="seed = 9223372036854775807\n", codes=(0, 2)),
    "plan-confidence-one": _good_run(top="confidence_level = 1.0\n"),
    "plan-no-data-table": _plan_run('[model]\nspec = "column:s"\n'),
    "plan-no-model-table": _plan_run('[data]\npath = "{data}"\nlabel = "y"\nprotected = ["g"]\n'),
    "plan-no-label": _plan_run('[data]\npath = "{data}"\nprotected = ["g"]\n'
                               '[model]\nspec = "column:s"\n'),
    "plan-data-path-missing": _plan_run('[data]\npath = "nope.csv"\nlabel = "y"\n'
                                        '[model]\nspec = "column:s"\n'),
    "plan-formats-empty": _good_run('[report]\nformats = []\nout = "out"\n'),
    "plan-formats-unknown": _good_run('[report]\nformats = ["pdf"]\n'),
    "plan-report-out-is-a-file": lambda w: Case(["run", w.good_plan(
        f'[report]\nout = "{Path(w.data).name}/sub"\n')]),
    "plan-name-path-traversal": _good_run(top='name = "../../../escaped"\n', codes=(0, 2)),
    "plan-name-absolute": lambda w: Case(["run", w.good_plan(
        top=f'name = "{(w.root.parent / "abs").as_posix()}"\n')], codes=(0, 2)),
    "plan-trust-pickle-without-flag-or-hash": lambda w: Case(
        ["run", w.good_plan("trust_pickle = true\n", model=Path(_payload(w)).name)],
        check=_not_created("PWNED")),
    "plan-sha256-mismatch": lambda w: Case(
        ["run", w.good_plan(f'sha256 = "{"0" * 64}"\n', model=Path(_payload(w)).name)],
        check=_not_created("PWNED")),
    "plan-sha256-match-trusts-pickle": lambda w: Case(["run", w.good_plan(
        f'sha256 = "{hashlib.sha256(w.pickle).hexdigest()}"\n',
        model=Path(w.file("lr.joblib", w.pickle)).name)], codes=(0,)),
    "plan-bins-one-bin": _plan_run(
        '[data]\npath = "{data}"\nlabel = "y"\nprotected = ["x1"]\nbins = { x1 = 1 }\n'
        '[model]\nspec = "column:s"\n', needle="bins"),
    "plan-bins-unsorted-edges": _plan_run(
        '[data]\npath = "{data}"\nlabel = "y"\nprotected = ["x1"]\nbins = { x1 = [1, 0] }\n'
        '[model]\nspec = "column:s"\n', needle="bins"),
    "plan-bins-unknown-column": _plan_run(
        '[data]\npath = "{data}"\nlabel = "y"\nprotected = ["g"]\nbins = { nope = 3 }\n'
        '[model]\nspec = "column:s"\n', needle="nope"),
    "plan-positive-class-wrong-type": _good_run("positive_class = [1, 2]\n",
                                                needle="positive_class"),
    "plan-isolate-not-bool": _good_run('isolate = "yes"\n', needle="isolate"),
    # -- flags ----------------------------------------------------------------------------
    "flag-threshold-out-of-range-named": lambda w: w.case("groups", "--threshold", "1.5",
                                                          needle="--threshold"),
    "flag-threshold-not-a-number": lambda w: w.case("groups", "--threshold", "abc"),
    "flag-threshold-nan": lambda w: w.case("groups", "--threshold", "nan"),
    "flag-depth-zero": lambda w: w.case("slices", "--depth", "0"),
    "flag-depth-99": lambda w: w.case("slices", "--depth", "99"),
    "flag-top-zero": lambda w: w.case("slices", "--top", "0"),
    "flag-max-share-two": lambda w: w.case("slices", "--max-share", "2"),
    "flag-min-rows-one": lambda w: w.case("slices", "--min-rows", "1"),
    "flag-metric-unknown": lambda w: w.case("slices", "--metric", "accuracy"),
    "flag-columns-unknown": lambda w: w.case("slices", "--columns", "nope"),
    "flag-seed-negative-slices": lambda w: w.case("slices", "--seed", "-1"),
    "flag-seed-negative-flips": lambda w: w.case("flips", "--seed", "-1",
                                                 model=w.module("lin.py", _LINEAR)),
    "flag-seed-negative-proxies": lambda w: w.case("proxies", "--seed", "-1"),
    "flag-seed-not-int": lambda w: w.case("groups", "--seed", "1e3"),
    "flag-confidence-1.5": lambda w: w.case("groups", "--confidence-level", "1.5"),
    "flag-confidence-zero": lambda w: w.case("groups", "--confidence-level", "0"),
    "flag-unknown": lambda w: w.case("groups", "--frobnicate", needle="unrecognized arguments"),
    "flag-unknown-subcommand": lambda w: Case(["frobnicate"], needle="invalid choice"),
    "flag-missing-data": lambda w: Case(["groups", "--model", "column:s", "--label", "y"]),
    "flag-missing-model": lambda w: w.case("groups", model=None),
    "flag-missing-label": lambda w: w.case("groups", label=None),
    "flag-mode-unknown": lambda w: w.case("flips", "--mode", "direkt",
                                          model=w.module("lin.py", _LINEAR)),
    "flag-n-proxies-zero": lambda w: w.case("flips", "--n-proxies", "0",
                                            model=w.module("lin.py", _LINEAR)),
    "flag-k-zero": lambda w: w.case("flips", "--k", "0", model=w.module("lin.py", _LINEAR)),
    "flag-flip-reference-unknown": lambda w: w.case("flips", "--reference", "zz",
                                                    model=w.module("lin.py", _LINEAR)),
    "flag-flip-proxies-unknown": lambda w: w.case("flips", "--proxies", "nope",
                                                  model=w.module("lin.py", _LINEAR)),
    "flag-flips-on-a-score-column": lambda w: w.case(
        "flips", "--json", "r.json",
        "--policy", w.file("pol.toml", "[policy]\nmax_flip_rate = 0.1\n"),
        codes=(0, 1, 2), check=_not_a_pass),
    "flag-batch-size-zero": lambda w: w.case("groups", "--batch-size", "0"),
    "flag-timeout-zero": lambda w: w.case("groups", "--timeout", "0"),
    "flag-timeout-negative": lambda w: w.case("groups", "--timeout", "-1"),
    "flag-reference-group-unknown-level": lambda w: w.case("groups", "--reference-group", "g=zzz"),
    "flag-reference-group-unknown-attribute": lambda w: w.case("groups", "--reference-group",
                                                               "nope=a"),
    "flag-features-unknown": lambda w: w.case("groups", "--features", "nope"),
    "flag-intersection-one-column": lambda w: w.case("groups", "--intersection", "g"),
    "flag-intersection-same-column-twice": lambda w: w.case("groups", "--intersection", "g,g",
                                                            needle="--intersection"),
    "flag-reference-group-without-level": lambda w: w.case("groups", "--reference-group", "g",
                                                           needle="--reference-group"),
    "flag-bins-unsorted": lambda w: w.case("groups", "--bins", "x1=1:0", protected="x1",
                                           needle="--bins"),
    "flag-bins-junk": lambda w: w.case("groups", "--bins", "x1", protected="x1", needle="--bins"),
    "flag-bins-quartiles-numeric-age": lambda w: w.case(
        "groups", "--bins", "age=4", "--json", "r.json", protected="age", codes=(0,),
        check=_at_most_groups("age", 4), data=w.variant(**_NUMERIC_AGE)),
    "flag-bins-edges-numeric-age": lambda w: w.case(
        "groups", "--bins", "age=25:40:60", "--json", "r.json", protected="age", codes=(0,),
        check=_at_most_groups("age", 4), data=w.variant(**_NUMERIC_AGE)),
    "flag-bins-one-band-for-every-row": lambda w: w.case(
        "groups", "--bins", "age=90:100", protected="age", needle="one band",
        data=w.variant(**_NUMERIC_AGE)),
    "flag-timeout-past-any-clock": lambda w: w.case("groups", "--timeout", "1e12",
                                                    needle="--timeout"),
    "flag-policy-missing-file": lambda w: w.case("groups", "--policy", "nope.toml",
                                                 needle="nope.toml"),
    "flag-policy-bad-toml": lambda w: w.case("groups", "--policy", w.file("p.toml", "[policy\n"),
                                             needle="p.toml"),
    "flag-policy-unknown-rule": lambda w: w.case(
        "groups", "--policy", w.file("p.toml", "[policy]\nmax_fpr_gapp = 0.1\n"),
        needle="max_fpr_gapp"),
    "flag-policy-rule-out-of-range": lambda w: w.case(
        "groups", "--policy", w.file("p.toml", "[policy]\nmax_error_gap = 3\n"),
        needle="max_error_gap"),
    "flag-trust-pickle-on-run": lambda w: Case(["run", w.good_plan(
        model=Path(w.file("lr.joblib", w.pickle)).name), "--trust-pickle"], codes=(0,)),
    "flag-positive-class-unknown": lambda w: w.case(
        "groups", "--trust-pickle", "--positive-class", "7", model=w.file("lr.joblib", w.pickle),
        needle="--positive-class"),
    "flag-label-yes-no-model-0-1-mapped": lambda w: w.case(
        "groups", "--trust-pickle", "--positive", "yes", "--positive-class", "1", codes=(0,),
        model=w.file("lr.joblib", w.pickle),
        data=w.variant(y=lambda f: np.where(f["y"] == 1, "yes", "no"))),
    "flag-label-deny-needs-favourable": lambda w: w.case(
        "groups", label="deny", data=w.variant(deny=lambda f: f["y"]), needle="favo"),
    # -- models ---------------------------------------------------------------------------
    "model-missing-file": lambda w: w.case("groups", model=str(w.root / "nope.txt")),
    "model-wrong-extension": lambda w: w.case("groups", model=w.file("m.csv", "a,b\n1,2\n")),
    "model-no-extension": lambda w: w.case("groups", model=w.file("model", b"\x00\x01junk")),
    "model-is-directory": lambda w: w.case("groups", model=str(w.root)),
    "model-empty-spec": lambda w: w.case("groups", model=""),
    "model-unknown-scheme": lambda w: w.case("groups", model="ftp://127.0.0.1/m"),
    "model-column-missing": lambda w: w.case("groups", model="column:nope"),
    "model-column-strings": lambda w: w.case("groups", model="column:g"),
    "model-column-is-label": lambda w: w.case("groups", model="column:y", codes=(0, 2)),
    "model-pickle-without-trust": lambda w: w.case("groups", model=_payload(w),
                                                   check=_not_created("PWNED")),
    "model-pickle-truncated-trusted": lambda w: w.case(
        "groups", "--trust-pickle", model=w.file("lr.joblib", w.pickle[: len(w.pickle) // 2])),
    "model-pickle-not-a-model-trusted": lambda w: w.case(
        "groups", "--trust-pickle", model=w.file("l.pkl", pickle.dumps({"a": 1}))),
    "model-skops-junk": lambda w: w.case("groups", model=w.file("m.skops", b"PK\x03\x04junk")),
    "model-onnx-junk": lambda w: w.case("groups", model=w.file("m.onnx", b"\x08\x07junk" * 10)),
    "model-lgb-unseen-level-refused": lambda w: w.case(
        "groups", model=_lgb(w, w.lgb), data=w.variant(r=lambda f: np.where(
            f.index % 10 == 0, "w", f["r"])), needle="`r`"),
    "model-lgb-unseen-level-allowed": lambda w: w.case(
        "groups", "--allow-unseen", codes=(0,), model=_lgb(w, w.lgb),
        data=w.variant(r=lambda f: np.where(f.index % 10 == 0, "w", f["r"]))),
    "model-lgb-empty": lambda w: w.case("groups", model=_lgb(w, ""), process=True, seconds=30),
    "model-lgb-junk-after-tree": lambda w: w.case(
        "groups", model=_lgb(w, b"tree\n" + np.random.default_rng(1).bytes(3000)),
        process=True, seconds=30),
    "model-lgb-cut-5pct": _cut(0.05),
    "model-lgb-cut-25pct": _cut(0.25),
    "model-lgb-cut-50pct": _cut(0.50),
    "model-lgb-cut-75pct": _cut(0.75),
    "model-lgb-cut-90pct": _cut(0.90),
    "model-lgb-cut-at-tree-boundary": _tree_boundary,
    "model-lgb-trees-removed-trailer-kept": _trees_removed,
    "model-lgb-split-feature-out-of-range": _edited("split_feature=", "split_feature=97 98 99\n"),
    "model-lgb-num-leaves-inflated": _edited("num_leaves=", "num_leaves=4000\n"),
    "model-py-raises": lambda w: w.case("groups", model=_py(w, "raise RuntimeError('boom')")),
    "model-py-raises-on-import": lambda w: w.case(
        "groups", model=_py(w, "return 0", top="raise ImportError('no such thing')\n")),
    "model-py-syntax-error": lambda w: w.case("groups", model=w.module("m.py", "def score(:\n")),
    "model-py-missing-attribute": lambda w: w.case(
        "groups", model=w.module("m.py", "x = 1\n").replace(":score", ":nope")),
    "model-py-missing-module": lambda w: w.case("groups", model="py:nope_nope.py:score"),
    "model-py-wrong-length": lambda w: w.case("groups", model=_py(w, "return np.zeros(3)")),
    "model-py-nan": lambda w: w.case("groups", model=_py(w, "return np.full(len(frame), np.nan)")),
    "model-py-above-one": lambda w: w.case("groups",
                                           model=_py(w, "return np.full(len(frame), 7.0)")),
    "model-py-strings": lambda w: w.case("groups", model=_py(w, "return ['a'] * len(frame)")),
    "model-py-none": lambda w: w.case("groups", model=_py(w, "return None")),
    "model-py-2d": lambda w: w.case("groups", model=_py(w, "return np.zeros((len(frame), 3))")),
    "model-py-blocks-timeout-2": lambda w: w.case(
        "groups", "--timeout", "2", model=_py(w, _STARTED + "time.sleep(600)"), process=True,
        seconds=12),
    "model-py-blocks-on-import-plan-timeout": lambda w: Case(
        ["run", w.good_plan("timeout = 2\n", model=_py(w, "return 0", top="time.sleep(600)\n"))],
        process=True, seconds=12),
    "model-py-os-exit-0": lambda w: w.case("groups", model=_py(w, "os._exit(0)"), process=True),
    "model-py-os-exit-on-import": lambda w: w.case(
        "groups", model=_py(w, "return 0", top="os._exit(0)\n"), process=True),
    "model-py-sys-exit-0": lambda w: w.case("groups", model=_py(w, "sys.exit(0)"), process=True),
    "model-py-segfault": lambda w: w.case(
        "groups", model=_py(w, "os.kill(os.getpid(), signal.SIGSEGV)"), process=True),
    "model-cmd-exits-nonzero": lambda w: w.case(
        "groups", model=_cmd(w, "import sys\nsys.stderr.write('bad\\n')\nsys.exit(3)\n")),
    "model-cmd-prints-junk": lambda w: w.case(
        "groups", model=_cmd(w, "import sys\nn = len(sys.stdin.readlines()) - 1\n"
                                "print('\\n'.join(['x'] * n))\n")),
    "model-cmd-wrong-count": lambda w: w.case("groups", model=_cmd(w, "print(0.5)\n")),
    "model-cmd-blocks-timeout-2": lambda w: w.case(
        "groups", "--timeout", "2", model=_cmd(w, "import time\ntime.sleep(600)\n"), seconds=15),
    "model-cmd-program-missing": lambda w: w.case("groups", model="cmd:no-such-program-here --x"),
    "model-http-closed-port": lambda w: w.case("groups", "--timeout", "2",
                                               model="http://127.0.0.1:9/score", seconds=15),
    # -- signals --------------------------------------------------------------------------
    "signal-term-while-scoring": lambda w: w.case(
        "groups", "--out", "out", model=_py(w, _STARTED + "time.sleep(60)"), process=True,
        codes=(143,), sig=hostile.SIGNALS["TERM"], seconds=25),
    "signal-int-while-scoring": lambda w: w.case(
        "groups", "--out", "out", model=_py(w, _STARTED + "time.sleep(60)"), process=True,
        codes=(130,), sig=hostile.SIGNALS["INT"], seconds=25),
    # -- output paths ---------------------------------------------------------------------
    "out-is-a-file": lambda w: w.case("groups", "--out", w.file("taken", "x")),
    "out-parent-is-a-file": lambda w: w.case("groups", "--out", w.file("taken", "x") + "/sub"),
    "json-is-a-directory": lambda w: w.case("groups", "--json", str(w.root)),
    "json-parent-is-a-file": lambda w: w.case("groups", "--json", w.file("taken", "x") + "/r.json"),
    "json-onto-the-data-file": lambda w: w.case("groups", "--json", w.data),
    "out-into-the-data-folder": lambda w: w.case("groups", "--out", str(w.root), codes=(0, 2)),
    "out-a-symbolic-link": lambda w: (w.root.joinpath("real").mkdir(),
                                      w.root.joinpath("link").symlink_to(w.root / "real"),
                                      w.case("groups", "--out", "link", needle="symbolic"))[-1],
    "json-inside-the-out-folder": lambda w: w.case("groups", "--out", "o", "--json", "o/x.json",
                                                   needle="inside the report folder"),
    "out-checked-before-the-model-runs": lambda w: w.case(
        "groups", "--out", w.file("taken", "x") + "/sub",
        model=_py(w, "open('CALLED', 'w').close()\nreturn np.full(len(frame), 0.5)"),
        check=_not_created("CALLED")),
    # -- render ---------------------------------------------------------------------------
    "render-missing-report": lambda w: Case(["render", "gone.json"], needle="gone.json"),
    "render-junk-json": lambda w: Case(["render", w.file("junk.json", "{not json")],
                                       needle="junk.json"),
    "render-wrong-schema": lambda w: Case(["render", w.file("other.json", '{"schema": "x/9"}')],
                                          needle="other.json"),
    "render-format-unknown": lambda w: Case(
        ["render", w.file("other.json", '{"schema": "x/9"}'), "--format", "pdf"], needle="pdf"),
}


def _parquet() -> bytes:
    buffer = io.BytesIO()
    small_frame().to_parquet(buffer)
    return buffer.getvalue()


@pytest.fixture
def workspace(tmp_path, models, monkeypatch):
    root = tmp_path / "a" / "b" / "c" / "work"
    root.mkdir(parents=True)
    w = Workspace(root)
    w.lgb, w.pickle = models["lgb"], models["pickle"]
    w.file("lin.py", _LINEAR)
    monkeypatch.chdir(root)
    return w


def test_catalogue_is_large_enough():
    assert len(CASES) >= 100


#: Cases that could end a process run in-process like the rest: an isolated model crashes, exits
#: or hangs in its own child, so this process surviving with the right exit code is the proof. A
#: real `python -m probe` is kept for signals, and for these, as the proof at the process level.
_REAL_PROCESS = {"model-py-segfault", "model-py-os-exit-0", "model-lgb-empty"}


@pytest.mark.parametrize("name", list(CASES))
def test_hostile_input_keeps_the_contract(name, workspace, tmp_path, capfd):
    case = CASES[name](workspace)
    before = hostile.snapshot(tmp_path)
    if case.signal is not None or (case.process and name in _REAL_PROCESS):
        outcome = hostile.run_out_of_process(case.argv, workspace.root, timeout=case.seconds + 5,
                                             sig=case.signal)
    else:
        outcome = hostile.run_in_process(case.argv, capfd)
    hostile.check_outcome(outcome, case)
    after = hostile.snapshot(tmp_path)
    changed = [str(p) for p, digest in before.items() if after.get(p) != digest]
    assert not changed, f"inputs modified or removed: {changed}"
    outside = [str(p) for p in after if p not in before and workspace.root not in p.parents]
    assert not outside, f"written outside the run's folder: {outside}"
    assert not hostile.leftovers(tmp_path)
    if case.check is not None:
        case.check(workspace, outcome)


def test_an_internal_error_is_exit_3_with_one_line_asking_for_a_report(workspace, capfd,
                                                                       monkeypatch):
    # a bug in probe (an exception that is not a ProbeError) stands in for any internal error
    from probe import pipeline

    def broken(*args, **kwargs):
        raise ZeroDivisionError("planted\nsecond line")

    monkeypatch.setattr(pipeline, "run_plan", broken)
    outcome = hostile.run_in_process(workspace.argv("groups"), capfd)
    hostile.check_outcome(outcome, Case([], codes=(3,)))
    assert hostile.error_lines(outcome.err) == [
        "error: internal error (ZeroDivisionError: planted); re-run with --debug and report it"]
