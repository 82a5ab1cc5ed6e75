"""Tests of probe.adapters: every model spec scores a real model like the library itself does.

The reference in each check is the model library's own call on the same rows
(scikit-learn ``predict_proba`` / ``decision_function``, ``lightgbm.Booster.predict``,
``onnxruntime.InferenceSession.run``), ``hashlib`` for file hashes, ``scipy.special.expit`` for the
sigmoid, or a closed-form scorer written out in the test (cmd, http, py kinds).
"""

from __future__ import annotations

import hashlib
import http.server
import json
import operator
import pickle
import sys
import threading
import time

import joblib
import lightgbm
import numpy as np
import pandas as pd
import pytest
import skops.io as sio
from scipy.special import expit
from sklearn.compose import ColumnTransformer
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import Pipeline, make_pipeline
from sklearn.preprocessing import FunctionTransformer, OneHotEncoder, StandardScaler
from sklearn.svm import LinearSVC

from probe.adapters import Model, load_model
from probe.errors import DataError, ModelError, PlanError, TrustError

REGIONS = ["north", "south", "east", "west"]
FEATURES = ["income", "age", "region", "tenure"]


# --------------------------------------------------------------------------------------------
# fixtures: a small synthetic frame, a scikit-learn pipeline and a LightGBM booster
# --------------------------------------------------------------------------------------------


def _make_frame(n: int, seed: int) -> tuple[pd.DataFrame, np.ndarray]:
    rng = np.random.default_rng(seed)
    X = pd.DataFrame({
        "income": rng.normal(50.0, 15.0, n),
        "age": rng.uniform(18, 70, n),
        "region": rng.choice(REGIONS, n),
        "tenure": rng.integers(0, 20, n),
    })
    logit = 0.06 * (X["income"] - 50) - 0.03 * (X["age"] - 40) + 1.2 * (X["region"] == "south")
    y = (rng.uniform(size=n) < expit(logit.to_numpy())).astype(int)
    return X, y


@pytest.fixture(scope="module")
def data() -> tuple[pd.DataFrame, np.ndarray]:
    return _make_frame(400, seed=7)


@pytest.fixture(scope="module")
def holdout() -> pd.DataFrame:
    X, _ = _make_frame(250, seed=8)
    # a protected attribute that is not a model input, and the columns in another order
    X["group"] = np.where(np.arange(len(X)) % 3 == 0, "a", "b")
    return X[["group", "tenure", "region", "age", "income"]]


@pytest.fixture(scope="module")
def pipe(data) -> Pipeline:
    X, y = data
    ct = ColumnTransformer([
        ("num", StandardScaler(), ["income", "age", "tenure"]),
        ("cat", OneHotEncoder(handle_unknown="ignore"), ["region"]),
    ])
    return Pipeline([("prep", ct), ("clf", LogisticRegression())]).fit(X, y)


@pytest.fixture(scope="module")
def booster(data) -> lightgbm.Booster:
    X, y = data
    Xc = X.copy()
    Xc["region"] = pd.Categorical(Xc["region"], categories=REGIONS)
    params = {"objective": "binary", "verbose": -1, "num_leaves": 7, "min_data_in_leaf": 5,
              "min_data_per_group": 5, "cat_smooth": 1.0, "seed": 1, "num_threads": 1}
    return lightgbm.train(params, lightgbm.Dataset(Xc, y), num_boost_round=25)


def _raw(pipe, X):
    return pipe.predict_proba(X[list(pipe.feature_names_in_)])[:, 1]


# --------------------------------------------------------------------------------------------
# pickle / joblib
# --------------------------------------------------------------------------------------------


def test_pickle_refused_without_trust(tmp_path, pipe):
    path = tmp_path / "model.joblib"
    joblib.dump(pipe, path)
    with pytest.raises(TrustError) as info:
        load_model("model.joblib", base_dir=tmp_path)
    msg = str(info.value)
    # the fix names the flag and the pin, with the file's own hash (reference: hashlib)
    assert "--trust-pickle" in msg and "trust_pickle = true" not in msg
    assert f'sha256 = "{hashlib.sha256(path.read_bytes()).hexdigest()}"' in msg
    assert "arbitrary code" in msg and "\n" not in msg


@pytest.mark.parametrize("name", ["model.joblib", "model.pkl", "model.pickle"])
def test_pickle_scores_equal_predict_proba(tmp_path, pipe, holdout, name):
    path = tmp_path / name
    if name.endswith(".joblib"):
        joblib.dump(pipe, path)
    else:
        path.write_bytes(pickle.dumps(pipe))
    model = load_model(name, base_dir=tmp_path, trust_pickle=True)
    assert model.kind == "pickle"
    # reference: hashlib over the file's bytes
    assert model.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert model.feature_names == tuple(pipe.feature_names_in_)
    got = model.scores(holdout)
    np.testing.assert_allclose(got, _raw(pipe, holdout), rtol=0, atol=1e-9)
    assert got.dtype == np.float64 and not got.flags.writeable


