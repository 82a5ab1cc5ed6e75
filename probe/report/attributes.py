"""The report model's sections on decisions and protected attributes: the counterfactual flips and
the proxies (the features that stand in for an attribute). The wording is written here once, as in
:mod:`probe.report.sections`, which builds the other analysis sections.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

from .fmt import (
    confidence_text,
    fmt_count,
    fmt_est,
    fmt_num,
)
from .model import (
    Cell,
    Column,
    Heading,
    Item,
    Items,
    Line,
    Paragraph,
    Plot,
    PlotRow,
    Section,
    Table,
    est_cell,
    not_run,
    text_cell,
)

__all__ = ["flips", "proxies"]


# -- flips -------------------------------------------------------------------------------------


def _change(f: Mapping) -> str:
    """``from → to``; empty for a row without levels (a mode that does not apply)."""
    if f.get("from") is None and f.get("to") is None:
        return ""
    return f"{f.get('from')} → {f.get('to')}"


def _moved(f: Mapping) -> str:
    """A transport row's proxies moved besides the attribute (``none``); empty for other modes."""
    if f.get("mode") != "transport" or f.get("applicable") is False:
        return ""
    return ", ".join(str(m) for m in f.get("moved") or () if m != f.get("attribute")) or "none"


def _flip_plot(rows: Sequence[Mapping], level: str) -> Plot:
    def plotted(f: Mapping) -> PlotRow:
        rate = f.get("flip_rate") or {}
        if f.get("applicable") is False:  # no change was made: no bar, the reason instead
            return PlotRow(f"{f.get('attribute')} ({f.get('mode')})", None,
                           note=f"does not apply: {_reason(f)}")
        if f.get("impossible"):
            return PlotRow(f"{f.get('attribute')} {_change(f)} ({f.get('mode')})", None,
                           note="not possible")
        return PlotRow(f"{f.get('attribute')} {_change(f)} ({f.get('mode')})", rate.get("value"),
                       rate.get("low"), rate.get("high"), note=f"flip rate {fmt_est(rate)}")

    return Plot(
        title="Decisions that flip under a counterfactual change",
        x_label=f"flip rate (dot) with its {level} interval (bar)",
        description="The share of decisions that change, per attribute, direction and mode.",
        rows=tuple(plotted(f) for f in rows), lines=(Line(0.0, "no flips", dashed=False),),
    )


def _reason(f: Mapping) -> str:
    """Why a mode does not apply, in a few words (``not a model input``)."""
    text = " ".join(str(n) for n in f.get("notes") or ()) + " " + str(f.get("sentence") or "")
    return "not a model input" if "not a model input" in text else "see the notes"


