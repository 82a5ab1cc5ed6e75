"""The report model's analysis sections: groups, slices and the comparison (flips and proxies:
:mod:`probe.report.attributes`).

Each builder reads its part of the report dict and returns a :class:`~probe.report.model.Section`
whose wording is written here once: what the rates are, against which reference, at which
confidence level, on which rows they were estimated, and what each column means.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

from ..metrics import FOUR_FIFTHS

from .design import N_EFF_COLUMN, design_of, n_eff_cell, weighted_note
from .fmt import (
    confidence_text,
    fmt_count,
    fmt_est,
    fmt_num,
    fmt_p,
    fmt_share,
    is_number,
    metric_name,
    slice_label,
)
from .model import (
    Cell,
    Code,
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

__all__ = ["comparison", "eod_name", "groups", "slices"]


def _level(report: Mapping) -> str:
    return confidence_text(report)


def _favorable(report: Mapping) -> str:
    return str((report.get("provenance") or {}).get("favorable") or "positive")


# -- groups ------------------------------------------------------------------------------------


def eod_name(favorable: str) -> tuple[str, str]:
    """The equal opportunity difference's header and meaning under ``favorable``.

    It compares the favourable-decision rate among rows whose label merits it: the true-positive
    rate when the favourable decision is the positive one, the true-negative rate otherwise.
    """
    rate, short = ("true-negative rate", "TNR") if favorable == "negative" else \
        ("true-positive rate", "TPR")
    return (f"EOD ({short})",
            f"equal opportunity difference ({short}): the group's {rate} minus the reference "
            "group's")


def _group_plot(attribute: str, rows: Sequence[Mapping], level: str) -> Plot:
    ref_name = rows[0].get("reference_group")
    ref = next((g for g in rows if g.get("group") == ref_name), None)
    ref_rate = (ref or {}).get("selection_rate") or {}
    lines: tuple[Line, ...] = ()
    if ref is not None and is_number(ref_rate.get("value")):
        rate = ref_rate["value"]
        lines = (Line(rate, f"reference {ref_name} {rate:.3f}", dashed=False),
                 Line(float(FOUR_FIFTHS) * rate, f"four-fifths line {float(FOUR_FIFTHS) * rate:.3f}"))
    plotted = tuple(
        PlotRow(str(g.get("group")), *(((g.get("selection_rate") or {}).get(k))
                                       for k in ("value", "low", "high")),
                note=f"selection rate {fmt_est(g.get('selection_rate'))}, impact ratio "
                     f"{fmt_est(g.get('impact_ratio'))}",
                flagged=bool(g.get("four_fifths_flag")))
        for g in rows
    )
    return Plot(
        title=f"Selection rate by {attribute}",
        x_label=f"selection rate (dot) with its {level} interval (bar); squares: impact ratio below 0.8",
        description=(f"Selection rate of each {attribute} group with its {level} interval; the solid "
                     f"line is the reference group's rate ({ref_name}) and the dashed line 0.8 times "
                     "it (the four-fifths rule of thumb)."),
        rows=plotted, lines=lines, include_zero=True,
    )


def _reference_note(row: Mapping) -> str:
    """Which group the impact ratios are against, and whether it was fixed or chosen from the data."""
    ref = row.get("reference_group")
    if ref is None:
        return "No reference group."
    how = {True: " (fixed in the plan)", False: " (the highest selection rate, chosen from the data)"}
    return f"Reference group: {ref}{how.get(row.get('reference_fixed'), '')}."


_CHOSEN_REFERENCE = (
    "Where the reference group is chosen from the data, the impact ratio's interval allows for the "
    "choice: it is the lowest of the group's ratio intervals against every eligible group, each at the "
    "{level} level divided by the attribute's number of pairs (Bonferroni), and at most 1, so all of an "
    "attribute's impact-ratio intervals hold together at the {level} level.")


def groups(report: Mapping) -> Section:
    rows = report.get("groups")
    if rows is None:
        return not_run("groups", "Groups", "Groups")
    if not rows:
        return Section("groups", "Groups", "Groups", (Paragraph(("No groups.",)),))
    level, favorable = _level(report), _favorable(report)
    eod_header, eod_meaning = eod_name(favorable)
    columns = (
        Column("group", label=True),
        Column("rows", numeric=True),
        Column("share", "share of all rows", numeric=True, compact=""),
        Column("selection rate", f"share given the favourable ({favorable}) decision", numeric=True),
        Column("impact ratio", "selection rate over the reference group's", numeric=True),
        Column("4/5", "⚑ when the impact ratio is below 0.8 (the four-fifths rule of thumb)"),
        Column("SPD", "statistical parity difference: selection rate minus the reference group's",
               numeric=True, compact=""),
        Column(eod_header, eod_meaning, numeric=True, compact=""),
        Column("error rate", numeric=True, compact=""),
        Column("TPR", "true-positive rate", numeric=True, compact=""),
        Column("FPR", "false-positive rate", numeric=True, compact="value"),
        Column("FNR", "false-negative rate", numeric=True, compact="value"),
        Column("PPV", "positive predictive value", numeric=True, compact=""),
    )
    designed = design_of(report) is not None
    if designed:  # the effective rows beside the rates; the weight and clusters in the full table
        share = Column("share", "share of the total weight", numeric=True, compact="")
        columns = (*columns[:2], share, columns[3], N_EFF_COLUMN, *columns[4:],
                   Column("weight", "the group's total weight", numeric=True, compact=""),
                   Column("clusters", "clusters with a row in the group", numeric=True,
                          compact=""))
    chosen = any(g.get("reference_fixed") is False for g in rows)
    blocks: list = [Paragraph((
        f"Rates with {level} intervals, each group against its attribute's reference group. "
        "(small) marks a group under 2 % of the rows."
        + weighted_note(report)
        + (" " + _CHOSEN_REFERENCE.format(level=level) if chosen else ""),
    ))]
    by_attribute: dict[str, list[Mapping]] = {}
    for g in rows:
        by_attribute.setdefault(str(g.get("attribute")), []).append(g)
    unknown = report.get("groups_unknown") or {}
    for attribute, members in by_attribute.items():
        note = _reference_note(members[0])
        if unknown.get(attribute):
            note += f" {fmt_count(unknown[attribute])} rows with this attribute missing are left out."
        blocks += [Heading(attribute), Paragraph((note,)), _group_plot(attribute, members, level)]
        blocks.append(Table(columns, tuple(_group_row(g, designed) for g in members)))
    return Section("groups", "Groups", "Groups", tuple(blocks))


def _group_row(g: Mapping, designed: bool) -> tuple[Cell, ...]:
    cells = (
        text_cell(g.get("group"), tag="small" if g.get("small") else ""),
        Cell(fmt_count(g.get("rows"))), Cell(fmt_share(g.get("share"))),
        est_cell(g.get("selection_rate")), est_cell(g.get("impact_ratio")),
        Cell("⚑", flag=True) if g.get("four_fifths_flag") else Cell(""),
        *(est_cell(g.get(k)) for k in ("spd", "eod", "error_rate", "tpr", "fpr", "fnr", "ppv")),
    )
    if not designed:
        return cells
    weight = g.get("weight")
    return (*cells[:4], n_eff_cell(g.get("selection_rate")), *cells[4:],
            Cell(fmt_num(weight, 1) if is_number(weight) else "n/a"),
            Cell(fmt_count(g.get("clusters"))))


# -- slices ------------------------------------------------------------------------------------


def _held_out(search: Mapping, report: Mapping) -> bool | None:
    """Whether the rates were estimated on rows the search did not see; None when not recorded."""
    if isinstance(search.get("selected"), bool):
        return not search["selected"]
    split = (search.get("settings") or {}).get("split")
    if split is None:
        plan = (report.get("provenance") or {}).get("plan") or {}
        split = (plan.get("slices") or {}).get("split")
    return None if split is None else bool(split)


def _estimated_on(search: Mapping, report: Mapping, what: str) -> str:
    """The sentence saying on which rows ``what`` were estimated, and what that implies."""
    tested, searched = fmt_count(search.get("family")), fmt_count(search.get("search_rows"))
    estimated = fmt_count(search.get("estimate_rows"))
    held_out = _held_out(search, report)
    if held_out:
        return (f"{tested} slices tested, found by a search of {searched} rows; {what} re-estimated "
                f"on {estimated} held-out rows the search did not see.")
    if held_out is False:
        return (f"{tested} slices tested; {what} estimated on the same {estimated} rows that chose "
                "the slices (no rows held out), so they carry the selection effect: the slices "
                "picked for being worst look worse than they are (overstated).")
    return f"{tested} slices tested on {searched} rows; {what} estimated on {estimated} rows."


def _slice_table(found: Sequence[Mapping], level: str, *, rate: str, rate_meaning: str,
                 weighted: bool) -> Table:
    q = "Benjamini–Hochberg q-value over the slices tested" + (
        ", weighted by the search's rank" if weighted else "")
    columns = (
        Column("rank", numeric=True), Column("slice", label=True), Column("rows", numeric=True),
        Column("share", "share of the rows the estimates are on", numeric=True, compact=""),
        Column(rate, f"{rate_meaning}, {level} interval", numeric=True),
        Column("gap", f"the slice's value minus the rest's, {level} interval", numeric=True),
        Column("q", q, numeric=True),
    )
    return Table(columns, tuple(
        (Cell(str(f.get("rank", i))), text_cell(slice_label(f)), Cell(fmt_count(f.get("rows"))),
         Cell(fmt_share(f.get("share"))), est_cell(f.get("rate")), est_cell(f.get("gap")),
         Cell(fmt_p(f.get("q_value"))))
        for i, f in enumerate(found, 1)
    ))


def _sentences(found: Sequence[Mapping], compact: int) -> list:
    items = tuple(Item(str(f["sentence"]), title=str(f.get("rank", i)))
                  for i, f in enumerate(found, 1) if f.get("sentence"))
    return [Items(items, numbered=True, compact=compact)] if items else []


def _slice_plot(s: Mapping, metric: str, level: str, top: int = 10) -> Plot:
    overall = s.get("overall") or {}
    rows = tuple(
        PlotRow(f"{f.get('rank', i)}. {slice_label(f)}",
                *((f.get("rate") or {}).get(k) for k in ("value", "low", "high")),
                note=f"rate {fmt_est(f.get('rate'))}, {f.get('rows')} rows")
        for i, f in enumerate((s.get("found") or [])[:top], 1)
    )
    lines = ((Line(overall["value"], f"overall {metric} {fmt_est(overall)}"),)
             if is_number(overall.get("value")) else ())
    return Plot(
        title=f"Top slices by {metric}",
        x_label=f"{metric} (dot) with its {level} interval (bar)",
        description=f"Each slice's {metric} with its {level} interval; the dashed line is the "
                    "overall rate.",
        rows=rows, lines=lines,
    )


def slices(report: Mapping) -> Section:
    s = report.get("slices")
    if s is None:
        return not_run("slices", "Slices", "Slices")
    level, metric = _level(report), metric_name(s.get("metric"))
    worst = "lowest" if s.get("direction") == "lower" else "highest"
    # listed, but none at the significance level: candidates (the note below says so)
    what = "Candidate slices" if s.get("found") and s.get("significant") == 0 else "The slices"
    intro = (f"{what} with the {worst} {metric}. Overall {metric} {fmt_est(s.get('overall'))}. "
             + _estimated_on(s, report, "rates, gaps and q-values (Benjamini–Hochberg)"))
    blocks: list = [Paragraph((intro,))]
    found = s.get("found") or []
    if not found:
        blocks.append(Paragraph(("No slice stood out: none met the minimum support and did worse "
                                 "than the rest of the rows.",)))
    else:
        blocks += [_slice_plot(s, metric, level),
                   _slice_table(found, level, rate="rate", rate_meaning=f"the slice's {metric}",
                                weighted=bool(_held_out(s, report)))]
        blocks += _sentences(found, compact=3)
    notes = tuple(Item(str(n)) for n in s.get("notes") or [])
    if notes:
        blocks.append(Items(notes, compact=len(notes)))
    return Section("slices", "Slices", "Slices", tuple(blocks))


# -- comparison --------------------------------------------------------------------------------


def comparison(report: Mapping) -> Section:
    c = report.get("comparison")
    title = "Comparison with the baseline"
    if c is None:
        return not_run("comparison", title, "Comparison")
    level = _level(report)
    base = c.get("baseline") or {}
    blocks: list = [Paragraph((
        "Baseline ", Code(str(base.get("spec"))), f" ({base.get('kind')}, SHA-256 ",
        Code(str(base.get("sha256"))), "). Differences are candidate minus baseline, on the same rows.",
    ))]
    metrics = c.get("metrics") or []
    if metrics:
        blocks.append(Table((
            Column("metric"), Column("candidate", f"{level} interval", numeric=True),
            Column("baseline", f"{level} interval", numeric=True),
            Column("difference", f"candidate minus baseline, {level} interval (Tango's score "
                                 "interval for paired rates)", numeric=True),
            Column("p", "p-value of the paired test", numeric=True), Column("test", compact=""),
        ), tuple((text_cell(m.get("metric")), est_cell(m.get("candidate")),
                  est_cell(m.get("baseline")), est_cell(m.get("difference")),
                  Cell(fmt_p(m.get("p_value"))), text_cell(m.get("test"))) for m in metrics)))
    blocks.append(Heading("Slices where the candidate is worse"))
    search = c.get("worse_search") or {}
    worse = c.get("worse_slices") or []
    if search:
        blocks.append(Paragraph((_estimated_on(search, report, "paired differences and q-values"),)))
    if not worse:
        min_rows = (search.get("settings") or {}).get("min_rows")
        size = f" of at least {fmt_count(min_rows)} rows" if min_rows is not None else ""
        blocks.append(Paragraph((
            f"No slice where the candidate is worse: the search found no slice{size} where the "
            f"candidate's shortfall against the baseline exceeds the rest's, so there is none to "
            f"report at the {level} level.",
        )))
    else:
        blocks.append(_slice_table(worse, level, rate="paired difference",
                                   rate_meaning="candidate's shortfall against the baseline on the "
                                                "slice's rows (larger is worse)",
                                   weighted=bool(_held_out(search, report))))
        blocks += _sentences(worse, compact=0)
    return Section("comparison", title, "Comparison", tuple(blocks))
