"""The terminal view of a report: the report model laid out with rich, verdict panel first.

All wording and numbers come from :func:`probe.report.model.build_model`. The terminal is the short
view: it shows each table's ``compact`` columns, leaves out detail tables and pictures, and lists
the first few sentences of a list plus every one that carries notes. Everything goes through one
injectable ``Console`` (tests render onto a fixed-width, colourless one), and every string goes in
as ``rich.text.Text``, never as markup, so ``income[k]`` stays ``income[k]``.
"""

from __future__ import annotations

from contextlib import contextmanager

from rich import box
from rich.console import Console, ConsoleOptions, Group
from rich.measure import Measurement
from rich.panel import Panel
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table as RichTable
from rich.text import Text

from .fmt import visible
from .model import Cell, Code, Heading, Items, Paragraph, Section, Table, build_model

__all__ = ["progress", "render"]

_STYLE = {"pass": "green", "fail": "bold red", "inconclusive": "yellow", "no policy": "cyan"}
_VERDICT_STYLE = {"PASSED": "green", "FAILED": "bold red", "INCONCLUSIVE": "yellow"}


def _cell(cell: Cell, how: str) -> Text:
    if cell.status:
        return Text(cell.status, style=_STYLE[cell.status])
    text = cell.value if how == "value" and cell.value else cell.text
    out = Text(text, style="bold red" if cell.flag else "")
    if cell.tag:
        out.append(f" ({cell.tag})", style="dim")
    return out


_LABEL_MIN = 12  # a label column folds, but keeps room to be read


def _min_width(table: Table, j: int) -> int:
    """Numbers never break: a numeric column is as wide as its widest cell or its whole header
    (rich wraps neither). A label column gets its widest cell up to :data:`_LABEL_MIN` (then
    folds); another text column its longest word. A header breaks between words, never inside
    one."""
    c = table.columns[j]
    header = max((len(w) for w in c.header.split()), default=1)
    texts = [_cell(row[j], c.compact).plain for row in table.rows]
    if c.numeric:  # rich never wraps a no-wrap column, its header included
        return max(len(c.header), *(len(t) for t in texts))
    if c.label:
        return max(header, min(_LABEL_MIN, max(len(t) for t in texts)))
    return max(header, *(len(w) for t in texts for w in t.split() or [""]))


class _Fitted:
    """A table laid out at the width it is given: in columns when every column fits at its minimum
    width, else one record per block (``header: value`` lines), so no column is dropped and no
    number is cut."""

    def __init__(self, table: Table):
        self.table = table
        self.shown = [j for j, c in enumerate(table.columns) if c.compact]

    def _columns(self) -> RichTable:
        t = RichTable(box=box.SIMPLE_HEAD, pad_edge=False, show_edge=False, collapse_padding=True)
        for j in self.shown:
            c = self.table.columns[j]
            t.add_column(c.header, justify="right" if c.numeric else "left",
                         overflow="ellipsis" if c.numeric else "fold", no_wrap=c.numeric,
                         min_width=_min_width(self.table, j))
        for row in self.table.rows:
            t.add_row(*(_cell(row[j], self.table.columns[j].compact) for j in self.shown))
        return t

    def _records(self, width: int):
        cols = self.table.columns
        lead = []  # the leading text columns name the record (a numeric first column: its header)
        for j in self.shown[:3]:
            if cols[j].numeric:
                break
            lead.append(j)
        for row in self.table.rows:
            title = (" · ".join(row[j].text for j in lead) if lead
                     else f"{cols[self.shown[0]].header} {row[self.shown[0]].text}")
            yield Text(title, style="bold")
            for j in self.shown:
                value = _cell(row[j], cols[j].compact)
                if j in lead or (not lead and j == self.shown[0]) or not value.plain:
                    continue
                head = Text(f"  {cols[j].header}: ", style="dim")
                if cols[j].numeric and head.cell_len + value.cell_len > width:
                    yield head  # the number goes whole on a line of its own
                    yield Text("    ").append_text(value)
                else:
                    yield head.append_text(value)

    def __rich_console__(self, console: Console, options: ConsoleOptions):
        t = self._columns()
        # measured without the width limit (a measurement within it is capped at the limit)
        if Measurement.get(console, options.update_width(10_000), t).minimum <= options.max_width:
            yield t
        else:
            yield from self._records(options.max_width)


def _table(table: Table) -> _Fitted | None:
    if table.detail or not table.rows:
        return None
    return _Fitted(table)


def _legend(table: Table) -> Text | None:
    meant = "; ".join(f"{c.header}: {c.meaning}" for c in table.columns if c.compact and c.meaning)
    return Text(f"  {meant}.", style="dim") if meant else None


