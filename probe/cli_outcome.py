"""How a command-line run ends: its exit code (contract), its one error line, its warnings.

0 ran and the policy passed (or had no rules); 1 ran and the policy failed; 2 bad usage or bad input
(every model failure included); 3 an internal error (a bug in probe); 128 + N on signal N (130
SIGINT, 129 SIGHUP, 143 SIGTERM).
"""

from __future__ import annotations

import traceback

from .cli_signals import Terminated
from .errors import ProbeError

__all__ = ["EXIT_OK", "EXIT_POLICY_FAILED", "EXIT_BAD_INPUT", "EXIT_INTERNAL", "EXIT_INTERRUPTED",
           "print_warnings", "report_failure"]

EXIT_OK = 0
EXIT_POLICY_FAILED = 1
EXIT_BAD_INPUT = 2
EXIT_INTERNAL = 3
EXIT_INTERRUPTED = 130


def one_line(exc: BaseException) -> str:
    """An error message as one line: a newline or an escape from the data is shown escaped."""
    from .report.fmt import visible

    return visible(str(exc).strip())


def print_warnings(err, caught) -> None:
    """Each distinct warning once, one line (``warning: …``), after the run's own output."""
    from .errors import ProbeWarning
    from .report.fmt import visible

    seen = []
    for w in caught:
        what = "" if issubclass(w.category, ProbeWarning) else f"{w.category.__name__}: "
        line = f"warning: {what}{visible(str(w.message).strip())}"
        if line not in seen:
            seen.append(line)
    for line in seen:
        err.print(line, markup=False)


def internal_error(exc: BaseException) -> str:
    first = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
    first = one_line(first) if first else ""
    what = f"{type(exc).__name__}: {first}" if first else type(exc).__name__
    return f"error: internal error ({what}); re-run with --debug and report it"


def report_failure(exc: BaseException, err, debug: bool) -> int:
    """The one line (and exit code) for a run that ended in an exception."""
    if isinstance(exc, Terminated):
        err.print("interrupted" if exc.exit_code == EXIT_INTERRUPTED else f"terminated ({exc})",
                  markup=False)
        return exc.exit_code
    if isinstance(exc, KeyboardInterrupt):
        err.print("interrupted", markup=False)
        return EXIT_INTERRUPTED
    if debug:
        traceback.print_exception(exc)
    if isinstance(exc, ProbeError):
        err.print(f"error: {one_line(exc)}", markup=False)
        return EXIT_BAD_INPUT
    err.print(internal_error(exc), markup=False)  # a bug in probe
    return EXIT_INTERNAL
