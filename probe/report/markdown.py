"""``report.md``: the report dict rendered as GitHub-flavoured Markdown.

Renders only from the report dict (what ``report.json`` holds), so a saved report can be re-rendered.
The verdict comes first, then groups, slices, flips, the comparison and the provenance; the caution
sits under the title. Every user string (group names, slice labels, paths, messages) is escaped, so a
``|`` cannot split a table cell and ``<script>`` or ``[x](y)`` stay text.

The small formatting helpers here (numbers, intervals, rule bounds, the caution) are shared by the
HTML and JUnit renderers, so the three files say the same thing in the same words.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

__all__ = ["CAUTION", "render_markdown"]

#: The fallback caution, used when a report dict carries none.
CAUTION = (
    "A statistical screen, not a legal finding. The four-fifths rule is a rule of thumb. "
    "Defer to counsel, local law and licensed practice."
)

# -- shared formatting ------------------------------------------------------------------------


def caution_of(report: Mapping) -> str:
    """The report's caution text, or the fixed fallback sentence when it is missing or empty."""
    text = report.get("caution")
    return str(text) if text else CAUTION


def _finite(x: Any) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def fmt_num(x: Any, digits: int = 3) -> str:
    """A rate or difference with fixed decimals; ``n/a`` for null (or NaN that slipped through)."""
    if not _finite(x):
        return "n/a"
    text = f"{x:.{digits}f}"
    return text[1:] if text.startswith("-") and float(text) == 0 else text


def fmt_count(x: Any) -> str:
    """A row count with thousands separators."""
    if not _finite(x):
        return "n/a"
    return f"{int(x):,}"


def fmt_share(x: Any) -> str:
    """A share of rows as a percentage."""
    if not _finite(x):
        return "n/a"
    return f"{100 * x:.1f} %"


def fmt_p(p: Any) -> str:
    """A p- or q-value: three decimals, or two significant digits in e-notation below 0.001."""
    if not _finite(p):
        return "n/a"
    if p == 0:
        return "< 1e-300"  # underflowed: smaller than a double can hold
    return f"{p:.1e}" if p < 0.001 else f"{p:.3f}"


def fmt_bound(x: Any) -> str:
    """A policy threshold as written in the plan (``0.8``, ``0.01``)."""
    if not _finite(x):
        return "n/a" if x is None else str(x)
    return f"{x:g}"


def fmt_interval(est: Mapping | None, digits: int = 3) -> str:
    """``[low, high]`` of an estimate, or ``n/a``."""
    if not est or not (_finite(est.get("low")) and _finite(est.get("high"))):
        return "n/a"
    return f"[{fmt_num(est['low'], digits)}, {fmt_num(est['high'], digits)}]"


def fmt_est(est: Mapping | None, digits: int = 3) -> str:
    """``value [low, high]`` of an estimate; ``n/a`` when the value is null."""
    if not est or not _finite(est.get("value")):
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
    """``PASSED``, ``FAILED``, ``INCONCLUSIVE`` or ``NO POLICY``."""
    if not verdict or not verdict.get("rules"):
        return "NO POLICY"
    passed = verdict.get("passed")
    return "PASSED" if passed is True else "FAILED" if passed is False else "INCONCLUSIVE"


def status_counts(rules: Iterable[Mapping]) -> dict[str, int]:
    """How many rules passed, failed and were inconclusive."""
    counts = {"pass": 0, "fail": 0, "inconclusive": 0}
    for rule in rules:
        counts[rule_status(rule)] += 1
    return counts


def confidence_text(report: Mapping) -> str:
    """E.g. ``95 %`` from ``provenance.confidence_level``."""
    level = (report.get("provenance") or {}).get("confidence_level")
    return f"{100 * level:g} %" if _finite(level) else "95 %"


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


# -- Markdown ----------------------------------------------------------------------------------

_MD_SPECIAL = re.compile(r"([\\`*_{}\[\]<>|#~&!])")


def md_escape(text: Any) -> str:
    """Escape a user string for inline Markdown (table cells, headings, list items)."""
    s = "" if text is None else str(text)
    s = re.sub(r"[\r\n\t]+", " ", s)
    return _MD_SPECIAL.sub(r"\\\1", s)


def _code(text: Any, *, table: bool = True) -> str:
    """An inline code span that survives any backticks (and, in a table cell, pipes) in ``text``."""
    s = re.sub(r"[\r\n]+", " ", str(text))
    if table:
        # in a GFM table a pipe ends the cell even inside a code span; the table consumes the backslash
        s = s.replace("|", "\\|")
    longest = max((len(m) for m in re.findall(r"`+", s)), default=0)
    fence = "`" * (longest + 1)
    pad = " " if s.startswith("`") or s.endswith("`") else ""
    return f"{fence}{pad}{s}{pad}{fence}"