def _items(block: Items) -> list[Text]:
    out = []
    for i, item in enumerate(block.items):
        if not (i < block.compact or item.notes or item.essential):
            continue
        lead = f"  {item.title}. " if block.numbered else f"  {item.title}: " if item.title else "  "
        if item.notes and not block.numbered and i >= block.compact and not item.essential:
            out.append(Text(lead.rstrip(": ") + ":"))  # the test's name, then its notes
        else:
            out.append(Text(lead + item.text))
        out += [Text(f"      note: {n}", style="dim") for n in item.notes]
    return out


def _plain(p: Paragraph) -> str:
    return "".join(x.text if isinstance(x, Code) else x for x in p.parts)


def _leads_to_detail(following) -> bool:
    nxt = next((b for b in following if not isinstance(b, (Heading, Paragraph))), None)
    return isinstance(nxt, Table) and nxt.detail


def _section(section: Section) -> Group:
    parts: list = [Text(section.title, style="bold")]
    legends, blocks = set(), section.blocks
    for k, block in enumerate(blocks):
        if isinstance(block, (Heading, Paragraph)) and _leads_to_detail(blocks[k + 1:]):
            continue  # the heading and intro of a table the terminal leaves out
        if isinstance(block, Heading):
            parts.append(Text(block.text, style="bold"))
        elif isinstance(block, Paragraph):
            parts.append(Text(_plain(block)))
        elif isinstance(block, Table):
            t = _table(block)
            if t is not None:
                parts.append(t)
                legend = _legend(block)
                if legend is not None and legend.plain not in legends:
                    legends.add(legend.plain)
                    parts.append(legend)
        elif isinstance(block, Items):
            parts += _items(block)
    return Group(*parts, Text(""))


def _verdict_panel(section: Section, verdict: str, counts) -> Panel:
    head = Text(f"verdict: {verdict}", style=_VERDICT_STYLE.get(verdict, "cyan"))
    if sum(counts.values()):
        head.append(f"   {counts['pass']} pass · {counts['fail']} fail · "
                    f"{counts['inconclusive']} inconclusive", style="")
    lines: list = [head]
    for block in section.blocks:
        if isinstance(block, Paragraph):
            lines.append(Text("".join(str(x) for x in block.parts), style="dim"))
        elif isinstance(block, Table) and not block.detail:
            # per rule: worst status, name, tally; then the worst subject; then its numbers, which
            # start a line of their own so that an interval is never cut between two lines
            rules = RichTable.grid(padding=(0, 1))
            rules.add_column(min_width=12, no_wrap=True)
            rules.add_column(overflow="fold")
            for status, name, bound, tally, subject, measured, note in block.rows:
                body = Group(Text(f"{name.text} {bound.text}: {tally.text}"),
                             Text(f"e.g. {subject.text}", style="dim"),
                             Text(f"{measured.text}: {note.text}", style="dim"))
                rules.add_row(Text(status.text, style=_STYLE.get(status.status, "")), body)
            lines.append(rules)
    return Panel(Group(*lines), box=box.ROUNDED, title="probe", title_align="left")


def render(report: dict, console: Console, *, quiet: bool = False, written: dict | None = None) -> None:
    """Print the report: the verdict panel, then groups, slices, flips, proxies, comparison."""
    model = build_model(report)
    counts = model.counts
    if quiet:
        console.print(Text(f"verdict: {model.verdict.lower()} ({counts['fail']} fail, "
                           f"{counts['inconclusive']} inconclusive)"))
        return
    verdict, *rest = model.sections
    console.print(_verdict_panel(verdict, model.verdict, counts))
    if model.design is not None:
        console.print(Text(_plain(model.design), style="dim"))
    for section in rest:
        if section.ran and section.key != "provenance":
            console.print(_section(section))
    if written:  # every file written, the JSON first
        console.print(Text(visible("report: " + ", ".join(str(p) for p in written.values()))))
    console.print(Text(model.caution, style="dim"))


@contextmanager
def progress(console: Console, *, enabled: bool = True):
    """A ``progress(step, done, total)`` callback drawing bars on a terminal; None elsewhere."""
    if not enabled or not console.is_terminal:
        yield None
        return
    bars = Progress(TextColumn("{task.description}"), BarColumn(), TextColumn("{task.completed}/{task.total}"),
                    TimeElapsedColumn(), console=console, transient=True)
    tasks: dict[str, int] = {}

    def update(step: str, done: int, total: int) -> None:
        if step not in tasks:
            tasks[step] = bars.add_task(step, total=total)
        bars.update(tasks[step], completed=done, total=total)

    with bars:
        yield update
