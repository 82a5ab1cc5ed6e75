"""The child side of an isolated model (see :mod:`.isolated`): load it, then score batches.

Forked by the parent's forkserver and entered at :func:`serve`, handed one end of a socket pair.
Descriptors 1 and 2 and ``sys.stdout`` then point at a log file the parent reads when the child
dies, so a model that prints cannot corrupt an answer. Each message is a frame: 8 bytes of big-endian length, then a pickle
(both ends are probe, so a pickle is safe here).

Requests and answers:

- the child says ``("ready",)`` once its imports are done;
- ``("load", spec, options, sys_path)`` → ``("ok", Model.parts())`` or
  ``("error", exception class name, message)``;
- ``("score", batch)`` → ``("ok", float64 array)`` or ``("batch", cause)``, the cause worded as
  :class:`~probe.adapters.model.Model` words an in-process failure.

The child ignores SIGINT (the parent decides), and ends when its parent does (a thread that
watches the parent's end of the pipe, or the parent's pid).
"""

from __future__ import annotations

import os
import pickle
import signal
import struct
import sys
import threading
from typing import Any

__all__ = ["serve", "read_frame", "write_frame"]

_HEADER = struct.Struct(">Q")


def write_frame(fd: int, message: Any) -> None:
    """Write one frame (blocking)."""
    body = pickle.dumps(message, protocol=pickle.HIGHEST_PROTOCOL)
    view = memoryview(_HEADER.pack(len(body)) + body)
    while view:
        view = view[os.write(fd, view):]


def read_frame(fd: int) -> Any:
    """Read one frame (blocking); None when the other end has closed."""
    head = _read_exactly(fd, _HEADER.size)
    if head is None:
        return None
    body = _read_exactly(fd, _HEADER.unpack(head)[0])
    return None if body is None else pickle.loads(body)


def _read_exactly(fd: int, n: int) -> bytes | None:
    buf = bytearray()
    while len(buf) < n:
        chunk = os.read(fd, min(n - len(buf), 1 << 20))
        if not chunk:
            return None
        buf += chunk
    return bytes(buf)


def _leave_with_parent() -> None:
    """End this process as soon as probe's process is gone (even as an unreaped zombie).

    The sentinel is a pipe only probe's process writes to; it reads as closed once that process
    has ended. (Polling the pid would not do: a killed parent that is not yet reaped still has
    one, and a child kept alive by that would keep the forkserver, and whatever waits on its
    inherited stdout, alive too.)
    """
    import multiprocessing
    import select

    sentinel = multiprocessing.parent_process().sentinel

    def watch() -> None:
        select.select([sentinel], [], [])
        os._exit(1)

    threading.Thread(target=watch, name="probe-parent-watch", daemon=True).start()


def _answer(op: str, request: tuple, state: dict) -> tuple:
    from probe.errors import ProbeError

    from .messages import cause, first_line
    from .model import BatchFailure, _as_scores

    if op == "load":
        from .load import load_spec

        _, spec, opts, path = request
        sys.path[:] = path
        try:
            state["model"] = load_spec(spec, opts)
        except ProbeError as exc:
            return ("error", type(exc).__name__, str(exc))
        except (Exception, SystemExit) as exc:
            return ("error", "ModelError", f"cannot load model `{spec}`: {cause(exc)}")
        return ("ok", state["model"].parts())
    batch = request[1]
    try:
        raw = state["model"]._score_batch(batch)
        return ("ok", _as_scores(raw, len(batch), batch.index))
    except BatchFailure as exc:
        return ("batch", str(exc))
    except ProbeError as exc:
        return ("batch", first_line(str(exc)))
    except (Exception, SystemExit) as exc:  # the model's own failure, sys.exit() included
        return ("batch", cause(exc))


def _loop(proto_in: int, proto_out: int) -> None:
    write_frame(proto_out, ("ready",))
    state: dict = {}
    while True:
        request = read_frame(proto_in)
        if request is None:
            os._exit(0)
        write_frame(proto_out, _answer(request[0], request, state))


def serve(conn: Any, log: str, threads: int) -> None:
    """The forked child's entry: the protocol on ``conn``; prints and errors go to ``log``."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        out = os.open(log, os.O_WRONLY | os.O_APPEND)
    except OSError:  # the parent gave up on this child (interrupted) before it started
        os._exit(1)
    null = os.open(os.devnull, os.O_RDONLY)
    os.dup2(null, 0)
    os.dup2(out, 1)
    os.dup2(out, 2)
    os.close(null)
    os.close(out)
    sys.stdout = sys.stderr
    try:
        from threadpoolctl import threadpool_limits

        threadpool_limits(threads)  # the libraries the server preloaded read their bound early
    except ImportError:  # pragma: no cover - ships with scikit-learn
        pass
    _leave_with_parent()
    fd = conn.fileno()
    os.set_blocking(fd, True)
    _loop(fd, fd)
