"""Writing the report: the report folder replaced as a whole, and single files written atomically.

A report folder (``report.json``, ``report.html``, ``report.md``, ``junit.xml``) is rendered first,
then written into a hidden sibling folder (``.<name>.<hex>.tmp``), each file flushed and fsynced, and
only then swapped into place: on Linux in one atomic exchange (``renameat2`` with
``RENAME_EXCHANGE``), elsewhere by moving the old folder aside and the new one in. The old folder is
then removed. A reader, a CI job or a run stopped at any point therefore finds the complete old
folder or the complete new one, never a mix; the hidden temporaries are removed on the way out
(``finally``), so an exception, Ctrl-C or SIGTERM leaves nothing behind either.

Because the folder is replaced whole, an existing folder must be a report folder: empty or holding
only the files probe writes. Anything else is refused (:func:`check_report_folder`), so a mistyped
``--out .`` cannot delete a project.

A single file (``--json FILE``, ``probe render``) is written atomically on its own: a hidden
temporary file in the same folder, fsynced, then :func:`os.replace`.

``PROBE_TEST_WRITE_DELAY`` (seconds; test-only, see DEVELOPERS.md) pauses after each file is written
into its temporary place, so the tests can stop a run mid-write.
"""

from __future__ import annotations

import ctypes
import json
import os
import secrets
import shutil
import signal
import time
from collections.abc import Callable, Mapping, Sequence
from contextlib import contextmanager
from pathlib import Path

from ..errors import PlanError
from .html import render_html
from .junit import render_junit
from .markdown import render_markdown

__all__ = ["FILE_NAMES", "render_files", "write_report", "write_file", "check_report_folder",
           "check_file_target"]

#: format -> file name inside the report folder
FILE_NAMES = {"json": "report.json", "html": "report.html", "md": "report.md", "junit": "junit.xml"}

_RENDERERS: dict[str, Callable[[Mapping], str]] = {
    "html": render_html,
    "md": render_markdown,
    "junit": render_junit,
}


def _test_pause() -> None:
    delay = os.environ.get("PROBE_TEST_WRITE_DELAY")
    if delay:
        time.sleep(float(delay))


def _write_synced(path: Path, data: bytes) -> None:
    # os.open with 0o666 lets the umask decide the permissions, as for any ordinary new file
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
    with os.fdopen(fd, "wb") as fh:
        fh.write(data)
        fh.flush()
        os.fsync(fh.fileno())


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


@contextmanager
def _signals_held():
    """Hold SIGINT, SIGTERM and SIGHUP until the block ends, so a swap or a clean-up is not cut."""
    names = ("SIGINT", "SIGTERM", "SIGHUP")
    held = {getattr(signal, n) for n in names if hasattr(signal, n)}
    if not hasattr(signal, "pthread_sigmask"):  # pragma: no cover - not POSIX
        yield
        return
    before = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, before)


def _hidden_sibling(path: Path, suffix: str) -> Path:
    return path.with_name(f".{path.name}.{secrets.token_hex(6)}.{suffix}")


def _existing_ancestor(path: Path) -> Path:
    path = Path(os.path.abspath(path))
    while not path.exists() and path != path.parent:
        path = path.parent
    return path


def _can_create_in(folder: Path, target: Path, what: str) -> None:
    """Refuse unless a new entry can be made in ``folder`` (tried for real: a hidden folder, removed)."""
    if not folder.is_dir():
        raise PlanError(f"cannot write {what} `{target}`: `{folder}` is a file, not a folder")
    try:
        os.rmdir(_make_probe_dir(folder))
    except OSError as exc:
        raise PlanError(f"cannot write {what} `{target}`: `{folder}` is not writable "
                        f"({exc.strerror or exc})") from None


def _make_probe_dir(folder: Path) -> Path:
    probe_dir = folder / f".probe-check-{secrets.token_hex(6)}"
    os.mkdir(probe_dir)
    return probe_dir


def check_report_folder(folder: str | os.PathLike, *, flag: str = "--out") -> None:
    """Refuse a report folder probe could not replace as a whole, before any work is done.

    Raises
    ------
    PlanError
        The path is a file or a symbolic link, holds files other than a report's, or its parent (or nearest existing
        ancestor) cannot be written.
    """
    folder = Path(folder)
    if folder.is_symlink():  # the swap would replace the link itself, not the folder it names
        raise PlanError(f"report folder `{folder}` is a symbolic link; give the folder it points "
                        f"to ({os.path.realpath(folder)}) as {flag}")
    if folder.exists():
        if not folder.is_dir():
            raise PlanError(f"report folder `{folder}` exists and is not a folder; choose another {flag}")
        others = sorted(p.name for p in folder.iterdir() if p.name not in FILE_NAMES.values())
        if others:
            raise PlanError(f"report folder `{folder}` holds files probe did not write (e.g. "
                            f"`{others[0]}`) and is replaced as a whole; choose a new or empty {flag}")
    _can_create_in(_existing_ancestor(folder.parent), folder, "the report folder")


