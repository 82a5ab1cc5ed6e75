"""Helpers for the hostile-input tests (``test_catalogue.py``, ``test_cli_properties.py``).

One place for: the tiny holdout table, a workspace that writes hostile files into a temporary
folder and builds the command lines, running ``probe`` in process (``main(argv)``) or out of
process (``python -m probe``), and the contract every failing run must keep (exit code, exactly one
``error:`` line, no traceback, inputs byte-identical, no ``*.tmp`` left, bounded time).
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import signal
import subprocess
import sys
import time
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

EXIT_BAD_INPUT = 2  # docs/contracts.md; the constants in probe.cli are the same numbers
ROOT = Path(__file__).resolve().parents[1]


def small_frame(n: int = 120, seed: int = 0) -> pd.DataFrame:
    """The well-formed table every hostile file starts from: two protected attributes, two
    features, a 0/1 label ``y`` and a score column ``s`` in [0, 1] (a ``column:s`` model)."""
    rng = np.random.default_rng(seed)
    return pd.DataFrame({
        "g": rng.choice(["a", "b"], size=n),
        "r": rng.choice(["x", "y", "z"], size=n),
        "x1": rng.normal(size=n).round(3),
        "x2": rng.integers(0, 5, size=n),
        "y": rng.integers(0, 2, size=n),
        "s": rng.uniform(size=n).round(3),
    })


@dataclass(frozen=True)
class Case:
    """One hostile run and what the contract says about it.

    ``codes``: the allowed exit codes (2 unless the input is one probe must handle); ``needle``:
    text the error line must hold; ``check``: a callable ``check(workspace, outcome)`` with more
    assertions (a payload that must not have run, a report that must hold a level); ``process``:
    run as ``python -m probe`` (model crashes, exits, signals); ``seconds``: the time bound.
    """

    argv: list
    codes: tuple = (EXIT_BAD_INPUT,)
    needle: str | None = None
    check: Callable | None = None
    process: bool = False
    seconds: float = 20.0
    signal: int | None = None  # sent once `<root>/started` exists (process runs only)


@dataclass
class Outcome:
    code: int | None
    out: str
    err: str
    seconds: float
    escaped: BaseException | None = None  # an exception that got out of main()


class Workspace:
    """A temporary folder holding the inputs of one hostile run; the run's working directory."""

    def __init__(self, root: Path):
        self.root = Path(root)
        self.data = self.csv("d.csv", small_frame())

    # -- files ------------------------------------------------------------------------------
    def file(self, name: str, content: bytes | str) -> str:
        path = self.root / name
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(content.encode("utf-8") if isinstance(content, str) else content)
        return str(path)

    def csv(self, name: str, frame: pd.DataFrame) -> str:
        return self.file(name, frame.to_csv(index=False))

    def variant(self, name: str = "v.csv", **columns) -> str:
        """The small table with some columns replaced or added (lists or callables of the frame)."""
        frame = small_frame()
        for col, values in columns.items():
            frame[col] = values(frame) if callable(values) else values
        return self.csv(name, frame)

    def module(self, name: str, source: str) -> str:
        """A Python module file; returns its ``py:`` spec for the attribute ``score``."""
        self.file(name, source)
        return f"py:{self.root / name}:score"

    def plan(self, body: str, name: str = "plan.toml", data: str | None = None) -> str:
        """A plan file; ``{data}`` in the body is the data file's path."""
        return self.file(name, body.replace("{data}", Path(data or self.data).as_posix()))

    def good_plan(self, extra: str = "", model: str = "column:s", top: str = "") -> str:
        return self.plan(f'{top}[data]\npath = "{{data}}"\nlabel = "y"\nprotected = ["g"]\n'
                         f'[model]\nspec = "{model}"\n{extra}\n')

    # -- command lines ----------------------------------------------------------------------
    def argv(self, sub: str, *extra, data: str | None = None, model: str | None = "column:s",
             label: str | None = "y", protected: str | None = "g") -> list:
        argv = [sub, "--data", data or self.data]
        if model is not None and sub != "proxies":
            argv += ["--model", model]
        if label is not None and sub != "flips":
            argv += ["--label", label]
        if protected is not None and sub != "slices":
            argv += ["--protected", protected]
        if sub == "compare" and "--baseline" not in extra:
            argv += ["--baseline", "column:s"]
        return argv + [str(e) for e in extra]

    def case(self, sub: str, *extra, codes=(EXIT_BAD_INPUT,), needle=None, check=None,
             process=False, seconds=20.0, sig=None, **kw) -> Case:
        return Case(self.argv(sub, *extra, **kw), codes=codes, needle=needle, check=check,
                    process=process, seconds=seconds, signal=sig)

    def report(self) -> dict:
        """The JSON written by ``--json <root>/r.json``."""
        return json.loads((self.root / "r.json").read_text(encoding="utf-8"))


