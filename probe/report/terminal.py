"""The terminal view of a report: a verdict panel first, then ranked tables.

Renders from the report dict (what ``report.json`` holds), through one injectable rich ``Console``, so
tests can render onto a fixed-width, colourless console. Every user string (column names, levels,
labels) goes in as ``rich.text.Text``, never as markup, so ``income[k]`` stays ``income[k]``.
"""

from __future__ import annotations

from contextlib import contextmanager
from pathlib import Path

from rich import box
from rich.console import Console, Group
from rich.panel import Panel
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table
from rich.text import Text

__all__ = ["render", "progress", "fmt_estimate"]

_METRIC_WORDS = {"error": "error rate", "fpr": "false-positive rate", "fnr": "false-negative rate",
                 "selection": "selection rate"}
_STYLE = {"pass": "green", "fail": "bold red", "inconclusive": "yellow", "no policy": "cyan"}


def _pct(x) -> str:
    return "–" if x is None else f"{100 * x:.1f}%"


def _num(x, digits=3) -> str:
    return "–" if x is None else f"{x:.{digits}f}"


def fmt_estimate(est: dict | None, *, percent: bool = True) -> str:
    """``12.3% [10.1, 14.8]`` (percent) or ``0.812 [0.74, 0.88]``."""
    if not est or est.get("value") is None:
        return "–"
    if percent:
        low = "–" if est.get("low") is None else f"{100 * est['low']:.1f}"
        high = "–" if est.get("high") is None else f"{100 * est['high']:.1f}"
        return f"{100 * est['value']:.1f} [{low}–{high}]"
    return f"{est['value']:.2f} [{_num(est.get('low'), 2)}–{_num(est.get('high'), 2)}]"


def _q(q) -> str:
    if q is None:
        return "–"
    return "<0.001" if q < 0.001 else f"{q:.3f}"


def _verdict_panel(verdict: dict) -> Panel:
    status = verdict.get("status", "no policy")
    counts = verdict.get("counts", {})
    head = Text(f"verdict: {status.upper()}", style=_STYLE.get(status, ""))
    rules = verdict.get("rules", [])
    if rules:
        head.append(f"   {counts.get('pass', 0)} pass · {counts.get('fail', 0)} fail · "
                    f"{counts.get('inconclusive', 0)} inconclusive", style="")
    lines = [head]
    by_name: dict[str, list[dict]] = {}
    for rule in rules:
        by_name.setdefault(rule["name"], []).append(rule)
    for name, group in by_name.items():
        tally = {k: sum(r["status"] == k for r in group) for k in ("fail", "inconclusive", "pass")}
        worst = next((r for k in ("fail", "inconclusive", "pass") for r in group if r["status"] == k))
        line = Text(f"{worst['status']:<12} ", style=_STYLE.get(worst["status"], ""))
        line.append(f"{name}: " + ", ".join(f"{v} {k}" for k, v in tally.items() if v))
        value = worst.get("value") or {}
        shown = ("" if value.get("value") is None else
                 f" {value['value']:.4g} [{value['low']:.4g}, {value['high']:.4g}]")
        line.append(f"; e.g. {worst['subject']}:{shown}, {worst['message']}", style="dim")
        lines.append(line)
    if not rules:
        lines.append(Text("no policy rules: nothing was judged"))
    return Panel(Group(*lines), box=box.ROUNDED, title="probe", title_align="left")


def _groups_table(groups: list[dict]) -> Table:
    t = Table(title="Groups: selection rate and impact ratio vs the most favoured group "
                    "(95% intervals; error rates with intervals in the report files)",
              box=box.SIMPLE_HEAD, title_justify="left", pad_edge=False)
    for col, just in (("group", "left"), ("rows", "right"), ("selection %", "right"),
                      ("impact ratio", "right"), ("4/5", "center"), ("FPR%", "right"),
                      ("FNR%", "right")):
        t.add_column(col, justify=just, overflow="fold", min_width=10 if col == "group" else None,
                     no_wrap=col in ("selection %", "impact ratio"))
    previous = None
    for g in groups:
        if g["attribute"] != previous:
            if previous is not None:
                t.add_section()
            t.add_row(Text(g["attribute"], style="bold"), *[""] * 6)
            previous = g["attribute"]
        flag = Text("<0.8", style="bold red") if g["four_fifths_flag"] else Text("")
        rows = f"{g['rows']}" + (" <2%" if g.get("small") else "")
        t.add_row(Text("  " + g["group"]), rows, fmt_estimate(g["selection_rate"]),
                  fmt_estimate(g["impact_ratio"], percent=False), flag,
                  _pct_plain(g["fpr"]), _pct_plain(g["fnr"]))
    return t


def _pct_plain(est: dict | None) -> str:
    return "–" if not est or est.get("value") is None else f"{100 * est['value']:.1f}"


def _slices_table(slices: dict) -> Group:
    overall = fmt_estimate(slices.get("overall"))
    metric = _METRIC_WORDS.get(slices["metric"], slices["metric"])
    worst = "lowest" if slices.get("direction") == "lower" else "highest"
    t = Table(title=f"Slices with the {worst} {metric} (overall {overall}; "
                    f"{slices.get('tested', 0)} tested"
                    + ("; rates and q on held-out rows)" if (slices.get("settings") or {}).get("split", True)
                       else "; no split: rates and q on all rows)"),
              box=box.SIMPLE_HEAD, title_justify="left")
    for col, just in (("#", "right"), ("slice", "left"), ("rows", "right"), ("share", "right"),
                      ("rate % [95% CI]", "right"), ("gap pts [95% CI]", "right"), ("q", "right")):
        t.add_column(col, justify=just, overflow="fold")
    for s in slices["found"]:
        t.add_row(str(s["rank"]), Text(s["label"]), str(s["rows"]), _pct(s["share"]),
                  fmt_estimate(s["rate"]), fmt_estimate(s["gap"]), _q(s.get("q_value")))
    parts = [t]
    for s in slices["found"][:3]:
        if s.get("sentence"):
            parts.append(Text(f"  {s['rank']}. {s['sentence']}"))
    if not slices["found"]:
        parts.append(Text("  no slice met the minimum support and beat the rest of the data"))
    for note in slices.get("notes") or []:
        parts.append(Text(f"  note: {note}", style="dim"))
    return Group(*parts)