def test_sklearn_categories_from_one_hot_encoder(tmp_path, pipe):
    joblib.dump(pipe, tmp_path / "m.joblib")
    model = load_model(tmp_path / "m.joblib", trust_pickle=True)
    # scikit-learn documents that OneHotEncoder sorts the levels it learns
    assert model.categories == {"region": tuple(sorted(REGIONS))}


# --------------------------------------------------------------------------------------------
# skops
# --------------------------------------------------------------------------------------------


def test_skops_scores_equal_predict_proba(tmp_path, pipe, holdout):
    sio.dump(pipe, tmp_path / "model.skops")
    model = load_model("model.skops", base_dir=tmp_path)
    assert model.kind == "skops"
    assert model.sha256 == hashlib.sha256((tmp_path / "model.skops").read_bytes()).hexdigest()
    np.testing.assert_allclose(model.scores(holdout), _raw(pipe, holdout), rtol=0, atol=1e-9)
    assert model.describe()["trusted_types"] == []


def test_skops_untrusted_type_refused_then_trusted(tmp_path, data, holdout):
    X, y = data
    num = ["income", "age", "tenure"]
    est = make_pipeline(FunctionTransformer(operator.neg), LogisticRegression()).fit(X[num], y)
    sio.dump(est, tmp_path / "neg.skops")
    untrusted = sio.get_untrusted_types(file=tmp_path / "neg.skops")
    assert untrusted  # the reference: skops itself flags the type
    with pytest.raises(TrustError) as info:
        load_model("neg.skops", base_dir=tmp_path)
    msg = str(info.value)
    for t in untrusted:
        assert t in msg
    assert "trusted_types = [" in msg and "--trust-type" in msg
    model = load_model("neg.skops", base_dir=tmp_path, trusted_types=untrusted)
    assert model.describe()["trusted_types"] == sorted(untrusted)
    np.testing.assert_allclose(model.scores(holdout), est.predict_proba(holdout[num])[:, 1],
                               rtol=0, atol=1e-9)


# --------------------------------------------------------------------------------------------
# LightGBM
# --------------------------------------------------------------------------------------------


def _lgb_reference(booster, frame):
    """LightGBM's own pandas path, with the training categories in the training order."""
    ref = frame[booster.feature_name()].copy()
    ref["region"] = pd.Categorical(ref["region"].astype(object), categories=REGIONS)
    return booster.predict(ref)


def _lgb_reference_own_levels(booster, frame):
    """LightGBM's pandas path given the holdout's own levels: it re-maps them itself."""
    ref = frame[booster.feature_name()].copy()
    ref["region"] = pd.Categorical(ref["region"].astype(object))
    return booster.predict(ref)


@pytest.mark.parametrize("name", ["model.txt", "model.lgb", "model.trees"])
def test_lightgbm_scores_equal_booster_predict(tmp_path, booster, holdout, name):
    booster.save_model(tmp_path / name)
    model = load_model(name, base_dir=tmp_path)
    assert model.kind == "lightgbm"
    assert model.sha256 == hashlib.sha256((tmp_path / name).read_bytes()).hexdigest()
    assert model.feature_names == tuple(booster.feature_name())
    np.testing.assert_allclose(model.scores(holdout), _lgb_reference(booster, holdout),
                               rtol=0, atol=1e-12)
    assert model.describe()["objective"].startswith("binary")


def test_lightgbm_categories_come_from_the_model_file(tmp_path, booster):
    booster.save_model(tmp_path / "m.txt")
    model = load_model(tmp_path / "m.txt")
    assert model.categories == {"region": tuple(booster.pandas_categorical[0])}
    assert model.categories["region"] == tuple(REGIONS)


def test_lightgbm_holdout_lacking_a_level_and_shuffled_scores_as_trained(
        tmp_path, booster, holdout):
    booster.save_model(tmp_path / "m.txt")
    model = load_model(tmp_path / "m.txt")
    rng = np.random.default_rng(3)
    lacking = holdout[holdout["region"] != "north"]
    lacking = lacking.iloc[rng.permutation(len(lacking))]
    expected = _lgb_reference(booster, lacking)
    # as plain strings (re-coding from the holdout would give south=2, not 1)
    np.testing.assert_allclose(model.scores(lacking), expected, rtol=0, atol=1e-12)
    # as a pandas Categorical whose levels are the holdout's own, in another order
    recoded = lacking.copy()
    recoded["region"] = pd.Categorical(recoded["region"], categories=["west", "south", "east"])
    np.testing.assert_allclose(model.scores(recoded), expected, rtol=0, atol=1e-12)
    # naive re-coding from the holdout does change the scores: the check above can fail
    naive = lacking[booster.feature_name()].copy()
    naive["region"] = pd.Categorical(naive["region"]).codes.astype(float)
    assert np.abs(booster.predict(naive.to_numpy(float)) - expected).max() > 1e-6


