"""Isolated models: a crash, a hang, an exit or a damaged file becomes one `error:` line, exit 2,
in bounded time, with no child process left behind and the inputs untouched."""

import gc
import hashlib
import io
import os
import re
import signal
import subprocess
import sys
import textwrap
import threading
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from rich.console import Console

from probe.adapters import load_model
from probe.cli import EXIT_BAD_INPUT, main
from probe.errors import ModelError


def _servers() -> set[int]:
    """multiprocessing's long-lived helpers: the forkserver models are forked from, and its
    resource tracker. They live as long as this process, by design."""
    from multiprocessing import forkserver, resource_tracker

    pids = (forkserver._forkserver._forkserver_pid, resource_tracker._resource_tracker._pid)
    return {p for p in pids if p}


def _children() -> list[tuple[int, str]]:
    """Processes this one started, directly or through the forkserver, read from /proc (no
    psutil here), with their state (Z: a zombie)."""
    servers = _servers()
    parents, found = {os.getpid(), *servers}, []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit() or int(entry.name) in servers:
            continue
        try:
            stat = (entry / "stat").read_text()
        except OSError:
            continue
        state, ppid = stat.rsplit(")", 1)[1].split()[:2]
        if int(ppid) in parents:
            found.append((int(entry.name), state))
    return found


@pytest.fixture(autouse=True)
def no_leftover_children():
    gc.collect()
    before = _children()
    yield
    gc.collect()
    deadline = time.monotonic() + 5
    while _children() != before and time.monotonic() < deadline:
        time.sleep(0.05)
    assert _children() == before  # neither a zombie (state Z) nor a live orphan-to-be


def _digest(folder: Path) -> dict:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.iterdir()) if p.is_file()}


@pytest.fixture
def holdout(tmp_path):
    rng = np.random.default_rng(0)
    frame = pd.DataFrame({"x": rng.normal(size=300).round(3),
                          "z": rng.normal(size=300).round(3),
                          "group": rng.choice(["a", "b"], size=300),
                          "y": rng.integers(0, 2, size=300)})
    frame.to_csv(tmp_path / "h.csv", index=False)
    return tmp_path / "h.csv"


def _module(tmp_path, name, body):
    (tmp_path / f"{name}.py").write_text(textwrap.dedent(body))
    return f"py:{name}.py:score"


def _run(tmp_path, capsys, spec, *extra):
    """`probe groups` on the holdout; the exit code, the stderr lines, the seconds it took."""
    capsys.readouterr()
    before = _digest(tmp_path)
    start = time.monotonic()
    code = main(["groups", "--data", str(tmp_path / "h.csv"), "--label", "y", "--protected",
                 "group", "--model", spec, "--out", str(tmp_path / "out"), *extra],
                console=Console(file=io.StringIO(), width=120))
    took = time.monotonic() - start
    err = [ln for ln in capsys.readouterr().err.splitlines() if ln.strip()]
    after = _digest(tmp_path)
    assert all(after.get(name) == sha for name, sha in before.items())  # inputs byte-identical
    return code, err, took


def _one_error(err):
    assert len(err) == 1 and err[0].startswith("error: "), err
    assert "Traceback" not in err[0]
    return err[0]