def _table(header: Sequence[str], rows: Iterable[Sequence[str]], align: str = "") -> list[str]:
    """A GFM table; cells must already be escaped. ``align`` is one letter per column (l/r)."""
    align = align.ljust(len(header), "l")
    sep = ["---:" if a == "r" else "---" for a in align]
    lines = ["| " + " | ".join(header) + " |", "| " + " | ".join(sep) + " |"]
    for row in rows:
        if len(row) != len(header):
            raise ValueError(f"table row has {len(row)} cells, header has {len(header)}")
        lines.append("| " + " | ".join(c if c else " " for c in row) + " |")
    return lines + [""]


def _status_cell(status: str) -> str:
    return {"pass": "✅ pass", "fail": "❌ fail", "inconclusive": "⚠️ inconclusive"}[status]


def _verdict(report: Mapping) -> list[str]:
    verdict = report.get("verdict") or {}
    rules = verdict.get("rules") or []
    word = verdict_word(verdict)
    out = [f"## Verdict: {word}", ""]
    if not rules:
        return out + ["No policy rules were checked.", ""]
    c = status_counts(rules)
    inconclusive = f"{c['inconclusive']} inconclusive"
    if c["inconclusive"]:
        inconclusive += (
            " (counted as failures)"
            if verdict.get("fail_on_inconclusive")
            else " (not counted as failures)"
        )
    out += [
        (
            f"{len(rules)} rules: {c['pass']} passed, {c['fail']} failed, {inconclusive}. "
            f"Each rule is judged on the {confidence_text(report)} interval: it passes only when the "
            "whole interval is on the right side of the bound."
        ),
        "",
    ]
    order = {"fail": 0, "inconclusive": 1, "pass": 2}
    ranked = sorted(rules, key=lambda r: order[rule_status(r)])
    out += _table(
        ["status", "rule", "subject", "measured", "interval", "bound", "note"],
        (
            [
                _status_cell(rule_status(r)),
                md_escape(r.get("name")),
                md_escape(r.get("subject")),
                fmt_num((r.get("value") or {}).get("value"), 4),
                fmt_interval(r.get("value"), 4),
                md_escape(bound_text(r)),
                md_escape(r.get("message")),
            ]
            for r in ranked
        ),
        "lllrrll",
    )
    return out


def _by_attribute(groups: Sequence[Mapping]) -> dict[str, list[Mapping]]:
    out: dict[str, list[Mapping]] = {}
    for g in groups:
        out.setdefault(str(g.get("attribute")), []).append(g)
    return out


def _groups(report: Mapping) -> list[str]:
    groups = report.get("groups")
    out = ["## Groups", ""]
    if groups is None:
        return out + ["Not run.", ""]
    if not groups:
        return out + ["No groups.", ""]
    ci = confidence_text(report)
    out += [
        (
            f"Rates with {ci} intervals. The impact ratio is the group's selection rate over the reference "
            "group's; ⚑ marks a ratio below 0.8 (the four-fifths rule of thumb). SPD is the difference in "
            "selection rate and EOD the difference in true-positive rate, both against the reference group. "
            "*small* marks a group under 2 % of the rows."
        ),
        "",
    ]
    unknown = report.get("groups_unknown") or {}
    for attribute, rows in _by_attribute(groups).items():
        ref = rows[0].get("reference_group")
        out += [f"### {md_escape(attribute)}", ""]
        note = f"Reference group: {md_escape(ref)}." if ref is not None else "No reference group."
        if unknown.get(attribute):
            note += (
                f" {fmt_count(unknown[attribute])} rows with this attribute missing are left out."
            )
        out += [note, ""]
        out += _table(
            [
                "group",
                "rows",
                "share",
                "selection rate",
                "impact ratio",
                "4/5",
                "SPD",
                "EOD",
                "error rate",
                "TPR",
                "FPR",
                "FNR",
                "PPV",
            ],
            (
                [
                    md_escape(g.get("group")) + (" *(small)*" if g.get("small") else ""),
                    fmt_count(g.get("rows")),
                    fmt_share(g.get("share")),
                    fmt_est(g.get("selection_rate")),
                    fmt_est(g.get("impact_ratio")),
                    "⚑" if g.get("four_fifths_flag") else "",
                    fmt_est(g.get("spd")),
                    fmt_est(g.get("eod")),
                    fmt_est(g.get("error_rate")),
                    fmt_est(g.get("tpr")),
                    fmt_est(g.get("fpr")),
                    fmt_est(g.get("fnr")),
                    fmt_est(g.get("ppv")),
                ]
                for g in rows
            ),
            "lrrrrlrrrrrrr",
        )
    return out