def test_lightgbm_unseen_level_is_missing(tmp_path, booster, holdout):
    booster.save_model(tmp_path / "m.txt")
    model = load_model(tmp_path / "m.txt", allow_unseen=True)
    odd = holdout.copy()
    odd.loc[odd.index[:10], "region"] = "atlantis"
    # reference: LightGBM's pandas path maps a level outside the training categories to NaN
    np.testing.assert_allclose(model.scores(odd), _lgb_reference_own_levels(booster, odd),
                               rtol=0, atol=1e-12)
    nan_frame = odd[booster.feature_name()].copy()
    nan_frame["region"] = nan_frame["region"].map({r: i for i, r in enumerate(REGIONS)})
    assert nan_frame["region"].isna().sum() == 10
    np.testing.assert_allclose(model.scores(odd), booster.predict(nan_frame.to_numpy(float)),
                               rtol=0, atol=1e-12)
    assert model.describe()["unseen_values"] == {"region": 10}  # the 10 rows planted above


def test_lightgbm_raw_objective_is_described(tmp_path, data):
    X, y = data
    num = ["income", "age"]
    params = {"objective": "regression", "verbose": -1, "num_threads": 1}
    # fitted to 0/1 labels, a regression tree's output stays inside [0, 1] here
    reg = lightgbm.train(params, lightgbm.Dataset(X[num], y.astype(float)), num_boost_round=5)
    reg.save_model(tmp_path / "reg.txt")
    model = load_model(tmp_path / "reg.txt")
    assert "not a binary-class probability" in model.describe()["score"]
    np.testing.assert_allclose(model.scores(X), reg.predict(X[num]), rtol=0, atol=1e-12)
    # fitted to 0/3 labels, it leaves [0, 1] for every row, which must be refused
    big = lightgbm.train(params, lightgbm.Dataset(X[num], 3.0 * y), num_boost_round=5)
    assert reg.predict(X[num]).max() <= 1 < big.predict(X[num]).min()
    big.save_model(tmp_path / "big.txt")
    with pytest.raises(ModelError, match=r"rows 0–399: 400 scores lie outside \[0, 1\] "
                                         r"\(first at row 0"):
        load_model(tmp_path / "big.txt").scores(X)


def test_lightgbm_text_in_numeric_column(tmp_path, booster, holdout):
    booster.save_model(tmp_path / "m.txt")
    bad = holdout.astype({"age": object})
    bad.loc[bad.index[5], "age"] = "forty"
    with pytest.raises(ModelError, match=r"rows 0–249: column `age`.*'forty'"):
        load_model(tmp_path / "m.txt").scores(bad)


def test_text_file_that_is_not_lightgbm(tmp_path):
    (tmp_path / "notes.txt").write_text("hello\n")
    with pytest.raises(ModelError, match="not a LightGBM model file"):
        load_model("notes.txt", base_dir=tmp_path)


# --------------------------------------------------------------------------------------------
# ONNX
# --------------------------------------------------------------------------------------------


def _onnx_pipeline(pipe, tmp_path, zipmap):
    pytest.importorskip("onnxruntime")
    pytest.importorskip("skl2onnx")
    from skl2onnx import convert_sklearn
    from skl2onnx.common.data_types import FloatTensorType, StringTensorType

    types = [(c, StringTensorType([None, 1]) if c == "region" else FloatTensorType([None, 1]))
             for c in pipe.feature_names_in_]
    onx = convert_sklearn(pipe, initial_types=types,
                          options={id(pipe.named_steps["clf"]): {"zipmap": zipmap}})
    path = tmp_path / f"model-{zipmap}.onnx"
    path.write_bytes(onx.SerializeToString())
    return path


@pytest.mark.parametrize("zipmap", [True, False])
def test_onnx_per_column_inputs(tmp_path, pipe, holdout, zipmap):
    ort = pytest.importorskip("onnxruntime")
    path = _onnx_pipeline(pipe, tmp_path, zipmap)
    model = load_model(path.name, base_dir=tmp_path)
    assert model.kind == "onnx" and model.feature_names == tuple(pipe.feature_names_in_)
    assert model.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    sess = ort.InferenceSession(str(path), providers=["CPUExecutionProvider"])
    feed = {c: (holdout[[c]].to_numpy().astype(str) if c == "region"
                else holdout[[c]].to_numpy(np.float32)) for c in pipe.feature_names_in_}
    out = sess.run(None, feed)[1]
    ref = np.array([d[1] for d in out]) if zipmap else out[:, 1]
    got = model.scores(holdout)
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-5)
    np.testing.assert_allclose(got, _raw(pipe, holdout), rtol=0, atol=1e-5)