def test_a_model_that_sleeps_while_scoring_times_out(tmp_path, holdout, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    spec = _module(tmp_path, "sleepy", """
        import time
        def score(frame):
            time.sleep(1000)
    """)
    code, err, took = _run(tmp_path, capsys, spec, "--timeout", "2")
    assert code == EXIT_BAD_INPUT and took < 15
    line = _one_error(err)
    assert re.search(r"model `py:sleepy.py:score` gave no answer within 2 s while scoring rows "
                     r"0\u2013299; raise --timeout / \[model\] timeout", line), line
    assert not (tmp_path / "out").exists()


def test_a_model_that_blocks_while_loading_times_out(tmp_path, holdout, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    spec = _module(tmp_path, "blocks", """
        import time
        time.sleep(1000)
        def score(frame):
            return frame["x"] * 0
    """)
    code, err, took = _run(tmp_path, capsys, spec, "--timeout", "2")
    assert code == EXIT_BAD_INPUT and took < 15
    assert "gave no answer within 2 s while loading" in _one_error(err)


@pytest.mark.parametrize("where", ["scoring", "loading"])
def test_a_model_that_ends_the_process_is_an_error_and_no_report(tmp_path, holdout, capsys,
                                                                   monkeypatch, where):
    monkeypatch.chdir(tmp_path)
    body = ("import os\nos._exit(0)\ndef score(frame):\n    return frame['x'] * 0\n"
            if where == "loading" else
            "import os\ndef score(frame):\n    os._exit(0)\n")
    spec = _module(tmp_path, "quitter", body)
    code, err, took = _run(tmp_path, capsys, spec)
    assert code == EXIT_BAD_INPUT and took < 30
    line = _one_error(err)
    rows = " rows 0\u2013299" if where == "scoring" else ""
    assert f"model `{spec}` exited (code 0) while {where}{rows}; a model must not end the " \
           "process" in line
    assert not (tmp_path / "out").exists()  # a CI job must not read a missing report as a pass


def test_a_native_crash_is_contained(tmp_path, holdout, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    spec = _module(tmp_path, "segv", """
        import os, signal, sys
        def score(frame):
            print("about to fail", file=sys.stderr, flush=True)
            os.kill(os.getpid(), signal.SIGSEGV)
    """)
    code, err, _ = _run(tmp_path, capsys, spec)
    assert code == EXIT_BAD_INPUT
    line = _one_error(err)
    assert f"model `{spec}` crashed (SIGSEGV) while scoring rows 0\u2013299" in line
    assert "about to fail" in line  # its last line on stderr, quoted


def test_a_python_exception_in_the_child_keeps_its_first_line(tmp_path):
    (tmp_path / "bad.py").write_text("def score(frame):\n    raise ValueError('no\\nmore')\n")
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0]})
    with load_model("py:bad.py:score", base_dir=tmp_path, batch_size=2) as model:
        assert model.isolated
        with pytest.raises(ModelError, match=r"^model `py:bad.py:score` failed on rows 0\u20131: "
                                             r"ValueError: no$"):
            model.scores(frame)


def test_the_child_prints_without_breaking_the_answers(tmp_path):
    (tmp_path / "loud.py").write_text(
        "import os, sys\nprint('loading', flush=True)\n"
        "def score(frame):\n    print('x' * 100000)\n    os.write(1, b'raw bytes on fd 1')\n"
        "    return frame['x'] / 10\n")
    frame = pd.DataFrame({"x": [1.0, 5.0, 3.0]})
    with load_model("py:loud.py:score", base_dir=tmp_path) as model:
        np.testing.assert_array_equal(model.scores(frame), [0.1, 0.5, 0.3])


def test_the_child_has_bounded_threads(tmp_path):
    (tmp_path / "env.py").write_text(
        "import os\ndef score(frame):\n"
        "    return frame['x'] * 0 + int(os.environ['OMP_NUM_THREADS']) / 10\n")
    with load_model("py:env.py:score", base_dir=tmp_path) as model:
        threads = model.scores(pd.DataFrame({"x": [0.0]}))[0] * 10
    assert 1 <= round(threads) <= 2


def test_one_child_serves_a_model_and_dies_with_it(tmp_path):
    (tmp_path / "pid.py").write_text(
        "import os\ndef score(frame):\n    return frame['x'] * 0 + os.getpid() / 1e9\n")
    frame = pd.DataFrame({"x": [0.0] * 5})
    model = load_model("py:pid.py:score", base_dir=tmp_path, batch_size=2)
    pids = {round(v * 1e9) for v in model.scores(frame)} | \
        {round(v * 1e9) for v in model.scores(frame)}
    assert len(pids) == 1 and pids.pop() in [p for p, _ in _children()]
    del model  # the fixture checks that the child is gone (killed and reaped)


