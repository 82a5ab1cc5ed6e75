"""The report model: every section of a report as titles, paragraphs and tables of formatted cells.

:func:`build_model` reads the report dict (what ``report.json`` holds) once and writes all the
wording: section titles, intro sentences, column headers and what each column means, the confidence
level (from ``provenance.confidence_level``), whether rows were held out, the formatted numbers and
the caution. The renderers (:mod:`~probe.report.markdown`, :mod:`~probe.report.html`,
:mod:`~probe.report.terminal`) only lay this model out; they never look at the report dict's
numbers themselves, so the three files say the same thing in the same words.

The section builders for groups, slices, flips, proxies and the comparison are in
:mod:`probe.report.sections`; the verdict and provenance are here.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Union

from .fmt import (
    bound_text,
    caution_of,
    fmt_count,
    fmt_interval,
    fmt_num,
    is_number,
    rule_status,
    status_counts,
    verdict_word,
    visible_all,
)

__all__ = [
    "Cell", "Code", "Column", "Heading", "Item", "Items", "Line", "Paragraph", "Plot", "PlotRow",
    "Pre", "ReportModel", "Section", "Table", "build_model", "est_cell", "text_cell",
]


@dataclass(frozen=True)
class Code:
    """A literal (path, model spec, hash, command) shown in a monospace font."""

    text: str


#: A paragraph is a run of plain text and code pieces.
Inline = Union[str, Code]


@dataclass(frozen=True)
class Cell:
    """One table cell.

    Attributes
    ----------
    text : str
        The whole cell as plain text (``0.593 [0.568, 0.618]``).
    value, interval : str
        For an estimate, the number and its ``[low, high]`` apart (a renderer may dim the interval);
        empty otherwise.
    status : str
        ``pass``, ``fail`` or ``inconclusive`` for a rule's status cell, else empty.
    flag : bool
        Draws attention (an impact ratio below 0.8).
    tag : str
        A short aside after the text, e.g. ``small``.
    code : bool
        A literal shown in monospace.
    """

    text: str
    value: str = ""
    interval: str = ""
    status: str = ""
    flag: bool = False
    tag: str = ""
    code: bool = False


@dataclass(frozen=True)
class Column:
    """A table column: its header, what it means, and how it lines up.

    ``numeric`` columns hold only numbers formatted here (right-aligned, never escaped in Markdown);
    ``label`` columns may wrap. ``compact`` says what the terminal shows: ``"full"`` the cell,
    ``"value"`` the number without its interval, ``""`` nothing.
    """

    header: str
    meaning: str = ""
    numeric: bool = False
    label: bool = False
    compact: str = "full"


@dataclass(frozen=True)
class Table:
    """Rows of cells under columns; ``detail`` tables are folded away (HTML) or left out (terminal)."""

    columns: tuple[Column, ...]
    rows: tuple[tuple[Cell, ...], ...]
    caption: str = ""
    detail: bool = False


@dataclass(frozen=True)
class Paragraph:
    parts: tuple[Inline, ...]


@dataclass(frozen=True)
class Heading:
    text: str


@dataclass(frozen=True)
class Item:
    """One sentence of a list, with its short name and the notes that qualify it."""

    text: str
    title: str = ""
    notes: tuple[str, ...] = ()
    essential: bool = False  # shown even in the terminal's short view


@dataclass(frozen=True)
class Items:
    """A list of sentences; the terminal shows the first ``compact`` and every one with notes."""

    items: tuple[Item, ...]
    numbered: bool = False
    compact: int = 0


@dataclass(frozen=True)
class Pre:
    """Preformatted text (the plan as run) under a short summary."""

    summary: str
    text: str
    language: str = ""


@dataclass(frozen=True)
class PlotRow:
    """One plotted item: a label and an estimate (``value``, ``low``, ``high`` may be None)."""

    label: str
    value: float | None
    low: float | None = None
    high: float | None = None
    note: str = ""  # the exact numbers, for the row's tooltip / accessible name
    flagged: bool = False  # drawn in the warning colour


@dataclass(frozen=True)
class Line:
    """A vertical reference line at ``x`` with a short legend text."""

    x: float
    label: str
    dashed: bool = True


@dataclass(frozen=True)
class Plot:
    """An interval plot (drawn as SVG by the HTML report): rows, reference lines and its wording."""

    title: str
    x_label: str
    description: str
    rows: tuple[PlotRow, ...]
    lines: tuple[Line, ...] = ()
    clamp: tuple[float, float] | None = (0.0, 1.0)
    include_zero: bool = False


Block = Union[Paragraph, Heading, Table, Items, Pre, Plot]


@dataclass(frozen=True)
class Section:
    """One section: its anchor ``key``, title, navigation name and blocks in reading order.

    ``ran`` is False for a section the run did not ask for (its one paragraph says so).
    """

    key: str
    title: str
    nav: str
    blocks: tuple[Block, ...]
    ran: bool = True


@dataclass(frozen=True)
class ReportModel:
    """The whole report as the renderers see it.

    Attributes
    ----------
    caution : str
    verdict : str
        ``PASSED``, ``FAILED``, ``INCONCLUSIVE`` or ``NO POLICY``.
    counts : dict
        Rules that passed, failed and were inconclusive.
    meta : tuple of (str, str)
        Model spec, data path, creation time and probe version, where known.
    sections : tuple of Section
    design : Paragraph or None
        The sampling design's line (:mod:`probe.report.design`); None for a plain run.
    """

    caution: str
    verdict: str
    counts: Mapping[str, int]
    meta: tuple[tuple[str, str], ...]
    sections: tuple[Section, ...]
    design: Paragraph | None = None


# -- cells -------------------------------------------------------------------------------------


def text_cell(text, **kwargs) -> Cell:
    """A cell of plain text (``None`` becomes empty)."""
    return Cell("" if text is None else str(text), **kwargs)


def est_cell(est: Mapping | None, digits: int = 3, **kwargs) -> Cell:
    """``value [low, high]`` of an estimate, with the two parts kept apart; ``n/a`` when null."""
    if not est or not is_number(est.get("value")):
        return Cell("n/a", **kwargs)
    value, interval = fmt_num(est["value"], digits), fmt_interval(est, digits)
    if interval == "n/a":
        return Cell(value, value=value, **kwargs)
    return Cell(f"{value} {interval}", value=value, interval=interval, **kwargs)


def not_run(key: str, title: str, nav: str) -> Section:
    return Section(key, title, nav, (Paragraph(("Not run.",)),), ran=False)


# -- verdict -----------------------------------------------------------------------------------

_ORDER = {"fail": 0, "inconclusive": 1, "pass": 2}
_STATUS_COLUMN = Column("status")


def _verdict(report: Mapping) -> Section:
    verdict = report.get("verdict") or {}
    rules = verdict.get("rules") or []
    title = f"Verdict: {verdict_word(verdict)}"
    if not rules:
        return Section("verdict", title, "Verdict", (Paragraph(("No policy rules were checked.",)),))
    c = status_counts(rules)
    inconclusive = f"{c['inconclusive']} inconclusive"
    if c["inconclusive"]:
        counted = "counted" if verdict.get("fail_on_inconclusive") else "not counted"
        inconclusive += f" ({counted} as failures)"
    ec = verdict.get("error_control") or {}
    rate, n_rules = ec.get("error_rate"), ec.get("rules_judged")
    error = (f" The verdict's error rate is at most {100 * rate:g} %: each subject is judged on a "
             f"simultaneous interval (Bonferroni over the {n_rules} rule(s) judged and each rule's "
             "family, level in the table), so the chance that any subject is wrongly failed or "
             "wrongly passed is at most that."
             if is_number(rate) and n_rules else "")
    least = (f" A subject with fewer than {ec['min_rows']} rows, or an interval of zero width, is "
             "inconclusive." if is_number(ec.get("min_rows")) else "")
    intro = (
        f"{len(rules)} rule checks: {c['pass']} passed, {c['fail']} failed, {inconclusive}. A subject "
        "passes only when its whole interval is on the right side of the bound, and fails only when "
        f"its whole interval is on the wrong side.{error}{least}"
    )
    ranked = sorted(rules, key=lambda r: _ORDER[rule_status(r)])
    by_name: dict = {}
    for r in ranked:
        by_name.setdefault(r.get("name"), []).append(r)
    summary = []
    for name, group in by_name.items():
        worst, n = group[0], status_counts(group)
        tally = ", ".join(f"{n[k]} {k}" for k in ("fail", "inconclusive", "pass") if n[k])
        summary.append((
            Cell(rule_status(worst), status=rule_status(worst)), text_cell(name),
            text_cell(bound_text(worst)), Cell(tally), text_cell(worst.get("subject")),
            est_cell(worst.get("value"), 4), text_cell(worst.get("message")),
        ))
    measured = Column("measured", "the rule's statistic with its simultaneous interval",
                      numeric=True)
    summary_columns = (
        Column("worst", "the worst status among the rule's subjects"), Column("rule"),
        Column("bound"), Column("subjects", "how many subjects had each status"),
        Column("worst subject", label=True), measured, Column("note", label=True),
    )
    rows = tuple(
        (
            Cell(rule_status(r), status=rule_status(r)), text_cell(r.get("name")),
            text_cell(r.get("subject")), Cell(fmt_num((r.get("value") or {}).get("value"), 4)),
            Cell(fmt_interval(r.get("value"), 4)), text_cell(_level_text(r)),
            text_cell(bound_text(r)), text_cell(r.get("message")),
        )
        for r in ranked
    )
    all_columns = (
        _STATUS_COLUMN, Column("rule"), Column("subject", label=True),
        Column("measured", "the rule's statistic", numeric=True),
        Column("interval", "its simultaneous interval", numeric=True),
        Column("level", "the interval's confidence level (family size in brackets)"),
        Column("bound"), Column("note", label=True),
    )
    return Section("verdict", title, "Verdict", (
        Paragraph((intro,)),
        Table(summary_columns, tuple(summary), caption="Each rule, by its worst subject"),
        Table(all_columns, rows, caption=f"All {len(rules)} rule checks", detail=True),
    ))


def _level_text(rule: Mapping) -> str | None:
    level, family = rule.get("level"), rule.get("family")
    if not is_number(level):
        return None
    return f"{100 * level:.4g} % ({family})" if family else f"{100 * level:.4g} %"


# -- provenance --------------------------------------------------------------------------------


def _code_or_na(x) -> Cell:
    return Cell(str(x), code=True) if x not in (None, "") else Cell("n/a")


def _provenance(report: Mapping) -> Section:
    p = report.get("provenance") or {}
    model, data = p.get("model") or {}, p.get("data") or {}
    timings = ", ".join(f"{k} {v:.2f} s" if is_number(v) else f"{k} n/a"
                        for k, v in (p.get("timings") or {}).items())
    items = [
        ("probe version", text_cell(p.get("probe_version"))),
        ("created", text_cell(p.get("created"))),
        ("command", _code_or_na(p.get("command"))),
        ("seed", text_cell(p.get("seed"))),
        ("confidence level", text_cell(p.get("confidence_level"))),
        ("favourable decision", text_cell(p.get("favorable"))),
        ("threshold", text_cell(p.get("threshold"))),
        ("model", _code_or_na(model.get("spec"))),
        ("model kind", text_cell(model.get("kind"))),
        ("model SHA-256", _code_or_na(model.get("sha256"))),
        ("model score", text_cell(model.get("score"))),
        ("model features", Cell(", ".join(map(str, model.get("feature_names") or [])))),
        ("data", _code_or_na(data.get("path"))),
        ("data rows", Cell(fmt_count(data.get("rows")))),
        ("data SHA-256", _code_or_na(data.get("sha256"))),
        ("plan SHA-256", _code_or_na(p.get("plan_sha256"))),
        ("versions", Cell(", ".join(f"{k} {v}" for k, v in (p.get("versions") or {}).items()))),
        ("timings", Cell(timings)),
    ]
    blocks: list = [Table((Column("item"), Column("value", label=True)),
                          tuple((Cell(k), v) for k, v in items))]
    if p.get("plan") is not None:
        text = json.dumps(p["plan"], indent=2, ensure_ascii=False, default=str)
        blocks.append(Pre("The plan as run", text, "json"))
    return Section("provenance", "Provenance", "Provenance", tuple(blocks))


# -- the whole report --------------------------------------------------------------------------


def build_model(report: Mapping) -> ReportModel:
    """Build the report model from a ``probe.report/2`` dict.

    Parameters
    ----------
    report : dict
        The report dict, exactly as ``report.json`` holds it. Sections that were not run are null;
        a flip row's ``notes`` may be absent (older reports).

    Returns
    -------
    ReportModel
        Verdict, groups, slices, flips, proxies (only when run), comparison and provenance, in that
        order. Every string from the report is shown through :func:`~probe.report.fmt.visible`
        (control characters escaped). The input is not modified.
    """
    from . import attributes, design, sections  # the section builders use this module's types

    report = visible_all(report)
    p = report.get("provenance") or {}
    meta = tuple((k, str(v)) for k, v in (
        ("model", (p.get("model") or {}).get("spec")), ("data", (p.get("data") or {}).get("path")),
        ("created", p.get("created")), ("probe", p.get("probe_version")),
    ) if v not in (None, ""))
    parts = [_verdict(report), sections.groups(report), sections.slices(report),
             attributes.flips(report)]
    if report.get("proxies"):
        parts.append(attributes.proxies(report))
    parts += [sections.comparison(report), _provenance(report)]
    rules = (report.get("verdict") or {}).get("rules") or []
    return ReportModel(caution_of(report), verdict_word(report.get("verdict")),
                       status_counts(rules), meta, tuple(parts), design.design_paragraph(report))
