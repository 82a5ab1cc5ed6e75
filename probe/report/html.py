"""``report.html``: the report model laid out as one self-contained page.

All wording and numbers come from :func:`probe.report.model.build_model`; this module only writes
tags: inline CSS, inline SVG pictures (drawn by :mod:`probe.report.svg` from the model's plots), no
script, no external URL, so the file can be mailed, archived or opened offline. Detail tables sit in
``<details>``; every user string goes through :func:`html.escape`; a column's meaning is its header's
``title`` and is listed once under the section's first table that has it. Wide tables scroll
sideways on narrow screens; colours are light and the page prints cleanly.
"""

from __future__ import annotations

from collections.abc import Mapping
from html import escape
from typing import Any

from . import svg
from .model import Cell, Code, Heading, Items, Paragraph, Plot, Pre, Section, Table, build_model

__all__ = ["render_html"]

_CSS = """
:root { color-scheme: light; }
* { box-sizing: border-box; }
body { margin: 0; background: #fff; color: #1f2328; line-height: 1.45;
  font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif; }
main { max-width: 1120px; margin: 0 auto; padding: 1.25rem 1rem 3rem; }
h1 { font-size: 1.6rem; margin: 0 0 .25rem; }
h2 { font-size: 1.3rem; margin: 2.2rem 0 .6rem; padding-bottom: .25rem; border-bottom: 1px solid #d0d7de; }
h3 { font-size: 1.05rem; margin: 1.4rem 0 .4rem; }
p { margin: .4rem 0 .8rem; }
.meta { color: #57606a; font-size: .9rem; overflow-wrap: anywhere; }
nav { font-size: .9rem; margin: .6rem 0 0; display: flex; flex-wrap: wrap; gap: .2rem .9rem; }
nav a { color: #0b5cad; }
.caution { border-left: 4px solid #bf8700; background: #fff8e1; padding: .6rem .9rem; margin: 1rem 0; }
.verdict { display: inline-block; padding: .1rem .6rem; border-radius: 4px; font-weight: 700; }
.v-pass { background: #dafbe1; color: #116329; border: 1px solid #4ac26b; }
.v-fail { background: #ffebe9; color: #a40e26; border: 1px solid #ff8182; }
.v-inconclusive, .v-none { background: #fff8c5; color: #7d4e00; border: 1px solid #d4a72c; }
.st { font-weight: 600; white-space: nowrap; }
.st-pass { color: #116329; } .st-fail { color: #a40e26; } .st-inconclusive { color: #7d4e00; }
.table-wrap { overflow-x: auto; margin: .4rem 0 1rem; -webkit-overflow-scrolling: touch; }
table { border-collapse: collapse; font-size: .88rem; font-variant-numeric: tabular-nums; }
th, td { padding: .3rem .45rem; border-bottom: 1px solid #e4e7eb; text-align: left; vertical-align: top; }
th { background: #f6f8fa; font-weight: 600; white-space: nowrap; }
td.num, th.num { text-align: right; white-space: nowrap; }
td.label { min-width: 10rem; max-width: 28rem; overflow-wrap: break-word; }
td.text { min-width: 14rem; }
tr.fail td { background: #fff5f5; }
.ci { color: #57606a; font-size: .92em; }
caption { text-align: left; padding: 0 0 .2rem; caption-side: top; }
.flag { color: #a40e26; font-weight: 700; }
.small { color: #57606a; font-size: .8rem; }
figure { margin: .6rem 0 1rem; overflow-x: auto; }
svg.plot { max-width: 100%; min-width: 560px; height: auto; display: block; }
code, pre { font-family: ui-monospace, SFMono-Regular, Menlo, Consolas, monospace; font-size: .85rem; }
code { overflow-wrap: anywhere; }
code.name { overflow-wrap: normal; white-space: nowrap; }
pre { background: #f6f8fa; padding: .6rem .8rem; overflow-x: auto; border-radius: 4px; }
ol.sentences li, ul.sentences li { margin: .15rem 0; }
ul.notes { margin: .1rem 0 .3rem; color: #57606a; font-size: .9em; }
p.legend { color: #57606a; font-size: .85rem; margin-top: -.6rem; }
table.kv th { text-align: left; width: 11rem; }
footer { margin-top: 2.5rem; color: #57606a; font-size: .85rem; }
@media (max-width: 640px) { body { font-size: 14px; } main { padding: .8rem .6rem 2rem; } }
@media print {
  body { font-size: 11pt; } main { max-width: none; padding: 0; }
  nav { display: none; }
  h2 { break-after: avoid; } figure, tr { break-inside: avoid; }
  .table-wrap { overflow: visible; }
  .caution, th, tr.fail td, .verdict { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
}
"""


def _e(text: Any) -> str:
    return escape("" if text is None else str(text), quote=True)


_MARK = {"pass": "✓", "fail": "✗", "inconclusive": "?"}