def check_file_target(path: str | os.PathLike, *, flag: str = "--json") -> None:
    """Refuse a file path that cannot be written (a folder there, or no writable parent)."""
    path = Path(path)
    if path.is_dir() or not path.name:
        raise PlanError(f"{flag} `{path}` is a folder; give a file name")
    _can_create_in(_existing_ancestor(path.parent), path, "file")


def render_files(report: Mapping, formats: Sequence[str], *, json_text: str | None = None
                 ) -> dict[str, str]:
    """Each format's text, rendered from the report dict (nothing is written).

    Raises
    ------
    PlanError
        No format, or an unknown one.
    """
    formats = list(dict.fromkeys(formats))
    if not formats:
        raise PlanError(f"`report.formats` is empty; list some of {', '.join(FILE_NAMES)}")
    unknown = [f for f in formats if f not in FILE_NAMES]
    if unknown:
        raise PlanError(
            f"`report.formats` has unknown format {unknown[0]!r}; expected some of "
            f"{', '.join(repr(k) for k in FILE_NAMES)}"
        )
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
    return texts


def _exchange(a: Path, b: Path) -> bool:
    """Swap two paths atomically (Linux ``renameat2(RENAME_EXCHANGE)``); False when unsupported."""
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        renameat2 = libc.renameat2
    except (OSError, AttributeError):
        return False
    at_fdcwd, rename_exchange = -100, 2
    if renameat2(at_fdcwd, os.fsencode(a), at_fdcwd, os.fsencode(b), rename_exchange) == 0:
        return True
    err = ctypes.get_errno()
    if err in (22, 38, 95):  # EINVAL, ENOSYS, EOPNOTSUPP: this file system cannot; fall back
        return False
    raise OSError(err, os.strerror(err), str(b))


def _swap_in(new: Path, folder: Path) -> None:
    """Put the complete folder ``new`` at ``folder``; the old one ends at ``new`` or is removed."""
    if not folder.exists():
        os.rename(new, folder)
        return
    if _exchange(new, folder):
        return  # `new` now holds the old folder; the caller removes it
    old = _hidden_sibling(folder, "old")
    os.rename(folder, old)
    swapped = False
    try:
        os.rename(new, folder)
        swapped = True
    finally:
        if swapped:
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.rename(old, folder)


def write_report(
    report: dict,
    out_dir: str | os.PathLike,
    *,
    formats: Sequence[str] = ("json", "html", "md", "junit"),
    json_text: str | None = None,
) -> dict[str, Path]:
    """Write the report folder ``out_dir``, replacing an existing one as a whole.

    Parameters
    ----------
    report : dict
        The ``probe.report/2`` dict; never modified.
    out_dir : str or path-like
        The report folder; its parents are created when missing. An existing folder must be empty
        or hold only report files (:func:`check_report_folder`).
    formats : sequence of str, default=("json", "html", "md", "junit")
        Which files to write: ``json`` → ``report.json``, ``html`` → ``report.html``,
        ``md`` → ``report.md``, ``junit`` → ``junit.xml``.
    json_text : str or None, default=None
        The canonical JSON text to write as ``report.json``; when None, the dict is dumped with
        ``indent=2`` and ``allow_nan=False``.

    Returns
    -------
    dict of str to Path
        Format → the path written, in the order of ``formats``.

    Raises
    ------
    PlanError
        No format or an unknown one, or an ``out_dir`` that cannot be (re)placed.
    """
    texts = render_files(report, formats, json_text=json_text)  # before touching the disk
    folder = Path(out_dir)
    check_report_folder(folder)
    try:
        folder.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise PlanError(f"cannot create report folder `{folder}`: {exc.strerror or exc}") from None
    staging = _hidden_sibling(folder, "tmp")
    try:
        os.mkdir(staging)
        for fmt, text in texts.items():
            _write_synced(staging / FILE_NAMES[fmt], text.encode("utf-8"))
            _test_pause()
        _fsync_dir(staging)
        with _signals_held():
            _swap_in(staging, folder)
        _fsync_dir(folder.parent)
    except OSError as exc:
        raise PlanError(f"cannot write report folder `{folder}`: {exc.strerror or exc}") from None
    finally:
        with _signals_held():
            shutil.rmtree(staging, ignore_errors=True)  # after an exchange: the old folder
    return {fmt: folder / FILE_NAMES[fmt] for fmt in texts}


def write_file(path: str | os.PathLike, text: str) -> Path:
    """Write one file atomically (its parents created when missing); returns its path.

    Raises
    ------
    PlanError
        The file or its folder cannot be written.
    """
    path = Path(path)
    tmp = _hidden_sibling(path, "tmp")
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        _write_synced(tmp, text.encode("utf-8"))
        _test_pause()
        os.replace(tmp, path)
        _fsync_dir(path.parent)
    except OSError as exc:
        raise PlanError(f"cannot write file `{path}`: {exc.strerror or exc}") from None
    finally:
        with _signals_held():
            try:
                os.unlink(tmp)
            except FileNotFoundError:
                pass
    return path
