"""Model files on disk: where a relative path points, reading the bytes once, close-name hints."""

from __future__ import annotations

import difflib
from pathlib import Path

from probe.errors import ModelError

from .messages import ticks

__all__ = ["close_files", "read_bytes", "resolve"]


def resolve(text: str, base: Path) -> Path:
    """``text`` as a path, with ``~`` expanded and a relative path taken from ``base``."""
    path = Path(text).expanduser()
    return path if path.is_absolute() else base / path


def read_bytes(path: Path, text: str) -> bytes:
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise ModelError(f"cannot read model file `{text}`: {exc.strerror or exc}") from exc
    if not data:
        raise ModelError(f"model file `{text}` is empty")
    return data


def close_files(path: Path) -> str:
    try:
        names = [p.name for p in path.parent.iterdir()]
    except OSError:
        return ""
    close = difflib.get_close_matches(path.name, names, n=3, cutoff=0.5)
    return f" (files in that folder with close names: {ticks(close)})" if close else ""