def flips(report: Mapping) -> Section:
    rows = report.get("flips")
    title = "Counterfactual flips"
    if rows is None:
        return not_run("flips", title, "Flips")
    if not rows:
        return Section("flips", title, "Flips", (Paragraph(("No flip tests.",)),))
    level = confidence_text(report)
    controlled = any(k in f for f in rows for k in ("placebo_rate", "control_rate"))
    columns = (
        Column("attribute"), Column("mode"), Column("change"), Column("rows", numeric=True),
        Column("flip rate", f"share of decisions that change, {level} interval", numeric=True),
        Column("to favourable", "share that become favourable", numeric=True, compact="value"),
        Column("to unfavourable", "share that become unfavourable", numeric=True, compact="value"),
        Column("mean score change", "mean change of the model's score", numeric=True, compact=""),
    ) + ((Column("control", "transport: the placebo's flip rate (the group mapped onto a random "
                 "part of itself); twins: the rate against twins in the person's own group",
                 numeric=True, compact="value"),
          Column("excess", "flip rate minus the control: what is attributable to the group "
                 "(judged for transport and twins)", numeric=True)) if controlled else ())
    transported = any(f.get("mode") == "transport" for f in rows)
    if transported:
        columns += (Column("proxies moved", "transport: the features moved with the attribute",
                           label=True),)

    def row(f: Mapping) -> tuple[Cell, ...]:
        if f.get("impossible") or f.get("applicable") is False:
            word = "not possible" if f.get("impossible") else "not applicable"
            rest = (Cell(word),) + (Cell(""),) * (3 + 2 * controlled)
        else:
            rest = tuple(est_cell(f.get(k)) for k in ("flip_rate", "to_favorable", "to_unfavorable",
                                                        "mean_score_change"))
            if controlled:  # direct tests have no control; n/a when one could not be formed
                key = next((k for k in ("placebo_rate", "control_rate") if k in f), None)
                rest += ((est_cell(f[key]), est_cell(f.get("excess"))) if key
                         else (Cell(""), Cell("")))
        if transported:
            rest += (Cell(_moved(f)),)
        return (text_cell(f.get("attribute")), text_cell(f.get("mode")), Cell(_change(f)),
                Cell(fmt_count(f.get("rows"))), *rest)

    blocks: list = [
        Paragraph(("The share of decisions that change when the attribute (direct), also the "
                   "features that stand in for it (transport), or the person's nearest twins in the "
                   "other group (twins) are considered. Notes under a test say what was moved, what "
                   "the twins matched on and what qualifies its interval.",)),
        _flip_plot(rows, level), Table(columns, tuple(row(f) for f in rows)),
        Items(tuple(
            Item(str(f.get("sentence") or ""),
                 title=f"{f.get('attribute')} {f.get('mode')} {_change(f)}".rstrip(),
                 notes=tuple(str(n) for n in f.get("notes") or ()),
                 essential=f.get("applicable") is False)
            for f in rows
        )),
    ]
    concentrated = [(f, s) for f in rows for s in (f.get("by_slice") or [])[:3]]
    if concentrated:
        blocks += [
            Heading("Where the flips concentrate"),
            Paragraph(("For each flip test, the slices of the other columns with the highest flip "
                       "rates. These were picked for being high, so their intervals overstate how "
                       "certain each is.",)),
            Table((Column("attribute"), Column("mode"), Column("change"), Column("slice", label=True),
                   Column("rows", numeric=True),
                   Column("flip rate", f"{level} interval, optimistic", numeric=True)),
                  tuple((text_cell(f.get("attribute")), text_cell(f.get("mode")), Cell(_change(f)),
                         text_cell(s.get("label")), Cell(fmt_count(s.get("rows"))),
                         est_cell(s.get("flip_rate"))) for f, s in concentrated),
                  detail=True),
        ]
    return Section("flips", title, "Flips", tuple(blocks))


# -- proxies -----------------------------------------------------------------------------------


def _num_or_est(x) -> Cell:
    return est_cell(x) if isinstance(x, Mapping) else Cell(fmt_num(x))


def proxies(report: Mapping) -> Section:
    blocks: list = [Paragraph((
        "How well each feature alone stands in for the protected attribute (mutual information, "
        "cross-fitted single-feature AUC) and how much the features together rely on it "
        "(permutation importance in a model predicting the attribute).",
    ))]
    columns = (Column("#", numeric=True), Column("feature", label=True),
               Column("mutual information", numeric=True),
               Column("AUC alone", "single-feature AUC, cross-fitted", numeric=True),
               Column("importance", "permutation importance", numeric=True))
    for p in report.get("proxies") or []:
        blocks.append(Heading(str(p.get("attribute"))))
        auc = p.get("multivariate_auc")
        if auc:
            blocks.append(Paragraph((f"All features together predict it with AUC {fmt_est(auc)}.",)))
        blocks.append(Table(columns, tuple(
            (Cell(str(i)), text_cell(r.get("feature")), Cell(fmt_num(r.get("mutual_information"))),
             _num_or_est(r.get("auc")), _num_or_est(r.get("importance")))
            for i, r in enumerate(p.get("features") or [], start=1)
        )))
    return Section("proxies", "Proxies", "Proxies", tuple(blocks))