def test_onnx_single_tensor_input(tmp_path, data, holdout):
    ort = pytest.importorskip("onnxruntime")
    pytest.importorskip("skl2onnx")
    from skl2onnx import convert_sklearn
    from skl2onnx.common.data_types import FloatTensorType

    X, y = data
    num = ["income", "age", "tenure"]
    lr = LogisticRegression().fit(X[num].to_numpy(), y)
    onx = convert_sklearn(lr, initial_types=[("input", FloatTensorType([None, 3]))])
    (tmp_path / "lr.onnx").write_bytes(onx.SerializeToString())
    model = load_model("lr.onnx", base_dir=tmp_path, feature_names=num)
    sess = ort.InferenceSession(str(tmp_path / "lr.onnx"), providers=["CPUExecutionProvider"])
    ref = np.array([d[1] for d in sess.run(None, {"input": holdout[num].to_numpy(np.float32)})[1]])
    np.testing.assert_allclose(model.scores(holdout), ref, rtol=0, atol=1e-5)
    # no names: the whole frame must have exactly the tensor's width
    unnamed = load_model("lr.onnx", base_dir=tmp_path)
    np.testing.assert_allclose(unnamed.scores(holdout[num]), ref, rtol=0, atol=1e-5)
    with pytest.raises(ModelError, match="takes 3 input columns.*give `feature_names`"):
        unnamed.scores(holdout)


def test_onnx_without_onnxruntime(tmp_path, monkeypatch):
    (tmp_path / "m.onnx").write_bytes(b"\x08\x07")
    monkeypatch.setitem(sys.modules, "onnxruntime", None)  # makes `import onnxruntime` fail
    with pytest.raises(ModelError, match=r"pip install 'probe\[onnx\]'"):
        # in this process: the monkeypatched import does not reach a child
        load_model("m.onnx", base_dir=tmp_path, isolate=False)


# --------------------------------------------------------------------------------------------
# py:, in-memory objects, score normalisation
# --------------------------------------------------------------------------------------------


def _formula(frame):
    """The closed-form scorer the py/cmd/http tests implement independently."""
    return expit(0.05 * (frame["income"].to_numpy(float) - 50) - 0.02 * frame["tenure"])


SCORER_PY = """
import numpy as np

def score(frame):
    z = 0.05 * (frame["income"].to_numpy(float) - 50) - 0.02 * frame["tenure"].to_numpy(float)
    return 1.0 / (1.0 + np.exp(-z))

class Scorer:
    def predict_proba(self, X):
        p = score(X)
        return np.column_stack([1 - p, p])

model = Scorer()

def make_model():
    return Scorer()
"""


def test_py_file_function_and_object(tmp_path, holdout):
    (tmp_path / "scorer.py").write_text(SCORER_PY)
    fn = load_model("py:scorer.py:score", base_dir=tmp_path, feature_names=["income", "tenure"])
    assert fn.kind == "python" and fn.feature_names == ("income", "tenure")
    assert fn.sha256 == hashlib.sha256((tmp_path / "scorer.py").read_bytes()).hexdigest()
    np.testing.assert_allclose(fn.scores(holdout), _formula(holdout), rtol=0, atol=1e-12)
    obj = load_model("py:scorer.py:model", base_dir=tmp_path)
    assert obj.feature_names is None  # the whole frame is passed
    np.testing.assert_allclose(obj.scores(holdout), _formula(holdout), rtol=0, atol=1e-12)


def test_py_dotted_module_from_base_dir(tmp_path, holdout):
    name = f"probe_test_scorer_{tmp_path.name.replace('-', '_')}"
    (tmp_path / f"{name}.py").write_text(SCORER_PY)
    try:
        model = load_model(f"py:{name}:model", base_dir=tmp_path)
        np.testing.assert_allclose(model.scores(holdout), _formula(holdout), rtol=0, atol=1e-12)
        assert str(tmp_path) not in sys.path
    finally:
        sys.modules.pop(name, None)


def test_py_refuses_factories_classes_and_missing_names(tmp_path):
    (tmp_path / "scorer.py").write_text(SCORER_PY)
    with pytest.raises(ModelError, match="no arguments.*does not guess"):
        load_model("py:scorer.py:make_model", base_dir=tmp_path)
    with pytest.raises(ModelError, match="is a class"):
        load_model("py:scorer.py:Scorer", base_dir=tmp_path)
    with pytest.raises(ModelError, match=r"no attribute `scroe`.*`score`"):
        load_model("py:scorer.py:scroe", base_dir=tmp_path)
    with pytest.raises(ModelError, match="not found"):
        load_model("py:missing.py:score", base_dir=tmp_path)
    with pytest.raises(ModelError, match="py:MODULE:ATTR"):
        load_model("py:scorer", base_dir=tmp_path)


