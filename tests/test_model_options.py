"""[model] options that protect a release decision: trust from the person (flag) or a pinned
SHA-256, the model's class for the label's positive value, and values the model never saw."""

import hashlib
import io
import json
import pathlib
import pickle

import joblib
import numpy as np
import pandas as pd
import pytest
from rich.console import Console
from sklearn.compose import ColumnTransformer
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import OneHotEncoder

from probe.adapters import load_model
from probe.cli import EXIT_BAD_INPUT, EXIT_OK, build_parser, main

REGIONS = ["east", "north", "south"]


@pytest.fixture(scope="module")
def fitted():
    rng = np.random.default_rng(5)
    n = 600
    frame = pd.DataFrame({"x": rng.normal(size=n).round(3),
                          "region": rng.choice(REGIONS, size=n),
                          "group": rng.choice(["a", "b"], size=n)})
    y = (frame["x"] + (frame["region"] == "north") + rng.normal(size=n) > 0.5).astype(int)
    pipe = Pipeline([("prep", ColumnTransformer([("cat", OneHotEncoder(handle_unknown="ignore"),
                                                  ["region"])], remainder="passthrough")),
                     ("clf", LogisticRegression())]).fit(frame[["x", "region"]], y)
    return frame.assign(y=y), pipe


@pytest.fixture
def files(tmp_path, fitted):
    frame, pipe = fitted
    joblib.dump(pipe, tmp_path / "m.joblib")
    frame.to_csv(tmp_path / "h.csv", index=False)
    return tmp_path


def _digests(folder):
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in folder.iterdir()
            if p.is_file()}


def _main(args, capsys):
    capsys.readouterr()
    code = main(args, console=Console(file=io.StringIO(), width=120))
    err = [ln for ln in capsys.readouterr().err.splitlines() if ln.strip()]
    return code, err


def _one_error(err):
    assert len(err) == 1 and err[0].startswith("error: ") and "Traceback" not in err[0], err
    return err[0]


def _plan(folder, model_lines, name="plan.toml"):
    (folder / name).write_text(
        '[data]\npath = "h.csv"\nlabel = "y"\nprotected = ["group"]\n'
        f'[model]\nspec = "m.joblib"\n{model_lines}\n[report]\nout = "out"\nformats = ["json"]\n')
    return folder / name


# --------------------------------------------------------------------------------------------
# trust from the person, not the file
# --------------------------------------------------------------------------------------------


def test_a_plan_file_alone_cannot_run_a_pickles_code(tmp_path, capsys):
    marker = tmp_path / "ran"

    class Payload:
        def __reduce__(self):
            return (pathlib.Path.touch, (marker,))

    (tmp_path / "m.joblib").write_bytes(pickle.dumps(Payload()))
    pd.DataFrame({"x": [1.0, 2.0], "group": ["a", "b"], "y": [0, 1]}).to_csv(tmp_path / "h.csv",
                                                                           index=False)
    plan = _plan(tmp_path, "trust_pickle = true")
    before = _digests(tmp_path)
    code, err = _main(["run", str(plan)], capsys)
    assert code == EXIT_BAD_INPUT and not marker.exists()
    line = _one_error(err)
    pin = hashlib.sha256((tmp_path / "m.joblib").read_bytes()).hexdigest()  # reference: hashlib
    assert "--trust-pickle" in line and f'sha256 = "{pin}"' in line
    assert _digests(tmp_path) == before


def test_run_takes_trust_pickle_and_records_where_trust_came_from(files, capsys):
    code, err = _main(["run", str(_plan(files, "")), "--trust-pickle"], capsys)
    assert code == EXIT_OK, err
    model = json.loads((files / "out" / "report.json").read_text())["provenance"]["model"]
    assert model["trust"] == "flag" and model["isolated"] is True
    assert build_parser().parse_args(["demo", "--trust-pickle"]).model__trust_pickle is True


def test_a_matching_pin_grants_trust_and_another_file_is_refused(files, capsys):
    pin = hashlib.sha256((files / "m.joblib").read_bytes()).hexdigest()
    code, err = _main(["run", str(_plan(files, f'sha256 = "{pin}"'))], capsys)
    assert code == EXIT_OK, err
    model = json.loads((files / "out" / "report.json").read_text())["provenance"]["model"]
    assert model["trust"] == "sha256" and model["sha256"] == pin
    other = "0" * 64
    code, err = _main(["run", str(_plan(files, f'sha256 = "{other}"')), "--trust-pickle"], capsys)
    assert code == EXIT_BAD_INPUT
    line = _one_error(err)
    assert pin in line and other in line  # a pin refuses any other file, flag or not


