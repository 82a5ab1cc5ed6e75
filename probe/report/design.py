"""The sampling design in a report: the one wording of ``provenance.design`` and of effective n.

A run with row weights, clusters or membership probabilities (``[data] weights``, ``cluster``,
``[data.membership]``) records them in ``provenance.design``, an ``n_effective`` on each estimate
and ``weight`` / ``clusters`` on each group row. This module words them once for every renderer:

- :func:`design_paragraph`: the design line shown under a report's header (the weights column with
  Kish's effective rows, the cluster column with the number of clusters, and each attribute known
  as probabilities with the share of rows whose largest probability is below the report's bound);
- :data:`N_EFF_COLUMN` and :func:`n_eff_cell`: the effective rows beside a rate;
- :func:`weighted_note`: what a weighted table's rates and intervals are.

A report without a design (``provenance.design`` null) gets none of them, so a plain run renders
exactly as it did before designs existed.
"""

from __future__ import annotations

from collections.abc import Mapping

from .fmt import fmt_count, fmt_num, fmt_share, is_number
from .model import Cell, Code, Column, Paragraph

__all__ = ["N_EFF_COLUMN", "design_of", "design_paragraph", "design_text", "n_eff_cell",
           "weighted_note"]

N_EFF_COLUMN = Column(
    "n eff", "effective rows of the selection rate under the design: the rows of a simple random "
             "sample that would give its precision (its interval is computed on them)",
    numeric=True)


def design_of(report: Mapping) -> Mapping | None:
    """``provenance.design`` of a report, or None for a plain run."""
    design = (report.get("provenance") or {}).get("design")
    return design or None


def design_paragraph(report: Mapping) -> Paragraph | None:
    """The design line of a report (None without a design)."""
    design = design_of(report)
    if design is None:
        return None
    rows = ((report.get("provenance") or {}).get("data") or {}).get("rows")
    parts: list = ["Sampling design: "]
    pieces: list[list] = []
    if design.get("weights"):
        kish = design.get("kish_effective_rows")
        of = f" of {fmt_count(rows)}" if is_number(rows) else ""
        size = f" (Kish effective rows {fmt_count(round(kish))}{of})" if is_number(kish) else ""
        pieces.append(["rows weighted by ", Code(str(design["weights"])), size])
    if design.get("cluster"):
        n = design.get("clusters")
        count = f" ({fmt_count(n)} clusters)" if is_number(n) else ""
        pieces.append(["clusters from ", Code(str(design["cluster"])), count])
    for attribute, m in (design.get("membership") or {}).items():
        m = m or {}
        bound = m.get("uncertain_below")
        share = (f" (largest probability below {fmt_num(bound, 1)} on "
                 f"{fmt_share(m.get('uncertain_share'))} of rows)" if is_number(bound) else "")
        pieces.append([Code(str(attribute)), " known only as membership probabilities" + share])
    for k, piece in enumerate(pieces):
        parts += (["; "] if k else []) + piece
    parts.append(".")
    return Paragraph(tuple(parts))


def design_text(report: Mapping) -> str:
    """The design line as plain text (empty without a design)."""
    paragraph = design_paragraph(report)
    if paragraph is None:
        return ""
    return "".join(x.text if isinstance(x, Code) else x for x in paragraph.parts)


def weighted_note(report: Mapping) -> str:
    """The sentence a weighted table adds to its introduction (empty without a design)."""
    if design_of(report) is None:
        return ""
    return (" Under the sampling design the rates are weighted and each interval is computed on "
            "effective counts (n eff).")


def n_eff_cell(est: Mapping | None) -> Cell:
    """The effective rows of an estimate, rounded (``n/a`` when not recorded)."""
    n = (est or {}).get("n_effective")
    return Cell(fmt_count(round(n)) if is_number(n) else "n/a")
