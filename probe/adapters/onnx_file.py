"""Kind ``onnx``: ONNX files, run with onnxruntime on the CPU (``pip install 'probe[onnx]'``).

A graph with one tensor input gets the selected columns stacked in order; a graph with one input
per column gets each column under its input's name (those names are the model's inputs). The
score is the probability output's column of the positive class, matched to the class labels the
graph records when the ``onnx`` package can read them, else to ``positive`` as a column number.
"""

from __future__ import annotations

import hashlib
from typing import Any

import numpy as np
import pandas as pd

from probe.errors import ModelError

from .inputs import check_count, numeric, reconcile_names
from .labels import class_index, index_from_positive
from .messages import cause
from .model import BatchFailure, Model
from .options import Options

__all__ = ["load_onnx"]


def load_onnx(data: bytes, text: str, opts: Options) -> Model:
    """A Model from the bytes of an ONNX file, run by onnxruntime on the CPU."""
    try:
        import onnxruntime as ort
    except ImportError as exc:
        raise ModelError(
            f"model `{text}` is an ONNX file, which needs onnxruntime: pip install 'probe[onnx]'"
        ) from exc
    sha = hashlib.sha256(data).hexdigest()
    try:
        session = ort.InferenceSession(data, providers=["CPUExecutionProvider"])
    except Exception as exc:
        raise ModelError(f"cannot load ONNX model file `{text}`: {cause(exc)}") from exc
    inputs = session.get_inputs()
    outputs = session.get_outputs()
    prob_out = _onnx_probability_output(outputs, text)
    classes = _onnx_classes(data)

    def second_dim(shape: Any) -> int | None:
        return shape[1] if len(shape) >= 2 and isinstance(shape[1], int) else None

    single = len(inputs) == 1
    width = second_dim(inputs[0].shape) if single else None
    tensor_mode = single and (
        width is None or width > 1 or (opts.feature_names is not None and width == 1)
    )
    n_inputs = None
    if tensor_mode:
        fnames = opts.feature_names
        check_count(fnames, width, text)
        if fnames is None:
            n_inputs = width
        inp = inputs[0]
        np_type = _onnx_numpy_type(inp.type, text)

        def feed(batch: pd.DataFrame) -> dict[str, np.ndarray]:
            cols = [_onnx_column(batch[c], np_type, str(c)) for c in batch.columns]
            return {inp.name: np.column_stack(cols) if cols else np.empty((len(batch), 0))}
        layout = f"one tensor input `{inp.name}`"
    else:
        fnames = reconcile_names(tuple(i.name for i in inputs), opts.feature_names, text)
        specs = [(i.name, _onnx_numpy_type(i.type, text), len(i.shape) >= 2) for i in inputs]

        def feed(batch: pd.DataFrame) -> dict[str, np.ndarray]:
            out = {}
            for name, np_type, two_d in specs:
                v = _onnx_column(batch[name], np_type, name)
                out[name] = v.reshape(-1, 1) if two_d else v
            return out
        layout = "one input per column"

    def score(batch: pd.DataFrame) -> np.ndarray:
        result = session.run([prob_out.name], feed(batch))[0]
        if isinstance(result, list):  # zipmap: a list of {class: probability}
            if not result:
                return np.empty(0)
            keys = list(result[0].keys())
            key = keys[class_index(keys, opts.positive, text)]
            return np.array([row[key] for row in result], dtype=np.float64)
        result = np.asarray(result, dtype=np.float64)
        if result.ndim == 2 and result.shape[1] > 1:
            known = classes if classes is not None and len(classes) == result.shape[1] else None
            if known is not None:
                idx = class_index(known, opts.positive, text)
            else:
                idx = index_from_positive(opts.positive, result.shape[1], text)
            return result[:, idx]
        return result

    cls_text = "" if classes is None else f", classes {list(classes)}"
    return Model(
        spec=text, kind="onnx", sha256=sha, feature_names=fnames, categories={},
        score_batch=score,
        transform=f"ONNX output `{prob_out.name}`, positive-class column ({layout}{cls_text})",
        probability=True,
        details={"classes": None if classes is None else list(classes),
                 "positive": opts.positive},
        batch_size=opts.batch_size, allow_unseen=opts.allow_unseen, n_inputs=n_inputs,
    )


def _onnx_probability_output(outputs: list, text: str) -> Any:
    for o in outputs:
        if "prob" in o.name.lower():
            return o
    for o in outputs:
        if o.type.startswith("seq(map") or o.type in ("tensor(float)", "tensor(double)"):
            return o
    raise ModelError(
        f"model `{text}` has no probability output (outputs: "
        f"{', '.join(o.name for o in outputs)})"
    )


def _onnx_classes(data: bytes) -> list | None:
    try:
        import onnx
    except ImportError:
        return None
    try:
        graph = onnx.load_from_string(data).graph
    except Exception:
        return None
    for node in graph.node:
        for attr in node.attribute:
            if attr.name in ("classlabels_ints", "classlabels_int64s"):
                return list(attr.ints)
            if attr.name == "classlabels_strings":
                return [s.decode("utf-8") for s in attr.strings]
    return None


_ONNX_TYPES = {
    "tensor(float)": np.float32,
    "tensor(double)": np.float64,
    "tensor(int64)": np.int64,
    "tensor(int32)": np.int32,
    "tensor(bool)": np.bool_,
    "tensor(string)": object,
}


def _onnx_numpy_type(onnx_type: str, text: str) -> Any:
    try:
        return _ONNX_TYPES[onnx_type]
    except KeyError:
        raise ModelError(f"model `{text}` has an input of type {onnx_type}, which probe cannot "
                         "fill from a data frame") from None


def _onnx_column(s: pd.Series, np_type: Any, name: str) -> np.ndarray:
    if np_type is object:
        values = s.astype(object).to_numpy()
        return np.array(["" if pd.isna(v) else str(v) for v in values], dtype=object)
    if np_type in (np.int64, np.int32, np.bool_):
        if s.isna().any():
            raise BatchFailure(f"column `{name}` has missing values, but the model's input "
                                "for it is an integer tensor")
        return numeric(s, name).astype(np_type)
    return numeric(s, name).astype(np_type)
