"""Shared formatting of the report's numbers and small phrases, used by the model and every renderer.

Numbers: rates and differences with fixed decimals, counts with thousands separators, shares as
percentages, p- and q-values, intervals ``[low, high]``; ``n/a`` for null. Phrases: the caution, a
rule's bound and status, the verdict word, a metric's name, a slice's label, the confidence level.
Text from the data: :func:`visible` and :func:`visible_all` write control characters as escapes.
"""

from __future__ import annotations

import math
import re
import unicodedata
from collections.abc import Iterable, Mapping
from typing import Any

from ..assemble import CAUTION

__all__ = [
    "CAUTION", "bound_text", "caution_of", "confidence_text", "fmt_bound", "fmt_count", "fmt_est",
    "fmt_interval", "fmt_num", "fmt_p", "fmt_share", "is_number", "metric_name", "rule_status",
    "rule_summary", "rule_title", "slice_label", "status_counts", "verdict_word", "visible",
    "visible_all",
]


# -- text from the data ------------------------------------------------------------------------

# control (Cc: C0, DEL, C1), format (Cf: bidi overrides and isolates, zero-width characters, the
# BOM, soft hyphen), line and paragraph separators (Zl, Zp) and lone surrogates (Cs) are never drawn
# as themselves: each could move the cursor, recolour the terminal, reorder or hide the text around it
_HIDDEN = frozenset(("Cc", "Cf", "Zl", "Zp", "Cs"))
_NOT_PLAIN = re.compile(r"[^\x20-\x7e]")
_SHORT = {"\t": "\\t", "\n": "\\n", "\r": "\\r"}


def _escape_char(match: re.Match) -> str:
    ch = match.group()
    if unicodedata.category(ch) not in _HIDDEN:
        return ch
    if ch in _SHORT:
        return _SHORT[ch]
    code = ord(ch)
    return f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}" if code < 0x10000 else f"\\U{code:08x}"


def visible(text: Any) -> str:
    """``text`` with every control, format and separator character written as its escape.

    ``ESC[31m`` becomes ``\\x1b[31m``, U+202E becomes ``\\u202e``, a carriage return ``\\r``;
    everything else, backslashes included, is kept as it is. Every renderer but the JSON shows the
    data's strings through this (the JSON keeps the true value, escaped by JSON's own rules).
    """
    return _NOT_PLAIN.sub(_escape_char, "" if text is None else str(text))