def test_the_baselines_own_pin_grants_its_trust_and_refuses_another_file(files, capsys):
    import shutil

    shutil.copy(files / "m.joblib", files / "b.joblib")
    pin = hashlib.sha256((files / "m.joblib").read_bytes()).hexdigest()  # reference: hashlib
    for baseline_pin, expected in ((pin, EXIT_OK), ("0" * 64, EXIT_BAD_INPUT)):
        plan = _plan(files, f'sha256 = "{pin}"')
        plan.write_text(plan.read_text() + '[compare]\nbaseline = "b.joblib"\n'
                        f'baseline_sha256 = "{baseline_pin}"\n[slices]\ndepth = 1\n')
        code, err = _main(["run", str(plan)], capsys)
        assert code == expected, err
        if expected == EXIT_BAD_INPUT:
            line = _one_error(err)
            assert "b.joblib" in line and pin in line and "0" * 64 in line


def test_a_bad_pin_is_a_plan_error(files, capsys):
    code, err = _main(["run", str(_plan(files, 'sha256 = "abc"'))], capsys)
    assert code == EXIT_BAD_INPUT and "`sha256` must be the 64 hexadecimal digits" in \
        _one_error(err)


# --------------------------------------------------------------------------------------------
# the model's classes vs the label's values
# --------------------------------------------------------------------------------------------


def test_a_yes_no_label_needs_the_models_positive_class(files, fitted, capsys):
    frame, pipe = fitted
    frame.assign(y=np.where(frame["y"] == 1, "yes", "no")).to_csv(files / "h.csv", index=False)
    args = ["groups", "--data", str(files / "h.csv"), "--label", "y", "--positive", "yes",
            "--protected", "group", "--model", str(files / "m.joblib"), "--trust-pickle"]
    code, err = _main(args, capsys)
    assert code == EXIT_BAD_INPUT
    line = _one_error(err)
    assert "(0, 1)" in line and "'no', 'yes'" in line and "--positive-class" in line
    code, err = _main([*args, "--positive-class", "1"], capsys)
    assert code == EXIT_OK, err
    for cls, column in ((1, 1), (0, 0)):
        with load_model(files / "m.joblib", positive="yes", positive_class=cls,
                        trust_pickle=True) as model:
            # reference: scikit-learn's own predict_proba column of that class
            want = pipe.predict_proba(frame[["x", "region"]])[:, column]
            np.testing.assert_allclose(model.scores(frame), want, rtol=0, atol=1e-12)


# --------------------------------------------------------------------------------------------
# values the model never saw
# --------------------------------------------------------------------------------------------


def test_unseen_categories_are_refused_then_counted(files, fitted, capsys):
    frame, _ = fitted
    odd = frame.copy()
    odd.loc[odd.index[::7], "region"] = "north-east"
    odd.to_csv(files / "h.csv", index=False)
    n = int((~odd["region"].isin(REGIONS)).sum())  # reference: pandas, on the planted rows
    args = ["groups", "--data", str(files / "h.csv"), "--label", "y", "--protected", "group",
            "--model", str(files / "m.joblib"), "--trust-pickle", "--out", str(files / "out")]
    before = _digests(files)
    code, err = _main(args, capsys)
    assert code == EXIT_BAD_INPUT and _digests(files) == before
    line = _one_error(err)
    assert f"column `region` has {n} rows ({100 * n / len(odd):.1f} %) with values the model" \
           in line and "e.g. 'north-east'" in line and "--allow-unseen" in line
    code, err = _main([*args, "--allow-unseen"], capsys)
    assert code == EXIT_OK, err
    model = json.loads((files / "out" / "report.json").read_text())["provenance"]["model"]
    assert model["unseen_values"] == {"region": n}


def test_a_pin_checks_a_py_module_before_it_runs_and_needs_a_file(tmp_path):
    from probe.errors import PlanError, TrustError

    (tmp_path / "m.py").write_text(
        "import pathlib\npathlib.Path(__file__).with_name('ran').touch()\n"
        "def score(frame):\n    return frame['x'] * 0\n")
    pin = hashlib.sha256((tmp_path / "m.py").read_bytes()).hexdigest()  # reference: hashlib
    with pytest.raises(TrustError, match=f"not the pinned {'1' * 64}"):
        load_model("py:m.py:score", base_dir=tmp_path, sha256="1" * 64)
    assert not (tmp_path / "ran").exists()
    with load_model("py:m.py:score", base_dir=tmp_path, sha256=pin.upper()) as model:
        assert model.sha256 == pin
    with pytest.raises(PlanError, match="`sha256` pins a model file"):
        load_model("column:x", sha256=pin)
