"""Isolation: a model file or ``py:`` model loaded and scored in a child process of its own.

A native crash (a damaged LightGBM file), a hang, or an exit inside the model then cannot take
probe down; each becomes one :class:`~probe.errors.ModelError` line:

- killed by a signal: "model `x` crashed (SIGSEGV) while scoring rows 0–49999";
- exited, with any code: "model `x` exited (code 0) while loading; a model must not end the
  process";
- silent past ``timeout``: the child is killed, "model `x` gave no answer within 600 s while …;
  raise --timeout / [model] timeout if it is just slow";
- a Python exception: its first line, as for a model in this process.

The child (:mod:`.worker`) loads with the same loaders (:func:`.load.load_spec`), so the trust
checks, hashes, feature names, categories and ``describe()`` come back to the parent, where a
:class:`Model` is rebuilt around a ``score_batch`` that sends each batch and waits at most
``timeout`` seconds. One child serves a Model for its life; it is killed when the Model is
closed or collected, when this process exits, or when a wait is interrupted, and it ends by
itself when this process dies. Its threads are bounded (``OMP_NUM_THREADS`` and friends: the
value already set, else at most 2) and its stderr goes to a temporary file whose last line is
quoted when the child crashes.

Start-up: children are forked from one server process per probe process (multiprocessing's
``forkserver``), started once (:func:`start_server`, early in a run so that its imports overlap
reading the data) with pandas and what the model file's kind needs (LightGBM, scikit-learn,
skops, onnxruntime) imported and no thread pool ever run; a child is then ready in tens of
milliseconds instead of re-importing them (about 0.7 s of CPU each). The server inherits the
bounded thread variables.
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
import select
import signal
import sys
import tempfile
import threading
import time
import weakref
from typing import Any

import numpy as np
import pandas as pd

from probe import errors

from .model import BatchFailure, Model, ProcessFailure
from .options import Options
from .worker import _HEADER, serve

__all__ = ["load_isolated", "start_server", "Worker"]

#: The least time a child gets to start (imports), whatever ``timeout`` says.
STARTUP_SECONDS = 60.0
_THREAD_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
                "VECLIB_MAXIMUM_THREADS", "NUMEXPR_NUM_THREADS")
#: What the server imports once, so that each child starts with them loaded (a module that is
#: not installed is skipped): what every child needs, and what each kind of model file needs.
_PRELOAD = ("probe.adapters.load", "pandas")
_PRELOAD_BY_SUFFIX = {".txt": ("lightgbm",), ".lgb": ("lightgbm",), ".onnx": ("onnxruntime",),
                      ".skops": ("sklearn.base", "skops.io"), ".joblib": ("sklearn.base",),
                      ".pkl": ("sklearn.base",), ".pickle": ("sklearn.base",)}
_SERVER_LOCK = threading.Lock()
_context: Any = None
_ERRORS = {"ModelError": errors.ModelError, "TrustError": errors.TrustError,
           "PlanError": errors.PlanError, "DataError": errors.DataError}


def load_isolated(text: str, opts: Options) -> Model:
    """The Model of ``text``, loaded in a child process that then scores its batches."""
    start_server([text])
    worker = Worker(opts.timeout)
    try:
        worker.call(None, STARTUP_SECONDS + opts.timeout)  # the child's "ready"
        reply = worker.call(("load", text, opts, list(sys.path)), opts.timeout)
    except ProcessFailure as exc:
        worker.close()
        doing = "loading" if worker.started else "starting"
        raise errors.ModelError(exc.line(text, doing)) from None
    if reply[0] != "ok":
        worker.close()
        raise _ERRORS.get(reply[1], errors.ModelError)(reply[2])
    return Model(**reply[1], score_batch=worker.score, worker=worker)


class Worker:
    """One child process serving one model; every wait is bounded by ``timeout`` seconds."""

    def __init__(self, timeout: float) -> None:
        self.timeout = timeout
        self.started = False
        self._failure: ProcessFailure | None = None
        self._lock = threading.Lock()  # one request at a time, whichever thread asks
        self._stderr = tempfile.NamedTemporaryFile(prefix="probe-model-", suffix=".log")
        context = _server()
        mine, theirs = context.Pipe(duplex=True)
        self._proc = context.Process(
            target=serve, args=(theirs, self._stderr.name, _threads()),
            name="probe-model", daemon=True)
        with _main_hidden():
            self._proc.start()
        theirs.close()
        self._conn = mine
        self._fd = mine.fileno()
        self._finalizer = weakref.finalize(self, _stop, self._proc, self._conn, self._stderr)

    @property
    def pid(self) -> int:
        return self._proc.pid

    def score(self, batch: pd.DataFrame) -> np.ndarray:
        """One batch's scores; a failure of the model's own code is a :class:`BatchFailure`."""
        reply = self.call(("score", batch), self.timeout)
        if reply[0] == "batch":
            raise BatchFailure(reply[1])
        return reply[1]

    def call(self, request: Any, timeout: float) -> tuple:
        """Send ``request`` (None: send nothing) and wait for the answer, at most ``timeout`` s."""
        with self._lock:
            return self._call(request, timeout)

    def _call(self, request: Any, timeout: float) -> tuple:
        if self._failure is not None:
            raise ProcessFailure(f"is no longer running (it {self._failure.what} earlier)")
        deadline = time.monotonic() + timeout
        try:
            if request is not None:
                self._send(request, deadline)
            reply = self._receive(deadline)
        except TimeoutError:
            self.close()
            self._failure = ProcessFailure(
                f"gave no answer within {timeout:g} s",
                "; raise --timeout / [model] timeout if it is just slow")
            raise self._failure from None
        except (BrokenPipeError, ConnectionResetError, EOFError):
            self._failure = self._ended()
            raise self._failure from None
        except BaseException:  # interrupted: the child must not outlive the wait
            self.close()
            raise
        if reply == ("ready",):
            self.started = True
        return reply

    def close(self) -> None:
        """Kill the child and reap it (idempotent)."""
        self._finalizer()

    # -- internals ------------------------------------------------------------------------

    def _send(self, message: Any, deadline: float) -> None:
        import pickle

        body = pickle.dumps(message, protocol=pickle.HIGHEST_PROTOCOL)
        view = memoryview(_HEADER.pack(len(body)) + body)
        fd = self._fd
        os.set_blocking(fd, False)
        while view:
            _wait(fd, deadline, write=True)
            try:
                view = view[os.write(fd, view):]
            except BlockingIOError:
                continue

    def _receive(self, deadline: float) -> Any:
        import pickle

        fd = self._fd
        head = self._read(fd, _HEADER.size, deadline)
        return pickle.loads(self._read(fd, _HEADER.unpack(head)[0], deadline))

    @staticmethod
    def _read(fd: int, n: int, deadline: float) -> bytes:
        buf = bytearray()
        while len(buf) < n:
            _wait(fd, deadline, write=False)
            chunk = os.read(fd, min(n - len(buf), 1 << 20))
            if not chunk:
                raise EOFError
            buf += chunk
        return bytes(buf)

    def _ended(self) -> ProcessFailure:
        """Why the child is gone: a signal or an exit code (and its last line on stderr)."""
        self._proc.join(timeout=10)
        if self._proc.exitcode is None:  # the pipe closed but the process lingers
            self.close()
        code = self._proc.exitcode
        last = _last_line(self._stderr)
        self.close()
        if code is not None and code < 0:
            try:
                name = signal.Signals(-code).name
            except ValueError:
                name = f"signal {-code}"
            words = f" (its last words: {last!r})" if last else ""
            return ProcessFailure(f"crashed ({name})", words)
        return ProcessFailure(f"exited (code {code})", "; a model must not end the process")


def _wait(fd: int, deadline: float, *, write: bool) -> None:
    remaining = deadline - time.monotonic()
    if remaining <= 0:
        raise TimeoutError
    ready = select.select([], [fd], [], remaining)[1] if write else \
        select.select([fd], [], [], remaining)[0]
    if not ready:
        raise TimeoutError


def _last_line(file: Any) -> str:
    try:
        file.seek(0, os.SEEK_END)
        size = file.tell()
        file.seek(max(0, size - 4096))
        lines = [ln.strip() for ln in file.read().decode("utf-8", "replace").splitlines()]
    except (OSError, ValueError):
        return ""
    lines = [ln for ln in lines if ln]
    return lines[-1][:200] if lines else ""


def _threads() -> int:
    """The child's thread bound: at most 2, and at most ``OMP_NUM_THREADS`` when that is set."""
    bound = max(1, min(2, os.cpu_count() or 1))
    try:
        return max(1, min(bound, int(os.environ.get("OMP_NUM_THREADS", ""))))
    except ValueError:
        return bound