def test_object_estimator_and_positive_coercion(pipe, holdout):
    p = pipe.predict_proba(holdout)
    model = load_model(pipe)
    assert model.kind == "object" and model.sha256 is None
    np.testing.assert_allclose(model.scores(holdout), p[:, 1], rtol=0, atol=1e-12)
    for positive in (1, "1", True, 1.0, np.int64(1)):
        np.testing.assert_allclose(load_model(pipe, positive=positive).scores(holdout), p[:, 1],
                                   rtol=0, atol=1e-12)
    for positive in (0, "0", False):
        np.testing.assert_allclose(load_model(pipe, positive=positive).scores(holdout), p[:, 0],
                                   rtol=0, atol=1e-12)
    with pytest.raises(ModelError, match="the label's positive value 'yes' is not one of the classes"):
        load_model(pipe, positive="yes")


def test_string_classes(data, holdout):
    X, y = data
    num = ["income", "age"]
    lr = LogisticRegression().fit(X[num], np.where(y == 1, "approve", "deny"))
    p = lr.predict_proba(holdout[num])
    # classes_ are sorted: ["approve", "deny"]; default is the last, positive picks by name
    np.testing.assert_allclose(load_model(lr).scores(holdout), p[:, 1], rtol=0, atol=1e-12)
    np.testing.assert_allclose(load_model(lr, positive="approve").scores(holdout), p[:, 0],
                               rtol=0, atol=1e-12)


def test_decision_function_only_gets_a_sigmoid(data, holdout):
    X, y = data
    num = ["income", "age", "tenure"]
    svm = LinearSVC().fit(X[num], y)
    model = load_model(svm)
    margin = svm.decision_function(holdout[num])
    np.testing.assert_allclose(model.scores(holdout), expit(margin), rtol=0, atol=1e-12)
    np.testing.assert_array_equal(model.scores(holdout) >= 0.5, margin >= 0)
    assert "sigmoid" in model.describe()["score"]
    np.testing.assert_allclose(load_model(svm, positive=0).scores(holdout), expit(-margin),
                               rtol=0, atol=1e-12)


class _LabelsOnly:
    classes_ = np.array(["no", "yes"])

    def predict(self, X):
        return np.where(X["income"].to_numpy() > 50, "yes", "no")


def test_predict_only_gives_hard_labels(holdout):
    model = load_model(_LabelsOnly())
    expected = (holdout["income"].to_numpy() > 50).astype(float)
    np.testing.assert_array_equal(model.scores(holdout), expected)
    assert "hard labels" in model.describe()["score"]
    np.testing.assert_array_equal(load_model(_LabelsOnly(), positive="no").scores(holdout),
                                  1 - expected)


def test_array_fitted_model_gets_an_array(data, holdout):
    X, y = data
    num = ["income", "age", "tenure"]
    lr = LogisticRegression().fit(X[num].to_numpy(), y)
    model = load_model(lr, feature_names=num)
    # passing a frame would make scikit-learn warn (and warnings are errors here)
    expected = lr.predict_proba(holdout[num].to_numpy())[:, 1]
    np.testing.assert_allclose(model.scores(holdout), expected, rtol=0, atol=1e-12)
    with pytest.raises(ModelError, match="takes 3 input columns.*lists 2"):
        load_model(lr, feature_names=["income", "age"])


def test_feature_names_must_match_the_model(pipe):
    with pytest.raises(ModelError, match="also reads `tenure`"):
        load_model(pipe, feature_names=["income", "age", "region"])


# --------------------------------------------------------------------------------------------
# cmd:
# --------------------------------------------------------------------------------------------


SCORER_CMD = """
import csv, math, sys, time

rows = list(csv.DictReader(sys.stdin))
out = []
for row in rows:
    if row["flag"] == "crash":
        sys.stderr.write("starting\\nscorer crashed: bad row\\n")
        sys.exit(3)
    if row["flag"] == "sleep":
        time.sleep(5)
    if row["flag"] == "text":
        out.append("n/a")
        continue
    z = 0.05 * (float(row["income"]) - 50) - 0.02 * float(row["tenure"])
    out.append(repr(1.0 / (1.0 + math.exp(-z))))
if any(r["flag"] == "short" for r in rows):
    out = out[:-1]
print("\\n".join(out))
"""


@pytest.fixture
def cmd_dir(tmp_path):
    (tmp_path / "score.py").write_text(SCORER_CMD)
    return tmp_path


def _cmd(flag_rows=(), flag="", n=250):
    X, _ = _make_frame(n, seed=9)
    X["flag"] = "ok"
    X.loc[list(flag_rows), "flag"] = flag
    return X