def _flips_table(flips: list[dict]) -> Group:
    t = Table(title="Counterfactual flips", box=box.SIMPLE_HEAD, title_justify="left")
    widths = {"attribute": 9, "mode": 9, "from → to": 12}
    for col, just in (("attribute", "left"), ("mode", "left"), ("from → to", "left"),
                      ("rows", "right"), ("flip %", "right"), ("fav/unfav %", "right"),
                      ("twins excess", "right")):
        t.add_column(col, justify=just, overflow="fold", min_width=widths.get(col),
                     no_wrap=col in ("flip %", "twins excess"))
    notes = []
    for f in flips:
        if f.get("flip_rate") is None:
            notes.append(Text(f"  {f['attribute']} ({f['mode']}): {f.get('sentence', 'not applicable')}"))
            continue
        pair = Text(f"{f['from']} → {f['to']}")
        if f.get("impossible"):
            pair.append(" (level unseen by the model)", style="yellow")
        t.add_row(Text(str(f["attribute"])), f["mode"], pair, str(f["rows"]),
                  fmt_estimate(f["flip_rate"]),
                  f"{_pct_plain(f['to_favorable'])} / {_pct_plain(f['to_unfavorable'])}",
                  fmt_estimate(f.get("excess")))
    if any(f.get("mode") == "twins" for f in flips):
        notes.append(Text("  fav/unfav: decisions that become favourable / unfavourable; twins "
                          "excess: points by which decisions differ from twins in the other group "
                          "more often than from twins in the person's own group"))
    return Group(t, *notes)


def _proxies_table(proxies: list[dict]) -> Group:
    parts = []
    for p in proxies:
        title = f"Proxies for {p.get('attribute')}"
        auc = p.get("multivariate_auc")
        if auc:
            title += f" (all features together predict it with AUC {fmt_estimate(auc, percent=False)})"
        t = Table(title=title, box=box.SIMPLE_HEAD, title_justify="left")
        for col, just in (("#", "right"), ("feature", "left"), ("mutual info", "right"),
                          ("AUC alone", "right"), ("importance", "right")):
            t.add_column(col, justify=just, overflow="fold")
        for i, row in enumerate(p.get("features", [])[:10], start=1):
            auc1 = row.get("auc")
            imp = row.get("importance")
            t.add_row(str(i), Text(str(row.get("feature"))), _num(row.get("mutual_information")),
                      fmt_estimate(auc1, percent=False) if isinstance(auc1, dict) else _num(auc1),
                      fmt_estimate(imp, percent=False) if isinstance(imp, dict) else _num(imp))
        parts.append(t)
    return Group(*parts)


def _comparison_table(comparison: dict) -> Group:
    t = Table(title=f"Candidate vs baseline ({comparison['baseline'].get('spec')})",
              box=box.SIMPLE_HEAD, title_justify="left")
    for col, just in (("metric", "left"), ("candidate", "right"), ("baseline", "right"),
                      ("difference [95% CI]", "right"), ("McNemar p", "right")):
        t.add_column(col, justify=just)
    for m in comparison["metrics"]:
        t.add_row(m["metric"], fmt_estimate(m["candidate"]), fmt_estimate(m["baseline"]),
                  fmt_estimate(m["difference"]), _q(m["p_value"]))
    w = Table(title="Where the candidate is worse", box=box.SIMPLE_HEAD, title_justify="left")
    for col, just in (("#", "right"), ("slice", "left"), ("rows", "right"),
                      ("mean paired difference", "right"), ("q", "right")):
        w.add_column(col, justify=just, overflow="fold")
    for s in comparison["worse_slices"]:
        w.add_row(str(s["rank"]), Text(s["label"]), str(s["rows"]), fmt_estimate(s["rate"]),
                  _q(s.get("q_value")))
    return Group(t, w)


def render(report: dict, console: Console, *, quiet: bool = False, written: dict | None = None) -> None:
    """Print the report: the verdict panel, then groups, slices, flips, proxies, comparison."""
    verdict = report.get("verdict") or {}
    if quiet:
        status = verdict.get("status", "no policy")
        counts = verdict.get("counts", {})
        console.print(Text(f"verdict: {status} ({counts.get('fail', 0)} fail, "
                           f"{counts.get('inconclusive', 0)} inconclusive)"))
        return
    console.print(_verdict_panel(verdict))
    if report.get("groups"):
        console.print(_groups_table(report["groups"]))
        unknown = {k: v for k, v in (report.get("groups_unknown") or {}).items() if v}
        if unknown:
            console.print(Text("  rows with an unknown value: "
                               + ", ".join(f"{k} {v}" for k, v in unknown.items())))
    if report.get("slices"):
        console.print(_slices_table(report["slices"]))
    if report.get("flips"):
        console.print(_flips_table(report["flips"]))
    if report.get("proxies"):
        console.print(_proxies_table(report["proxies"]))
    if report.get("comparison"):
        console.print(_comparison_table(report["comparison"]))
    if written:
        folder = {str(Path(p).parent) for p in written.values()}
        console.print(Text("report: " + ", ".join(sorted(folder))))
    console.print(Text(report.get("caution", ""), style="dim"))


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
