"""``report.md``: the report model laid out as GitHub-flavoured Markdown.

All wording and numbers come from :func:`probe.report.model.build_model`; this module only writes
headings, paragraphs, pipe tables, lists and a fenced block, and escapes every string that is not a
number formatted by the model, so a ``|`` cannot split a table cell and ``<script>`` or ``[x](y)``
stay text. Pictures are left to the HTML report.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from typing import Any

from .model import Cell, Code, Heading, Items, Paragraph, Pre, Section, Table, build_model

__all__ = ["md_escape", "render_markdown"]

_MD_SPECIAL = re.compile(r"([\\`*_{}\[\]<>|#~&!])")
_STATUS = {"pass": "✅ pass", "fail": "❌ fail", "inconclusive": "⚠️ inconclusive"}


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


def _cell(cell: Cell, numeric: bool) -> str:
    if cell.status:
        return _STATUS[cell.status]
    if cell.code:
        return _code(cell.text)
    text = cell.text if numeric else md_escape(cell.text)
    return text + (f" *({cell.tag})*" if cell.tag else "")


def _table(table: Table, legends: set) -> list[str]:
    cols = table.columns
    lines = ["| " + " | ".join(md_escape(c.header) for c in cols) + " |",
             "| " + " | ".join("---:" if c.numeric else "---" for c in cols) + " |"]
    for row in table.rows:
        lines.append("| " + " | ".join(_cell(x, c.numeric) or " " for x, c in zip(row, cols)) + " |")
    lines.append("")
    meant = "; ".join(f"{md_escape(c.header)}: {md_escape(c.meaning)}" for c in cols if c.meaning)
    if not meant or meant in legends:  # said once per section
        return lines
    legends.add(meant)
    return lines + [f"*Columns.* {meant}.", ""]


# an interval of two numbers cannot start a link, so it is shown as written: [0.690, 0.730]
_INTERVAL = re.compile(r"\\\[(-?[\d.,]+, -?[\d.,]+)\\\]")


def _paragraph(p: Paragraph) -> str:
    return "".join(_code(x.text, table=False) if isinstance(x, Code)
                   else _INTERVAL.sub(r"[\1]", md_escape(x)) for x in p.parts)


def _items(block: Items) -> list[str]:
    out = []
    for i, item in enumerate(block.items, 1):
        lead = f"{item.title or i}. " if block.numbered else "- "
        out.append(lead + md_escape(item.text))
        out += [f"   - {md_escape(n)}" for n in item.notes]
    return out + [""]


def _pre(block: Pre) -> list[str]:
    longest = max((len(m) for m in re.findall(r"`+", block.text)), default=0)
    fence = "`" * max(3, longest + 1)
    return [f"{md_escape(block.summary)}:", "", f"{fence}{block.language}", block.text, fence, ""]


def _section(section: Section) -> list[str]:
    out, legends = [f"## {md_escape(section.title)}", ""], set()
    for block in section.blocks:
        if isinstance(block, Heading):
            out += [f"### {md_escape(block.text)}", ""]
        elif isinstance(block, Paragraph):
            out += [_paragraph(block), ""]
        elif isinstance(block, Table):
            out += ([f"**{md_escape(block.caption)}**", ""] if block.caption else []) + _table(block, legends)
        elif isinstance(block, Items):
            out += _items(block)
        elif isinstance(block, Pre):
            out += _pre(block)
    return out


def render_markdown(report: Mapping) -> str:
    """Render a ``probe.report/2`` dict as GitHub-flavoured Markdown.

    Parameters
    ----------
    report : dict
        The report dict, exactly as ``report.json`` holds it. Sections that were not run are null.

    Returns
    -------
    str
        The Markdown text, ending with a newline: title, the sampling design (when there is
        one), caution, verdict, groups, slices, flips,
        proxies (when run), comparison, provenance. User strings are escaped; every table row has
        the header's number of cells.
    """
    model = build_model(report)
    lines = ["# probe report", ""]
    if model.design is not None:
        lines += [_paragraph(model.design), ""]
    lines += [f"> **Caution.** {md_escape(model.caution)}", ""]
    for section in model.sections:
        lines += _section(section)
    return "\n".join(lines).rstrip("\n") + "\n"
