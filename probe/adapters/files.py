"""Model files on disk: where a relative path points, reading the bytes once, close-name hints."""

from __future__ import annotations

import difflib
from pathlib import Path

from probe.errors import ModelError, PlanError, TrustError

from .messages import ticks

__all__ = ["check_pin", "close_files", "read_bytes", "resolve"]


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


def check_pin(sha: str | None, text: str, pinned: str | None) -> None:
    """Refuse a file whose SHA-256 is not the pinned one (``sha256`` under [model],
    ``baseline_sha256`` under [compare])."""
    if pinned is None or sha == pinned:
        return
    if sha is None:
        raise PlanError(f"`sha256` pins a model file, and model `{text}` has none to check")
    raise TrustError(
        f"model file `{text}` has SHA-256 {sha}, not the pinned {pinned} (sha256 under "
        "[model], baseline_sha256 under [compare]); it is not the file the plan names"
    )


def close_files(path: Path) -> str:
    try:
        names = [p.name for p in path.parent.iterdir()]
    except OSError:
        return ""
    close = difflib.get_close_matches(path.name, names, n=3, cutoff=0.5)
    return f" (files in that folder with close names: {ticks(close)})" if close else ""
