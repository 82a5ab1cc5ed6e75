"""The canonical JSON text of a report: plain types, NaN as null, stable key order."""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

import numpy as np

from ..assemble import SCHEMA
from ..errors import DataError

__all__ = ["SCHEMA", "plain", "to_json", "read_report"]


def plain(obj: Any) -> Any:
    """Turn numpy scalars and arrays, tuples, paths and NaN/inf into JSON-ready values."""
    if isinstance(obj, dict):
        return {str(k): plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [plain(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [plain(v) for v in obj.tolist()]
    if isinstance(obj, np.generic):
        obj = obj.item()
    if isinstance(obj, float) and (math.isnan(obj) or math.isinf(obj)):
        return None
    if isinstance(obj, Path):
        return str(obj)
    return obj


def to_json(report: dict) -> str:
    """The report as indented JSON text; the same report always gives the same bytes."""
    return json.dumps(plain(report), indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def read_report(path: str | Path) -> dict:
    """Load a saved ``report.json`` (for re-rendering), refusing anything but this schema's report.

    Raises
    ------
    DataError
        Not found, not JSON, not a probe report, or a report of another schema.
    """
    path = Path(path)
    try:
        report = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise DataError(f"report `{path}` not found") from None
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise DataError(f"`{path}` is not a readable JSON file ({exc})") from None
    schema = report.get("schema") if isinstance(report, dict) else None
    if not isinstance(schema, str) or not schema.startswith("probe.report/"):
        raise DataError(f"`{path}` is not a probe report (no `schema` key naming probe.report/N)")
    if schema != SCHEMA:
        raise DataError(f"`{path}` has schema {schema!r}; this probe renders {SCHEMA!r}: re-run "
                        "the analysis with this version")
    return report
