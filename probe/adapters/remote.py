"""Kinds ``command`` and ``http``: models in another process, scored once per batch.

``cmd:COMMAND`` splits the command with :func:`shlex.split` (no shell), runs it in ``base_dir``
with the batch as CSV with a header on stdin, and reads one score per line from stdout.
``http(s)://HOST:PORT/PATH`` POSTs ``{"records": [...]}`` and reads a JSON list of numbers or
``{"scores": [...]}``.

Both honour ``timeout`` (seconds per batch), as isolated models do: a command still running after
``timeout`` seconds is killed; a request gives up when the endpoint stays silent that long
(connecting or between reads). Either way the batch fails with a
:class:`~probe.errors.ModelError`. They run outside this process already, so they are never
isolated again.
"""

from __future__ import annotations

import json
import os
import shlex
import shutil
import subprocess
import urllib.error
import urllib.request
from typing import Any

import numpy as np
import pandas as pd

from probe.errors import ModelError

from .files import resolve
from .messages import first_line
from .model import BatchFailure, Model
from .options import Options

__all__ = ["load_command", "load_http"]


def load_command(text: str, opts: Options) -> Model:
    """A Model that runs ``cmd:COMMAND`` once per batch, within ``opts.timeout`` seconds."""
    command = text[4:].strip()
    try:
        argv = shlex.split(command)
    except ValueError as exc:
        raise ModelError(f"model spec `{text}`: cannot split the command: {exc}") from exc
    if not argv:
        raise ModelError(f"model spec `{text}` names no command (cmd:COMMAND)")
    program = argv[0]
    if os.sep in program or "/" in program:
        found = resolve(program, opts.base).is_file()
    else:
        found = shutil.which(program) is not None
    if not found:
        raise ModelError(f"model `{text}`: the program `{program}` was not found")
    cwd = str(opts.base)
    timeout = opts.timeout

    def score(batch: pd.DataFrame) -> np.ndarray:
        payload = batch.to_csv(index=False).encode("utf-8")
        try:
            proc = subprocess.run(argv, input=payload, capture_output=True, cwd=cwd,
                                  timeout=timeout, check=False)
        except subprocess.TimeoutExpired:
            raise BatchFailure(f"the command did not finish within {timeout:g} s") from None
        except OSError as exc:
            raise BatchFailure(f"cannot run the command: {exc.strerror or exc}") from None
        if proc.returncode != 0:
            lines = [ln for ln in proc.stderr.decode("utf-8", "replace").splitlines()
                     if ln.strip()]
            last = lines[-1].strip() if lines else "(nothing on stderr)"
            raise BatchFailure(f"the command exited with code {proc.returncode}: {last}")
        lines = proc.stdout.decode("utf-8", "replace").splitlines()
        while lines and not lines[-1].strip():
            lines.pop()
        if len(lines) != len(batch):
            raise BatchFailure(
                f"the command printed {len(lines)} lines for {len(batch)} rows "
                "(one score per line expected)"
            )
        out = np.empty(len(lines), dtype=np.float64)
        for i, line in enumerate(lines):
            try:
                out[i] = float(line.strip())
            except ValueError:
                raise BatchFailure(
                    f"line {i + 1} of the command's output is not a number: {line.strip()!r:.60}"
                ) from None
        return out

    return Model(
        spec=text, kind="command", sha256=None, feature_names=opts.feature_names,
        categories={}, score_batch=score,
        transform="scores printed by the command (CSV rows on stdin, one score per line)",
        probability=True, details={"argv": argv, "timeout": timeout},
        batch_size=opts.batch_size, allow_unseen=opts.allow_unseen,
    )


def load_http(text: str, opts: Options) -> Model:
    """A Model that POSTs each batch to the URL, giving up after ``opts.timeout`` s of silence."""
    url = text
    timeout = opts.timeout

    def score(batch: pd.DataFrame) -> np.ndarray:
        body = _records_json(batch)
        request = urllib.request.Request(
            url, data=body, method="POST",
            headers={"Content-Type": "application/json", "Accept": "application/json"},
        )
        try:
            with urllib.request.urlopen(request, timeout=timeout) as response:
                raw = response.read()
        except urllib.error.HTTPError as exc:
            detail = first_line(exc.read(2000).decode("utf-8", "replace")) if exc.fp else ""
            raise BatchFailure(
                f"HTTP {exc.code} {exc.reason}" + (f": {detail}" if detail else "")
            ) from None
        except urllib.error.URLError as exc:
            if isinstance(exc.reason, TimeoutError):
                raise BatchFailure(f"no answer within {timeout:g} s") from None
            raise BatchFailure(f"cannot reach {url}: {exc.reason}") from None
        except TimeoutError:
            raise BatchFailure(f"no answer within {timeout:g} s") from None
        except OSError as exc:
            raise BatchFailure(f"cannot reach {url}: {exc}") from None
        return _parse_scores_json(raw)

    return Model(
        spec=text, kind="http", sha256=None, feature_names=opts.feature_names, categories={},
        score_batch=score,
        transform='scores from the endpoint (POST {"records": [...]} per batch)',
        probability=True, details={"timeout": timeout}, batch_size=opts.batch_size,
        allow_unseen=opts.allow_unseen,
    )


def _records_json(batch: pd.DataFrame) -> bytes:
    names = [str(c) for c in batch.columns]
    columns = [batch.iloc[:, j].to_numpy(dtype=object, na_value=None)
               for j in range(batch.shape[1])]
    records = [dict(zip(names, row)) for row in zip(*columns)] if columns \
        else [{} for _ in range(len(batch))]
    try:
        return json.dumps({"records": records}, default=_json_default,
                          allow_nan=False).encode("utf-8")
    except ValueError:
        raise BatchFailure("the rows hold infinite values, which JSON cannot carry") from None


def _json_default(value: Any) -> Any:
    if isinstance(value, np.generic):
        return value.item()
    if hasattr(value, "isoformat"):
        return value.isoformat()
    return str(value)


def _parse_scores_json(raw: bytes) -> np.ndarray:
    try:
        payload = json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, ValueError):
        start = raw[:40].decode("utf-8", "replace")
        raise BatchFailure(f"the response is not JSON (it starts {start!r})") from None
    if isinstance(payload, dict) and "scores" in payload:
        payload = payload["scores"]
    if not isinstance(payload, list):
        raise BatchFailure(
            'the response is neither a JSON list of numbers nor {"scores": [...]}'
        )
    out = np.empty(len(payload), dtype=np.float64)
    for i, v in enumerate(payload):
        if v is None:
            out[i] = np.nan
        elif isinstance(v, (int, float)) and not isinstance(v, bool):
            out[i] = v
        else:
            raise BatchFailure(f"item {i} of the response is not a number: {v!r:.60}")
    return out