def _cell(cell: Cell, meaning: str) -> str:
    if cell.status:
        return f'<span class="st st-{cell.status}">{_MARK[cell.status]} {cell.status}</span>'
    if cell.code:
        return f"<code>{_e(cell.text)}</code>"
    if cell.flag:
        return f'<span class="flag" title="{_e(meaning)}">{_e(cell.text)}</span>'
    if cell.interval:
        return f'{_e(cell.value)} <span class="ci">{_e(cell.interval)}</span>'
    if cell.text == "n/a":
        return '<span class="ci">n/a</span>'
    tag = f' <span class="small">({_e(cell.tag)})</span>' if cell.tag else ""
    return _e(cell.text) + tag


def _table(table: Table, legends: set) -> str:
    def cls(c):
        return ' class="num"' if c.numeric else ' class="label"' if c.label else ""

    def th(c):
        num = ' class="num"' if c.numeric else ""
        title = f' title="{_e(c.meaning)}"' if c.meaning else ""
        return f'<th scope="col"{num}{title}>{_e(c.header)}</th>'

    head = "".join(th(c) for c in table.columns)
    body = []
    for row in table.rows:
        rc = ' class="fail"' if row and row[0].status == "fail" else ""
        body.append(f"<tr{rc}>" + "".join(f"<td{cls(c)}>{_cell(x, c.meaning)}</td>"
                                          for x, c in zip(row, table.columns)) + "</tr>")
    cap = f'<caption class="small">{_e(table.caption)}</caption>' if table.caption else ""
    out = (f'<div class="table-wrap"><table>{cap}<thead><tr>{head}</tr></thead>'
           f"<tbody>{''.join(body)}</tbody></table></div>")
    meant = "; ".join(f"<strong>{_e(c.header)}</strong>: {_e(c.meaning)}"
                      for c in table.columns if c.meaning)
    if meant and meant not in legends:  # said once per section
        legends.add(meant)
        out += f'<p class="legend">{meant}.</p>'
    if table.detail:
        summary = _e(table.caption or "Details")
        out = f"<details><summary>{summary}</summary>{out}</details>"
    return out


def _paragraph(p: Paragraph, css: str = "") -> str:
    return (f'<p class="{css}">' if css else "<p>") + "".join(f"<code>{_e(x.text)}</code>" if isinstance(x, Code) else _e(x)
                           for x in p.parts) + "</p>"


def _items(block: Items) -> str:
    tag = "ol" if block.numbered else "ul"
    lis = []
    for item in block.items:
        notes = "".join(f"<li>{_e(n)}</li>" for n in item.notes)
        lis.append(f"<li>{_e(item.text)}" + (f'<ul class="notes">{notes}</ul>' if notes else "")
                   + "</li>")
    return f'<{tag} class="sentences">{"".join(lis)}</{tag}>'


def _section(section: Section) -> str:
    if section.key == "verdict":
        word = section.title.split(": ", 1)[-1]
        css = {"PASSED": "pass", "FAILED": "fail", "INCONCLUSIVE": "inconclusive"}.get(word, "none")
        title = f'Verdict: <span class="verdict v-{css}">{_e(word)}</span>'
    else:
        title = _e(section.title)
    out, legends, plots = [f'<section id="{section.key}"><h2>{title}</h2>'], set(), 0
    for block in section.blocks:
        if isinstance(block, Heading):
            out.append(f"<h3>{_e(block.text)}</h3>")
        elif isinstance(block, Paragraph):
            out.append(_paragraph(block))
        elif isinstance(block, Table):
            out.append(_table(block, legends))
        elif isinstance(block, Items):
            out.append(_items(block))
        elif isinstance(block, Plot):
            out.append(f"<figure>{svg.render_plot(block, uid=f'{section.key}-{plots}')}</figure>")
            plots += 1
        elif isinstance(block, Pre):
            out.append(f"<details open><summary>{_e(block.summary)}</summary>"
                       f"<pre>{_e(block.text)}</pre></details>")
    return "".join(out) + "</section>"


def render_html(report: Mapping) -> str:
    """Render a ``probe.report/2`` dict as one self-contained HTML page.

    Parameters
    ----------
    report : dict
        The report dict, exactly as ``report.json`` holds it. Sections that were not run are null.

    Returns
    -------
    str
        An HTML5 document with inline CSS and inline SVG pictures (group selection rates with the
        four-fifths line, a forest plot of the top slices, flip rates), no script and no external
        reference. Every user string is escaped.
    """
    model = build_model(report)
    meta = " · ".join(
        f"{k} <code>{_e(v)}</code>" if k in ("model", "data") else f"{k} {_e(v)}"
        for k, v in model.meta
    )
    nav = "".join(f'<a href="#{s.key}">{_e(s.nav)}</a>' for s in model.sections)
    caution = _e(model.caution)
    design = "" if model.design is None else _paragraph(model.design, "meta design")
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>probe report: {_e(model.verdict)}</title>",
        f"<style>{_CSS}</style></head><body><main>",
        f'<header><h1>probe report</h1><p class="meta">{meta}</p>{design}<nav>{nav}</nav></header>',
        f'<aside class="caution" role="note"><strong>Caution.</strong> {caution}</aside>',
        *(_section(s) for s in model.sections),
        f"<footer><p><strong>Caution.</strong> {caution}</p></footer>",
        "</main></body></html>",
    ]
    return "\n".join(parts) + "\n"