def _cmd_spec():
    return f'cmd:"{sys.executable}" score.py'


def test_cmd_scores_a_real_subprocess(cmd_dir):
    X = _cmd()
    calls = []
    model = load_model(_cmd_spec(), base_dir=cmd_dir, batch_size=100,
                       feature_names=["income", "tenure", "flag"])
    got = model.scores(X, progress=lambda done, total: calls.append((done, total)))
    assert model.kind == "command" and model.sha256 is None
    np.testing.assert_allclose(got, _formula(X), rtol=0, atol=1e-12)
    assert calls == [(100, 250), (200, 250), (250, 250)]


@pytest.mark.parametrize(
    ("flag", "pattern"),
    [
        ("crash", r"failed on rows 100–199: the command exited with code 3: "
                  r"scorer crashed: bad row$"),
        ("short", r"failed on rows 100–199: the command printed 99 lines for 100 rows"),
        ("text", r"failed on rows 100–199: line 31 of the command's output is not a number"),
    ],
)
def test_cmd_failing_batch_names_the_rows(cmd_dir, flag, pattern):
    X = _cmd(flag_rows=[130], flag=flag)
    model = load_model(_cmd_spec(), base_dir=cmd_dir, batch_size=100)
    with pytest.raises(ModelError, match=pattern) as info:
        model.scores(X)
    assert str(info.value).startswith(f"model `{_cmd_spec()}`")


def test_cmd_timeout(cmd_dir):
    X = _cmd(flag_rows=[3], flag="sleep", n=10)
    model = load_model(_cmd_spec(), base_dir=cmd_dir, timeout=0.5)
    with pytest.raises(ModelError, match=r"rows 0–9: the command did not finish within 0.5 s"):
        model.scores(X)


def test_cmd_program_not_found(tmp_path):
    with pytest.raises(ModelError, match="program `no-such-scorer-xyz` was not found"):
        load_model("cmd:no-such-scorer-xyz --fast", base_dir=tmp_path)


# --------------------------------------------------------------------------------------------
# http(s)://
# --------------------------------------------------------------------------------------------


class _Handler(http.server.BaseHTTPRequestHandler):
    def log_message(self, *args):  # keep the test output clean
        pass

    def _send(self, code, body: bytes):
        try:
            self.send_response(code)
            self.send_header("Content-Type", "application/json")
            self.send_header("Content-Length", str(len(body)))
            self.end_headers()
            self.wfile.write(body)
        except OSError:  # the client gave up (timeout test)
            pass

    def do_POST(self):
        payload = json.loads(self.rfile.read(int(self.headers["Content-Length"])))
        records = payload["records"]
        server = self.server
        with server.lock:
            server.requests.append(records)
        if self.path == "/fail":
            return self._send(500, b"model exploded\nsecond line")
        if self.path == "/badjson":
            return self._send(200, b"<html>oops</html>")
        if self.path == "/slow":
            time.sleep(1.0)
            return self._send(200, b"[]")
        scores = []
        for r in records:
            income = r["income"] if r["income"] is not None else 50.0
            z = 0.05 * (income - 50) - 0.02 * r["tenure"]
            scores.append(1.0 / (1.0 + np.exp(-z)))
        body = {"scores": scores} if self.path == "/score" else scores
        return self._send(200, json.dumps(body).encode())


@pytest.fixture
def server():
    srv = http.server.ThreadingHTTPServer(("127.0.0.1", 0), _Handler)
    srv.requests = []
    srv.lock = threading.Lock()
    thread = threading.Thread(target=srv.serve_forever, daemon=True)
    thread.start()
    try:
        yield srv
    finally:
        srv.shutdown()
        srv.server_close()
        thread.join(timeout=5)


@pytest.mark.parametrize("path", ["/score", "/list"])
def test_http_batches_and_scores(server, path):
    X, _ = _make_frame(250, seed=10)
    X.loc[[5, 120], "income"] = np.nan  # NaN travels as null
    url = f"http://127.0.0.1:{server.server_port}{path}"
    model = load_model(url, batch_size=100, feature_names=["income", "tenure", "region"])
    got = model.scores(X)
    expected = _formula(X.fillna({"income": 50.0}))
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-12)
    assert [len(r) for r in server.requests] == [100, 100, 50]  # ceil(250 / 100) requests
    first = server.requests[0]
    assert first[5]["income"] is None and set(first[0]) == {"income", "tenure", "region"}
    assert isinstance(first[0]["tenure"], int)


def test_http_error_response(server):
    X, _ = _make_frame(150, seed=11)
    model = load_model(f"http://127.0.0.1:{server.server_port}/fail", batch_size=100)
    pattern = r"failed on rows 0–99: HTTP 500 Internal Server Error: model exploded$"
    with pytest.raises(ModelError, match=pattern):
        model.scores(X)


