"""The child side of an isolated model (see :mod:`.isolated`): load it, then score batches.

Started by the parent as ``python -c <bootstrap>`` (or ``python -m probe.adapters.worker``).
The protocol runs over the child's original stdin and stdout, which are moved to fresh
descriptors first; descriptor 1 and ``sys.stdout`` then point at stderr, so a model that prints
cannot corrupt an answer. Each message is a frame: 8 bytes of big-endian length, then a pickle
(both ends are probe, so a pickle is safe here).

Requests and answers:

- the child says ``("ready",)`` once its imports are done;
- ``("load", spec, options, sys_path)`` → ``("ok", Model.parts())`` or
  ``("error", exception class name, message)``;
- ``("score", batch)`` → ``("ok", float64 array)`` or ``("batch", cause)``, the cause worded as
  :class:`~probe.adapters.model.Model` words an in-process failure.

The child ignores SIGINT (the parent decides), and ends when its parent does (Linux's parent-
death signal, and a thread that watches the parent's pid).
"""

from __future__ import annotations

import os
import pickle
import signal
import struct
import sys
import threading
import time
from typing import Any

__all__ = ["main", "read_frame", "write_frame"]

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


def _leave_with_parent(parent: int) -> None:
    if sys.platform.startswith("linux") and os.environ.get("PROBE_WORKER_PDEATHSIG") == "1":
        try:
            import ctypes

            ctypes.CDLL(None, use_errno=True).prctl(1, signal.SIGKILL)  # PR_SET_PDEATHSIG
        except (OSError, AttributeError):
            pass
    if os.getppid() != parent:
        os._exit(1)

    def watch() -> None:
        while os.getppid() == parent:
            time.sleep(0.5)
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


def main() -> None:
    """Serve one model until the parent closes the pipe or goes away."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    proto_in, proto_out = os.dup(0), os.dup(1)
    null = os.open(os.devnull, os.O_RDONLY)
    os.dup2(null, 0)
    os.dup2(2, 1)  # whatever the model prints goes to stderr, never into the protocol
    os.close(null)
    sys.stdout = sys.stderr
    _leave_with_parent(int(os.environ.get("PROBE_WORKER_PARENT", os.getppid())))
    import pandas  # noqa: F401 - the batches are DataFrames; import before saying ready

    write_frame(proto_out, ("ready",))
    state: dict = {}
    while True:
        request = read_frame(proto_in)
        if request is None:
            os._exit(0)
        write_frame(proto_out, _answer(request[0], request, state))


if __name__ == "__main__":
    main()
