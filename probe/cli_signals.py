"""Signals during a command: SIGTERM, SIGHUP and SIGINT unwind the run like an exception.

The default action of SIGTERM kills the process where it stands, so no ``finally`` runs and a
report's temporary files stay behind. While a command runs, :func:`terminating_on_signals` turns
each of these signals into :class:`Terminated`, which unwinds through the writers' clean-up; the CLI
then exits with ``128 + signal number`` (130 for SIGINT, 143 for SIGTERM, 129 for SIGHUP). A second
signal while the first is unwinding is ignored, so the clean-up is not cut short. The previous
handlers are restored when the block ends.
"""

from __future__ import annotations

import signal
import threading
from contextlib import contextmanager

__all__ = ["Terminated", "terminating_on_signals"]

_NAMES = ("SIGINT", "SIGTERM", "SIGHUP")


class Terminated(BaseException):
    """A signal asked the run to stop (a BaseException: no ``except Exception`` swallows it).

    Attributes
    ----------
    signum : int
        The signal received.
    """

    def __init__(self, signum: int):
        super().__init__(signal.Signals(signum).name)
        self.signum = signum

    @property
    def exit_code(self) -> int:
        return 128 + self.signum


@contextmanager
def terminating_on_signals():
    """Within the block, SIGINT/SIGTERM/SIGHUP raise :class:`Terminated` (main thread only).

    Yields the list of signals received: a library may turn the exception raised in the middle of
    its own code into another one, so the caller reads the exit code from this list too.
    """
    received: list[int] = []
    if threading.current_thread() is not threading.main_thread():
        yield received
        return

    def handler(signum, frame):
        if received:
            return  # already unwinding
        received.append(signum)
        raise Terminated(signum)

    signums = [getattr(signal, n) for n in _NAMES if hasattr(signal, n)]
    # a signal the caller ignores (nohup's SIGHUP) stays ignored
    before = {s: signal.signal(s, handler) for s in signums if signal.getsignal(s) is not signal.SIG_IGN}
    try:
        yield received
    finally:
        for s, h in before.items():
            signal.signal(s, h)