def test_an_interrupted_wait_kills_the_child(tmp_path):
    (tmp_path / "slow.py").write_text("import time\ndef score(frame):\n    time.sleep(1000)\n")
    model = load_model("py:slow.py:score", base_dir=tmp_path)
    timer = threading.Timer(1.0, os.kill, (os.getpid(), signal.SIGINT))
    timer.start()
    with pytest.raises(KeyboardInterrupt):
        model.scores(pd.DataFrame({"x": [0.0]}))
    timer.join()
    assert _children() == []


def test_the_child_ends_when_its_parent_is_killed(tmp_path):
    (tmp_path / "slow.py").write_text("import time\ndef score(frame):\n    time.sleep(1000)\n")
    parent = textwrap.dedent(f"""
        import os, sys, threading, pandas as pd
        sys.path.insert(0, {str(Path(__file__).resolve().parent.parent)!r})
        from probe.adapters import load_model
        m = load_model("py:slow.py:score", base_dir={str(tmp_path)!r})
        print(m._worker.pid, flush=True)
        threading.Timer(0.5, os.kill, (os.getpid(), 9)).start()
        m.scores(pd.DataFrame({{"x": [0.0]}}))
    """)
    proc = subprocess.run([sys.executable, "-c", parent], capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == -signal.SIGKILL
    child = int(proc.stdout.split()[0])
    deadline = time.monotonic() + 5
    while Path(f"/proc/{child}").exists() and time.monotonic() < deadline:
        time.sleep(0.05)
    assert not Path(f"/proc/{child}").exists()


def test_in_process_kinds_are_not_isolated(tmp_path):
    (tmp_path / "f.py").write_text("def score(frame):\n    return frame['x'] * 0\n")
    assert not load_model("column:x").isolated
    assert not load_model(lambda frame: frame["x"] * 0).isolated
    model = load_model("py:f.py:score", base_dir=tmp_path, isolate=False)
    assert not model.isolated and model.describe()["isolated"] is False
    assert _children() == []


# --------------------------------------------------------------------------------------------
# damaged LightGBM files
# --------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def lgb_text(tmp_path_factory):
    import lightgbm

    rng = np.random.default_rng(1)
    X = pd.DataFrame({"x": rng.normal(size=400), "z": rng.normal(size=400)})
    y = (X["x"] + rng.normal(size=400) > 0).astype(int)
    booster = lightgbm.train({"objective": "binary", "verbose": -1, "num_leaves": 4,
                              "num_threads": 1}, lightgbm.Dataset(X, y), num_boost_round=6)
    return booster.model_to_string()


def _damaged(text: str, how: str) -> str:
    starts = [m.start() + 1 for m in re.finditer(r"\nTree=", text)]
    end = text.index("end of trees")
    if how.endswith("%"):
        return text[:int(len(text) * int(how[:-1]) / 100)]
    if how == "at a tree boundary":
        return text[:starts[3]]
    if how == "trees removed, trailer kept":
        return text[:starts[2]] + text[end:]
    if how == "a tree removed from the middle":
        return text[:starts[2]] + text[starts[3]:]
    raise AssertionError(how)


@pytest.mark.parametrize("how", ["5%", "30%", "60%", "90%", "at a tree boundary",
                                 "trees removed, trailer kept", "a tree removed from the middle"])
@pytest.mark.parametrize("isolate", [True, False])
def test_a_damaged_lightgbm_file_is_refused(tmp_path, holdout, capsys, lgb_text, how, isolate):
    (tmp_path / "m.txt").write_text(_damaged(lgb_text, how))
    extra = () if isolate else ("--no-isolate",)
    code, err, took = _run(tmp_path, capsys, str(tmp_path / "m.txt"), *extra)
    assert code == EXIT_BAD_INPUT and took < 60
    assert "is damaged or truncated (" in _one_error(err)


def test_the_whole_lightgbm_file_still_loads(tmp_path, holdout, capsys, lgb_text):
    import lightgbm

    (tmp_path / "m.txt").write_text(lgb_text)
    frame = pd.read_csv(holdout)
    with load_model(tmp_path / "m.txt") as model:
        # reference: LightGBM itself, in this process
        want = lightgbm.Booster(model_str=lgb_text).predict(frame[["x", "z"]].to_numpy())
        np.testing.assert_allclose(model.scores(frame), want, rtol=0, atol=1e-12)
