"""Pieces of the adapters' one-line error messages: names in backticks, close-name hints, causes."""

from __future__ import annotations

import difflib
from collections.abc import Sequence
from typing import Any

__all__ = ["cause", "close_names", "first_line", "plural", "ticks"]


def first_line(text: str) -> str:
    for line in text.splitlines():
        if line.strip():
            return line.strip()
    return "(no message)"


def ticks(names: Any) -> str:
    return ", ".join(f"`{n}`" for n in names)


def plural(n: int, word: str) -> str:
    return word if n == 1 else word + "s"


def close_names(missing: Sequence[str], available: Sequence[str]) -> str:
    lower = {a.lower(): a for a in available}
    hints = []
    for m in missing:
        close = difflib.get_close_matches(m, available, n=3, cutoff=0.6)
        if not close and m.lower() in lower:
            close = [lower[m.lower()]]
        hints.extend(c for c in close if c not in hints)
    return f" (did you mean {ticks(hints)}?)" if hints else ""


def cause(exc: BaseException) -> str:
    """An exception as ``"TypeError: <first line of its message>"``."""
    return f"{type(exc).__name__}: {first_line(str(exc))}"