# -- running --------------------------------------------------------------------------------

def run_in_process(argv: list, capfd=None) -> Outcome:
    """``probe.cli.main(argv)``; stdout and stderr captured at the file-descriptor level with
    pytest's ``capfd`` (native libraries write there), else stderr at the Python level."""
    from rich.console import Console
    from threadpoolctl import threadpool_limits

    from probe.cli import main

    console = Console(file=io.StringIO(), width=100, color_system=None, force_terminal=False)
    escaped, code = None, None
    err, old_err = io.StringIO(), sys.stderr
    if capfd is None:
        sys.stderr = err
    start = time.perf_counter()
    try:
        # a user's run does not turn warnings into errors (the test suite's setting does);
        # tiny data: one thread per library pool (the machine has 2 cores)
        with warnings.catch_warnings(), threadpool_limits(1):
            warnings.simplefilter("ignore")
            code = main([str(a) for a in argv], console=console)
    except BaseException as exc:  # noqa: BLE001 - anything that gets out of main is recorded
        escaped = exc
    finally:
        sys.stderr = old_err
    seconds = time.perf_counter() - start
    if capfd is None:
        return Outcome(code, console.file.getvalue(), err.getvalue(), seconds, escaped)
    captured = capfd.readouterr()
    return Outcome(code, console.file.getvalue() + captured.out, captured.err, seconds, escaped)


def run_out_of_process(argv: list, cwd: Path, *, timeout: float, sig: int | None = None) -> Outcome:
    """``python -m probe argv`` in ``cwd``; ``sig`` is sent once ``cwd/started`` appears."""
    env = {**os.environ, "PYTHONPATH": str(ROOT), "OMP_NUM_THREADS": "1"}
    start = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-m", "probe", *map(str, argv)], cwd=cwd, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    if sig is not None:
        while not (cwd / "started").exists() and proc.poll() is None:
            if time.perf_counter() - start > timeout:
                break
            time.sleep(0.05)
        if proc.poll() is None:
            proc.send_signal(sig)
    try:
        out, err = proc.communicate(timeout=max(1.0, timeout - (time.perf_counter() - start)))
    except subprocess.TimeoutExpired:
        proc.kill()
        out, err = proc.communicate()
        return Outcome(None, out.decode("utf-8", "replace"),
                       err.decode("utf-8", "replace") + f"\n[killed after {timeout:g} s]",
                       time.perf_counter() - start)
    return Outcome(proc.returncode, out.decode("utf-8", "replace"), err.decode("utf-8", "replace"),
                   time.perf_counter() - start)


def snapshot(root: Path) -> dict:
    """SHA-256 of every file under ``root``."""
    return {p: hashlib.sha256(p.read_bytes()).hexdigest() for p in Path(root).rglob("*")
            if p.is_file()}


def leftovers(root: Path) -> list:
    """Temporary files a run left behind (``*.tmp``, including ``.report.json.<hex>.tmp``)."""
    return sorted(str(p) for p in Path(root).rglob("*")
                  if p.name.endswith(".tmp") or ".tmp." in p.name)


def error_lines(err: str) -> list:
    return [ln for ln in err.splitlines() if ln.strip()]


def check_outcome(outcome: Outcome, case: Case) -> None:
    """The contract on one run's exit code and output (the file checks are the caller's)."""
    assert outcome.escaped is None, (
        f"{type(outcome.escaped).__name__} escaped main(): {outcome.escaped!s:.200}")
    assert outcome.code is not None, f"no exit within {case.seconds:g} s"
    text = outcome.out + outcome.err
    assert "Traceback" not in text, text[-2000:]
    assert outcome.code in case.codes, (
        f"exit {outcome.code}, expected {case.codes}; stderr: {outcome.err.strip()[:400]!r}")
    lines = error_lines(outcome.err)
    if outcome.code == EXIT_BAD_INPUT:
        assert len(lines) == 1 and lines[0].startswith("error: "), f"stderr: {outcome.err!r:.600}"
        if case.needle is not None:
            assert case.needle in lines[0], lines[0]
        if "unrecognized" not in (case.needle or ""):  # a flag or command of the contract
            for refusal in ("unrecognized arguments", "invalid choice: 'render'"):
                assert refusal not in lines[0], lines[0]
    elif outcome.code in (0, 1):
        assert not any(ln.startswith("error:") for ln in lines), outcome.err
    assert outcome.seconds < case.seconds, f"took {outcome.seconds:.1f} s"


SIGNALS = {"TERM": signal.SIGTERM, "INT": signal.SIGINT}