def test_http_bad_json_and_timeout(server):
    X, _ = _make_frame(20, seed=12)
    port = server.server_port
    with pytest.raises(ModelError, match="rows 0–19: the response is not JSON"):
        load_model(f"http://127.0.0.1:{port}/badjson").scores(X)
    with pytest.raises(ModelError, match=r"rows 0–19: no answer within 0.2 s"):
        load_model(f"http://127.0.0.1:{port}/slow", timeout=0.2).scores(X)


# --------------------------------------------------------------------------------------------
# column:
# --------------------------------------------------------------------------------------------


def test_column_scores(holdout):
    frame = holdout.assign(score=np.linspace(0, 1, len(holdout)))
    model = load_model("column:score")
    assert model.kind == "column" and model.feature_names is None
    np.testing.assert_array_equal(model.scores(frame), frame["score"].to_numpy())
    with pytest.raises(ModelError, match=r"lacks \(did you mean `score`\?\)"):
        load_model("column:scores").scores(frame)
    out_of_range = frame.assign(score=frame["score"] * 2)
    with pytest.raises(ModelError, match=r"outside \[0, 1\] \(first at row 125: 1\.0"):
        load_model("column:score").scores(out_of_range)


# --------------------------------------------------------------------------------------------
# bad inputs
# --------------------------------------------------------------------------------------------


def test_missing_model_file_suggests_close_names(tmp_path):
    (tmp_path / "model.joblib").write_bytes(b"x")
    with pytest.raises(ModelError, match=r"model file `modle.joblib` not found.*`model.joblib`"):
        load_model("modle.joblib", base_dir=tmp_path)


def test_unknown_extension_lists_the_specs(tmp_path):
    (tmp_path / "model.h5").write_bytes(b"\x89HDF")
    with pytest.raises(ModelError, match=r"\.h5.*model\.skops.*cmd:COMMAND.*column:NAME"):
        load_model("model.h5", base_dir=tmp_path)


def test_missing_feature_column(pipe, holdout):
    renamed = holdout.rename(columns={"income": "incme"})
    with pytest.raises(ModelError) as info:
        load_model(pipe).scores(renamed)
    msg = str(info.value)
    assert "`income`" in msg and "did you mean `incme`" in msg and msg.startswith("model `")


def test_nan_scores_are_counted(holdout):
    calls = []

    def scorer(frame):
        calls.append(len(frame))
        out = np.full(len(frame), 0.5)
        if len(calls) == 2:  # only the second batch goes wrong
            out[[17, 40]] = np.nan
        return out

    with pytest.raises(ModelError, match=r"rows 100–199: 2 of 100 scores are NaN or infinite "
                                         r"\(first at row 117\)"):
        load_model(scorer, batch_size=100).scores(holdout)


def test_wrong_output_length(holdout):
    with pytest.raises(ModelError, match=r"rows 0–249: the model returned 249 scores for 250"):
        load_model(lambda f: np.full(len(f) - 1, 0.5)).scores(holdout)


def test_model_that_raises_names_the_batch(holdout):
    def scorer(frame):
        if frame.index[0] != holdout.index[0]:
            raise ValueError("the second batch is cursed\nmore detail")
        return np.full(len(frame), 0.5)

    model = load_model(scorer, batch_size=100)
    with pytest.raises(ModelError) as info:
        model.scores(holdout)
    assert str(info.value) == ("model `object:function` failed on rows 100–199: "
                               "ValueError: the second batch is cursed")


def test_bad_options():
    with pytest.raises(PlanError, match="batch_size"):
        load_model("column:x", batch_size=0)
    with pytest.raises(PlanError, match="timeout"):
        load_model("column:x", timeout=-1)
    with pytest.raises(PlanError, match="trusted_types"):
        load_model("column:x", trusted_types="numpy.foo")
    with pytest.raises(DataError, match="DataFrame"):
        load_model("column:x").scores(np.zeros((3, 2)))


# --------------------------------------------------------------------------------------------
# progress, immutability, describe
# --------------------------------------------------------------------------------------------


def test_progress_is_increasing_and_ends_at_total(tmp_path, booster, holdout):
    booster.save_model(tmp_path / "m.txt")
    calls = []
    load_model(tmp_path / "m.txt", batch_size=60).scores(
        holdout, progress=lambda done, total: calls.append((done, total)))
    assert calls == [(60, 250), (120, 250), (180, 250), (240, 250), (250, 250)]