def _slice_table(found: Sequence[Mapping]) -> list[str]:
    return _table(
        ["rank", "slice", "rows", "share", "rate [low, high]", "gap [low, high]", "q"],
        (
            [
                str(f.get("rank", i)),
                md_escape(slice_label(f)),
                fmt_count(f.get("rows")),
                fmt_share(f.get("share")),
                fmt_est(f.get("rate")),
                fmt_est(f.get("gap")),
                fmt_p(f.get("q_value")),
            ]
            for i, f in enumerate(found, 1)
        ),
        "rlrrrrr",
    )


def _sentences(items: Iterable[Mapping], numbered: bool = True) -> list[str]:
    out = []
    for i, item in enumerate(items, 1):
        if item.get("sentence"):
            lead = f"{item.get('rank', i)}. " if numbered else "- "
            out.append(lead + md_escape(item["sentence"]))
    return out + [""] if out else []


def _slices(report: Mapping) -> list[str]:
    s = report.get("slices")
    out = ["## Slices", ""]
    if s is None:
        return out + ["Not run.", ""]
    found = s.get("found") or []
    metric = md_escape(metric_name(s.get("metric")))
    out += [
        (
            f"Where the {metric} is worst. Overall {metric} {fmt_est(s.get('overall'))}; "
            f"{fmt_count(s.get('tested'))} slices tested on {fmt_count(s.get('search_rows'))} rows, "
            f"rates and q-values (Benjamini–Hochberg) re-estimated on {fmt_count(s.get('estimate_rows'))} "
            "held-out rows. The gap is the slice's rate minus the rate of the rest."
        ),
        "",
    ]
    if not found:
        return out + ["No slice stood out.", ""]
    return out + _slice_table(found) + _sentences(found)


def _flips(report: Mapping) -> list[str]:
    flips = report.get("flips")
    out = ["## Counterfactual flips", ""]
    if flips is None:
        return out + ["Not run.", ""]
    if not flips:
        return out + ["No flip tests.", ""]
    out += [
        (
            "The share of decisions that change when the attribute (direct), also the features that stand "
            "in for it (transport), or the person's nearest twins in the other group (twins) are "
            "considered."
        ),
        "",
    ]

    def row(f: Mapping) -> list[str]:
        if f.get("impossible"):
            rest = ["not possible"] + [""] * 3
        else:
            rest = [
                fmt_est(f.get("flip_rate")),
                fmt_est(f.get("to_favorable")),
                fmt_est(f.get("to_unfavorable")),
                fmt_est(f.get("mean_score_change")),
            ]
        return [
            md_escape(f.get("attribute")),
            md_escape(f.get("mode")),
            md_escape(f"{f.get('from')} → {f.get('to')}"),
            fmt_count(f.get("rows")),
            *rest,
        ]

    out += _table(
        [
            "attribute",
            "mode",
            "change",
            "rows",
            "flip rate",
            "to favourable",
            "to unfavourable",
            "mean score change",
        ],
        (row(f) for f in flips),
        "lllrrrrr",
    )
    out += _sentences(flips, numbered=False)
    concentrated = [(f, s) for f in flips for s in (f.get("by_slice") or [])[:3]]
    if concentrated:
        out += ["### Where the flips concentrate", "",
                "For each flip test, the slices of the other columns with the highest flip rates. These "
                "were picked for being high, so their intervals overstate how certain each is.", ""]
        out += _table(
            ["attribute", "mode", "change", "slice", "rows", "flip rate"],
            ([md_escape(f.get("attribute")), md_escape(f.get("mode")),
              md_escape(f"{f.get('from')} → {f.get('to')}"), md_escape(s.get("label")),
              fmt_count(s.get("rows")), fmt_est(s.get("flip_rate"))] for f, s in concentrated),
            "llllrr",
        )
    return out


