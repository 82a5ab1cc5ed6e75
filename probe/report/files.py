"""Writing the report folder: ``report.json``, ``report.html``, ``report.md``, ``junit.xml``.

Every file is rendered first and then written atomically: into a temporary file in the same folder,
flushed and fsynced, then moved over the target with :func:`os.replace`. A reader (or a CI job
collecting ``junit.xml``) therefore sees either the old file or the new one whole, never half, and
a failure while rendering leaves the folder as it was.
"""

from __future__ import annotations

import json
import os
import secrets
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path

from ..errors import PlanError
from .html import render_html
from .junit import render_junit
from .markdown import render_markdown

__all__ = ["FILE_NAMES", "write_report"]

#: format -> file name inside the report folder
FILE_NAMES = {"json": "report.json", "html": "report.html", "md": "report.md", "junit": "junit.xml"}

_RENDERERS: dict[str, Callable[[Mapping], str]] = {
    "html": render_html,
    "md": render_markdown,
    "junit": render_junit,
}


def _write_atomic(path: Path, text: str) -> None:
    data = text.encode("utf-8")
    tmp = path.with_name(f".{path.name}.{secrets.token_hex(6)}.tmp")
    # os.open with 0o666 lets the umask decide the permissions, as for any ordinary new file
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def _fsync_dir(folder: Path) -> None:
    """Make the renames durable; best effort (not every platform can open a directory)."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def write_report(
    report: dict,
    out_dir: str | os.PathLike,
    *,
    formats: Sequence[str] = ("json", "html", "md", "junit"),
    json_text: str | None = None,
    names: Mapping[str, str] | None = None,
) -> dict[str, Path]:
    """Write the report files into ``out_dir``, each atomically.

    Parameters
    ----------
    report : dict
        The ``probe.report/2`` dict; never modified.
    out_dir : str or path-like
        The report folder; created (with parents) when missing.
    formats : sequence of str, default=("json", "html", "md", "junit")
        Which files to write: ``json`` → ``report.json``, ``html`` → ``report.html``,
        ``md`` → ``report.md``, ``junit`` → ``junit.xml``.
    json_text : str or None, default=None
        The canonical JSON text to write as ``report.json``; when None, the dict is dumped with
        ``indent=2`` and ``allow_nan=False``.
    names : mapping of str to str or None, default=None
        File names to use instead of the defaults, by format (e.g. ``{"json": "lending.json"}``);
        plain names, no folders.

    Returns
    -------
    dict of str to Path
        Format → the path written, in the order of ``formats``.

    Raises
    ------
    PlanError
        An unknown format, or an ``out_dir`` that exists and is not a folder or cannot be created.
    """
    formats = list(dict.fromkeys(formats))
    unknown = [f for f in formats if f not in FILE_NAMES]
    if unknown:
        raise PlanError(
            f"`report.formats` has unknown format {unknown[0]!r}; expected some of "
            f"{', '.join(repr(k) for k in FILE_NAMES)}"
        )
    file_names = dict(FILE_NAMES)
    for fmt, name in (names or {}).items():
        if fmt not in FILE_NAMES:
            raise PlanError(f"`names` has unknown format {fmt!r}")
        if not name or Path(name).name != name or name in (".", ".."):
            raise PlanError(f"report file name {name!r} for {fmt} must be a plain file name")
        file_names[fmt] = name
    folder = Path(out_dir)
    if folder.exists() and not folder.is_dir():
        raise PlanError(
            f"report folder `{folder}` exists and is not a folder; choose another --out"
        )
    # render everything before touching the disk, so a rendering error writes nothing
    texts = {}
    for fmt in formats:
        if fmt == "json" and json_text is not None:
            texts[fmt] = json_text  # the canonical text, byte for byte
            continue
        if fmt == "json":
            text = json.dumps(report, indent=2, sort_keys=False, allow_nan=False)
        else:
            text = _RENDERERS[fmt](report)
        texts[fmt] = text if text.endswith("\n") else text + "\n"
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise PlanError(f"cannot create report folder `{folder}`: {exc.strerror or exc}") from None
    paths = {}
    for fmt, text in texts.items():
        path = folder / file_names[fmt]
        try:
            _write_atomic(path, text)
        except OSError as exc:
            raise PlanError(f"cannot write report file `{path}`: {exc.strerror or exc}") from None
        paths[fmt] = path
    _fsync_dir(folder)
    return paths