def test_input_frame_is_never_modified(tmp_path, pipe, booster, holdout):
    booster.save_model(tmp_path / "m.txt")
    frame = holdout.copy()
    frame["region"] = pd.Categorical(frame["region"], categories=["west", "east", "south",
                                                                  "north"])
    before = frame.copy()

    def vandal(X):
        X["income"] = 0.0  # a model that writes into its input
        X.iloc[0, 0] = "zzz"
        return np.full(len(X), 0.5)

    for model in (load_model(pipe), load_model(tmp_path / "m.txt", batch_size=100),
                  load_model(vandal, batch_size=100)):
        model.scores(frame)
        pd.testing.assert_frame_equal(frame, before)


def test_model_is_frozen_and_describe_is_json(tmp_path, booster):
    booster.save_model(tmp_path / "m.txt")
    model = load_model(tmp_path / "m.txt")
    assert isinstance(model, Model)
    with pytest.raises(AttributeError):
        model.spec = "other"
    with pytest.raises(AttributeError):
        model._kind = "other"
    model.categories["region"] = ()  # a copy: the model keeps its own
    assert model.categories["region"] == tuple(REGIONS)
    d = json.loads(json.dumps(model.describe()))
    assert d["kind"] == "lightgbm"
    assert d["sha256"] == hashlib.sha256((tmp_path / "m.txt").read_bytes()).hexdigest()
    assert d["feature_names"] == list(booster.feature_name())


# --------------------------------------------------------------------------------------------
# review fixes: positive class 0, levels from another vocabulary, pandas answers, sys.exit,
# empty files
# --------------------------------------------------------------------------------------------


def test_lightgbm_positive_class_zero_is_the_complement(tmp_path, booster, holdout):
    booster.save_model(tmp_path / "m.txt")
    p1 = _lgb_reference(booster, holdout)  # LightGBM's own P(label == 1)
    np.testing.assert_allclose(load_model("m.txt", base_dir=tmp_path, positive=0).scores(holdout),
                               1.0 - p1, rtol=0, atol=1e-12)
    np.testing.assert_allclose(load_model("m.txt", base_dir=tmp_path, positive=1).scores(holdout),
                               p1, rtol=0, atol=1e-12)


def test_lightgbm_column_with_none_of_the_trained_levels_is_refused(tmp_path, booster, holdout):
    booster.save_model(tmp_path / "m.txt")
    shouted = holdout.assign(region=holdout["region"].str.upper())  # NORTH, SOUTH: another vocabulary
    model = load_model("m.txt", base_dir=tmp_path)
    with pytest.raises(DataError, match=r"column `region` has 250 rows \(100.0 %\) with values "
                                        r"the model `m.txt` never saw"):
        model.scores(shouted)
    with pytest.raises(ModelError, match=r"column `region` holds none of the levels .* 'north'"):
        load_model("m.txt", base_dir=tmp_path, allow_unseen=True).scores(shouted)


def test_a_series_answer_is_aligned_to_the_rows_given(tmp_path):
    (tmp_path / "sorter.py").write_text(
        "def score(f):\n    return (f['x'] / 10).sort_values(ascending=False)\n")
    frame = pd.DataFrame({"x": [1.0, 5.0, 3.0]})
    got = load_model("py:sorter.py:score", base_dir=tmp_path).scores(frame)
    np.testing.assert_allclose(got, [0.1, 0.5, 0.3])  # by row, not by the order returned


def test_sys_exit_and_empty_files_are_one_line_errors(tmp_path):
    (tmp_path / "quits.py").write_text("import sys\ndef score(f):\n    sys.exit(2)\n")
    with pytest.raises(ModelError, match="failed on rows 0–2: SystemExit"):
        load_model("py:quits.py:score", base_dir=tmp_path).scores(pd.DataFrame({"x": [1, 2, 3]}))
    (tmp_path / "leaves.py").write_text("import sys\nsys.exit(1)\n")
    with pytest.raises(ModelError, match="importing `leaves.py` failed: SystemExit"):
        load_model("py:leaves.py:score", base_dir=tmp_path)
    for name in ("empty.joblib", "empty.skops", "empty.txt"):
        (tmp_path / name).write_bytes(b"")
        with pytest.raises(ModelError, match="is empty"):
            load_model(name, base_dir=tmp_path, trust_pickle=True)


def test_an_array_model_that_writes_into_its_input_leaves_the_frame_alone():
    class Scribbler:  # fitted on an array: it is handed a numpy matrix, and writes into it
        n_features_in_ = 2
        classes_ = np.array([0, 1])

        def predict_proba(self, X):
            X[:] = 0.0
            return np.column_stack([np.full(len(X), 0.6), np.full(len(X), 0.4)])

    frame = pd.DataFrame({"a": [1.0, 2.0, 3.0], "b": [4.0, 5.0, 6.0]})
    before = frame.copy()
    np.testing.assert_allclose(load_model(Scribbler()).scores(frame), [0.4, 0.4, 0.4])
    pd.testing.assert_frame_equal(frame, before)