def _proxies(report: Mapping) -> list[str]:
    """Proxy rankings, one table per attribute; nothing when the section was not run."""
    proxies = report.get("proxies")
    if not proxies:
        return []
    out = ["## Proxies", "",
           "How well each feature alone stands in for the protected attribute (mutual information, "
           "cross-fitted single-feature AUC) and how much the features together rely on it "
           "(permutation importance in a model predicting the attribute).", ""]
    for p in proxies:
        auc = p.get("multivariate_auc")
        out += [f"### {md_escape(p.get('attribute'))}", ""]
        if auc:
            out += [f"All features together predict it with AUC {fmt_est(auc)}.", ""]
        out += _table(
            ["#", "feature", "mutual information", "AUC alone", "importance"],
            ([str(i), md_escape(r.get("feature")), fmt_num(r.get("mutual_information")),
              fmt_num(r.get("auc")), fmt_num(r.get("importance"))]
             for i, r in enumerate(p.get("features") or [], start=1)),
            "rlrrr",
        )
    return out


def _comparison(report: Mapping) -> list[str]:
    c = report.get("comparison")
    out = ["## Comparison with the baseline", ""]
    if c is None:
        return out + ["Not run.", ""]
    base = c.get("baseline") or {}
    out += [
        (
            f"Baseline {_code(base.get('spec'), table=False)} ({md_escape(base.get('kind'))}, SHA-256 "
            f"{_code(base.get('sha256'), table=False)}). Differences are candidate minus baseline, on the same rows."
        ),
        "",
    ]
    metrics = c.get("metrics") or []
    if metrics:
        out += _table(
            ["metric", "candidate", "baseline", "difference", "p", "test"],
            (
                [
                    md_escape(m.get("metric")),
                    fmt_est(m.get("candidate")),
                    fmt_est(m.get("baseline")),
                    fmt_est(m.get("difference")),
                    fmt_p(m.get("p_value")),
                    md_escape(m.get("test")),
                ]
                for m in metrics
            ),
            "lrrrrl",
        )
    worse = c.get("worse_slices") or []
    out += ["### Slices where the candidate is worse", ""]
    if not worse:
        return out + ["None found.", ""]
    return out + _slice_table(worse) + _sentences(worse)


def _provenance(report: Mapping) -> list[str]:
    p = report.get("provenance") or {}
    model = p.get("model") or {}
    data = p.get("data") or {}
    rows = [
        ("probe version", md_escape(p.get("probe_version"))),
        ("created", md_escape(p.get("created"))),
        ("command", _code(p.get("command")) if p.get("command") else ""),
        ("seed", md_escape(p.get("seed"))),
        ("confidence level", md_escape(p.get("confidence_level"))),
        ("model", f"{_code(model.get('spec'))} ({md_escape(model.get('kind'))})"),
        ("model SHA-256", _code(model.get("sha256")) if model.get("sha256") else "n/a"),
        ("model score", md_escape(model.get("score"))),
        ("model features", md_escape(", ".join(map(str, model.get("feature_names") or [])))),
        ("data", f"{_code(data.get('path'))}, {fmt_count(data.get('rows'))} rows"),
        ("data SHA-256", _code(data.get("sha256")) if data.get("sha256") else "n/a"),
        ("plan SHA-256", _code(p.get("plan_sha256")) if p.get("plan_sha256") else "n/a"),
        (
            "versions",
            md_escape(", ".join(f"{k} {v}" for k, v in (p.get("versions") or {}).items())),
        ),
        (
            "timings",
            md_escape(
                ", ".join(
                    f"{k} {v:.2f} s" if _finite(v) else f"{k} n/a"
                    for k, v in (p.get("timings") or {}).items()
                )
            ),
        ),
    ]
    out = ["## Provenance", ""] + _table(["item", "value"], rows)
    if p.get("plan") is not None:
        text = json.dumps(p["plan"], indent=2, ensure_ascii=False, default=str)
        longest = max((len(m) for m in re.findall(r"`+", text)), default=0)
        fence = "`" * max(3, longest + 1)
        out += ["The plan as run:", "", f"{fence}json", text, fence, ""]
    return out


def render_markdown(report: Mapping) -> str:
    """Render a ``probe.report/1`` dict as GitHub-flavoured Markdown.

    Parameters
    ----------
    report : dict
        The report dict, exactly as ``report.json`` holds it. Sections that were not run are null.

    Returns
    -------
    str
        The Markdown text, ending with a newline: title, caution, verdict, groups, slices, flips,
        comparison, provenance. User strings are escaped; every table row has the header's number
        of cells.
    """
    lines = ["# probe report", "", f"> **Caution.** {md_escape(caution_of(report))}", ""]
    for part in (_verdict, _groups, _slices, _flips, _proxies, _comparison, _provenance):
        lines += part(report)
    return "\n".join(lines).rstrip("\n") + "\n"
