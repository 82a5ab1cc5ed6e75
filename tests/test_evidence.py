"""The evidence of a run is prepared once: one encoding, one scoring per model, outcomes reused."""

from pathlib import Path

import numpy as np
import pytest

import probe.pipeline as pipeline
from probe.plan import load_plan

GOLDEN = Path(__file__).parent / "golden" / "plan.toml"


def test_a_run_encodes_the_slice_columns_once(monkeypatch):
    # encode_columns ran twice per run (slices and the comparison) and again per flip breakdown
    import probe.encode

    calls = []
    real = probe.encode.encode_columns

    def counting(*args, **kwargs):
        calls.append(kwargs.get("bins"))
        return real(*args, **kwargs)

    for module in ("probe.encode", "probe.pipeline", "probe.slices.api", "probe.flips.breakdown",
                   "probe.flips.context"):
        mod = __import__(module, fromlist=["x"])
        if hasattr(mod, "encode_columns"):
            monkeypatch.setattr(mod, "encode_columns", counting)
    report = pipeline.run_plan(load_plan(GOLDEN))
    assert report["slices"] and report["comparison"] and report["flips"]
    # the one run-level encoding of the slice columns; proxies and twins encode their own features
    # with their own granularity (bins=10 / max_levels=20), never the slice columns again
    assert calls.count(5) == 1, calls


def test_outcomes_are_derived_once_and_read_only():
    ev = pipeline.prepare(load_plan(GOLDEN))
    out, base = ev.outcome("fnr")
    assert ev.outcome("fnr")[0] is out
    with pytest.raises(ValueError):
        out[0] = 1
    # brute force: FNR over the label-positive rows
    y, d = ev.y_true, ev.decision()
    assert out[base].mean() == pytest.approx(np.mean(~d[y]))
    assert ev.weights.sum() == ev.n_rows and set(ev.runs) == {"candidate", "baseline"}