def visible_all(obj: Any) -> Any:
    """A copy of a report dict (or any part) with :func:`visible` applied to every string, keys too."""
    if isinstance(obj, str):
        return visible(obj)
    if isinstance(obj, Mapping):
        return {visible(k) if isinstance(k, str) else k: visible_all(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [visible_all(v) for v in obj]
    return obj


# -- shared formatting ------------------------------------------------------------------------


def caution_of(report: Mapping) -> str:
    """The report's caution text, or the fixed fallback sentence when it is missing or empty."""
    text = report.get("caution")
    return str(text) if text else CAUTION


def is_number(x: Any) -> bool:
    """True for a finite int or float (not a bool, not None, not NaN)."""
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def fmt_num(x: Any, digits: int = 3) -> str:
    """A rate or difference with fixed decimals; ``n/a`` for null (or NaN that slipped through)."""
    if not is_number(x):
        return "n/a"
    text = f"{x:.{digits}f}"
    return text[1:] if text.startswith("-") and float(text) == 0 else text


def fmt_count(x: Any) -> str:
    """A row count with thousands separators."""
    if not is_number(x):
        return "n/a"
    return f"{int(x):,}"


def fmt_share(x: Any) -> str:
    """A share of rows as a percentage."""
    if not is_number(x):
        return "n/a"
    return f"{100 * x:.1f} %"


def fmt_p(p: Any) -> str:
    """A p- or q-value: three decimals, or two significant digits in e-notation below 0.001."""
    if not is_number(p):
        return "n/a"
    if p == 0:
        return "< 1e-300"  # underflowed: smaller than a double can hold
    return f"{p:.1e}" if p < 0.001 else f"{p:.3f}"


def fmt_bound(x: Any) -> str:
    """A policy threshold as written in the plan (``0.8``, ``0.01``)."""
    if not is_number(x):
        return "n/a" if x is None else str(x)
    return f"{x:g}"


def fmt_interval(est: Mapping | None, digits: int = 3) -> str:
    """``[low, high]`` of an estimate, or ``n/a``."""
    if not est or not (is_number(est.get("low")) and is_number(est.get("high"))):
        return "n/a"
    return f"[{fmt_num(est['low'], digits)}, {fmt_num(est['high'], digits)}]"


def fmt_est(est: Mapping | None, digits: int = 3) -> str:
    """``value [low, high]`` of an estimate; ``n/a`` when the value is null."""
    if not est or not is_number(est.get("value")):
        return "n/a"
    interval = fmt_interval(est, digits)
    value = fmt_num(est["value"], digits)
    return value if interval == "n/a" else f"{value} {interval}"


def bound_text(rule: Mapping) -> str:
    """The bound a rule checks, with its direction when the rule's name gives it (``min_``/``max_``)."""
    name = str(rule.get("name", ""))
    t = fmt_bound(rule.get("threshold"))
    if name.startswith("min_"):
        return f"≥ {t}"
    if name.startswith("max_"):
        return f"≤ {t}"
    return t


def rule_status(rule: Mapping) -> str:
    """``pass``, ``fail`` or ``inconclusive`` (from ``status``, else from ``passed``)."""
    status = rule.get("status")
    if status in ("pass", "fail", "inconclusive"):
        return status
    passed = rule.get("passed")
    return "pass" if passed is True else "fail" if passed is False else "inconclusive"


def rule_title(rule: Mapping) -> str:
    """A rule's name with its subject, e.g. ``min_impact_ratio (sex = F)``."""
    name = str(rule.get("name", "rule"))
    subject = rule.get("subject")
    return f"{name} ({subject})" if subject not in (None, "") else name


def rule_summary(rule: Mapping) -> str:
    """One line: the measured value, its interval and the bound, then the rule's own message."""
    est = rule.get("value") or {}
    value = fmt_num(est.get("value"), 4)
    interval = fmt_interval(est, 4)
    text = f"measured {value}, interval {interval}, bound {bound_text(rule)}"
    message = rule.get("message")
    return f"{text}: {message}" if message else text


def verdict_word(verdict: Mapping | None) -> str:
    """``PASSED``, ``FAILED``, ``INCONCLUSIVE`` or ``NO POLICY``, from ``status`` (else ``passed``).

    The status is the verdict as judged: a policy with inconclusive rules that are not counted as
    failures exits 0 yet is ``INCONCLUSIVE``, not ``PASSED``.
    """
    if not verdict or not verdict.get("rules"):
        return "NO POLICY"
    word = {"pass": "PASSED", "fail": "FAILED", "inconclusive": "INCONCLUSIVE"}
    if verdict.get("status") in word:
        return word[verdict["status"]]
    passed = verdict.get("passed")
    return "PASSED" if passed is True else "FAILED" if passed is False else "INCONCLUSIVE"


def status_counts(rules: Iterable[Mapping]) -> dict[str, int]:
    """How many rules passed, failed and were inconclusive."""
    counts = {"pass": 0, "fail": 0, "inconclusive": 0}
    for rule in rules:
        counts[rule_status(rule)] += 1
    return counts


def confidence_text(report: Mapping) -> str:
    """E.g. ``90 %`` from ``provenance.confidence_level``; says so when the report has none."""
    level = (report.get("provenance") or {}).get("confidence_level")
    return f"{100 * level:g} %" if is_number(level) else "unrecorded-level"


_METRIC_NAMES = {
    "error": "error rate",
    "fpr": "false-positive rate",
    "fnr": "false-negative rate",
    "selection": "selection rate",
}


def metric_name(metric: Any) -> str:
    """A slice metric's readable name: ``fnr`` → ``false-negative rate``; others get `` rate``."""
    m = str(metric or "rate")
    return _METRIC_NAMES.get(m, m if m.endswith("rate") else f"{m} rate")


def predicate_text(predicate: Mapping) -> str:
    """A predicate as readable text, used when a slice carries no label."""
    column, op, value = predicate.get("column"), predicate.get("op"), predicate.get("value")
    if op == "missing":
        return f"{column} is missing"
    if op == "in" and isinstance(value, (list, tuple)) and len(value) == 2:
        low, high = value
        if low is None:
            return f"{column} < {high}"
        if high is None:
            return f"{column} >= {low}"
        return f"{column} in [{low}, {high})"
    return f"{column} = {value}"


def slice_label(found: Mapping) -> str:
    """The slice's label, or its predicates joined with ``&``."""
    label = found.get("label")
    if label:
        return str(label)
    return " & ".join(predicate_text(p) for p in found.get("predicates") or []) or "(all rows)"