def start_server(specs) -> None:
    """Start the server children are forked from, if it is not running, preloading what the
    model ``specs`` need. It imports in the background: call this early (before reading the
    data) and the imports overlap that work."""
    modules = list(_PRELOAD)
    for spec in specs:
        modules += _PRELOAD_BY_SUFFIX.get(os.path.splitext(str(spec).lower())[1], ())
    _server(tuple(dict.fromkeys(modules)))


def _server(preload: tuple[str, ...] = _PRELOAD) -> Any:
    """The forkserver context, its server started once with ``preload`` imported (the first
    caller's list: later models of another kind import theirs in their child)."""
    global _context
    with _SERVER_LOCK:
        if _context is None:
            context = multiprocessing.get_context("forkserver")
            context.set_forkserver_preload(list(preload))
            threads = str(_threads())
            saved = {var: os.environ.get(var) for var in _THREAD_VARS}
            os.environ.update({var: os.environ.get(var) or threads for var in _THREAD_VARS})
            try:  # the server (and so every child) starts with the thread bound in its environment
                from multiprocessing import forkserver

                with _main_hidden():
                    forkserver.ensure_running()
            finally:
                for var, value in saved.items():
                    if value is None:
                        os.environ.pop(var, None)
                    else:
                        os.environ[var] = value
            _context = context
        return _context


@contextlib.contextmanager
def _main_hidden():
    """Hide the caller's main script from multiprocessing while a child starts.

    multiprocessing re-runs the parent's ``__main__`` in each child it starts this way, so a
    user's script that loads a model at top level would run again (and again) in the child.
    The child needs nothing from it: it runs :func:`serve` only.
    """
    main = sys.modules.get("__main__")
    saved = {k: main.__dict__[k] for k in ("__spec__", "__file__") if k in main.__dict__} \
        if main is not None else {}
    try:
        if main is not None:
            main.__dict__.pop("__file__", None)
            main.__spec__ = None
        yield
    finally:
        if main is not None:
            main.__dict__.update(saved)
            if "__spec__" not in saved:
                main.__dict__.pop("__spec__", None)


def _stop(proc: Any, conn: Any, stderr: Any) -> None:
    """Kill and reap the child, close its pipe and stderr file (a finalizer: also at exit)."""
    if proc.exitcode is None:
        try:
            proc.kill()
        except (OSError, ValueError, AttributeError):
            pass
    try:
        proc.join(timeout=10)
    except (AssertionError, ValueError):  # never started, or already closed
        pass
    for f in (conn, stderr):
        try:
            f.close()
        except OSError:
            pass
