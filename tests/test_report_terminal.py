"""The terminal at 80 and 60 columns: no table loses a column or cuts a number.

Every shown cell of every section's table (from the report model, the text each renderer shows) is
looked up in the rendered output: a number or interval must appear whole on one line, with its
column's header; a label's words must all appear (a label may wrap between words).
"""

from __future__ import annotations

import io
import json
from pathlib import Path

import pytest
from rich.console import Console

from probe.report import terminal
from probe.report.model import Table, build_model
from tests.report_fixture import example_report

GOLDEN = Path(__file__).parent / "golden" / "report.json"
LONG = "a group label long enough to need folding in any narrow terminal"


def _render(report: dict, width: int) -> str:
    buf = io.StringIO()
    console = Console(file=buf, width=width, color_system=None, force_terminal=False,
                      legacy_windows=False, highlight=False)
    terminal.render(report, console, written={})
    return buf.getvalue()


def _hostile_widths() -> dict:
    """The fixture with long labels and a twins row carrying a control and an excess."""
    report = example_report(with_comparison=True)
    report["groups"][0]["group"] = LONG
    report["slices"]["found"][0]["label"] = "employment = self-employed and " + LONG
    twins = report["flips"][3]
    twins["control_rate"] = {"value": 0.0123, "low": 0.0051, "high": 0.0222, "method": "wilson"}
    twins["excess"] = {"value": 0.198, "low": 0.078, "high": 0.317, "method": "half-sample-t"}
    twins["moved"] = []
    report["flips"][2]["moved"] = ["sex", "region", "employment"]
    report["flips"][2]["placebo_rate"] = {"value": 0.01, "low": 0.0, "high": 0.02, "method": "w"}
    report["flips"][2]["excess"] = {"value": -0.0123, "low": -0.1234, "high": 0.0988,
                                    "method": "bootstrap-normal"}
    return report


def _shown_tables(report: dict):
    for section in build_model(report).sections:
        if section.ran and section.key != "provenance" and section.key != "verdict":
            yield from (b for b in section.blocks if isinstance(b, Table) and not b.detail)


REPORTS = {"golden": lambda: json.loads(GOLDEN.read_text()), "long labels": _hostile_widths}


@pytest.mark.parametrize("width", [60, 80])
@pytest.mark.parametrize("which", sorted(REPORTS))
def test_no_table_loses_a_column_or_cuts_a_number(which, width):
    report = REPORTS[which]()
    out = _render(report, width)
    lines = out.splitlines()
    assert max(len(line) for line in lines) <= width
    words = set(out.split()) | {w.rstrip(":") for w in out.split()}
    checked = 0
    for table in _shown_tables(report):
        for j, col in enumerate(table.columns):
            if not col.compact:
                continue
            if col.numeric:  # a number means nothing without its header
                assert set(col.header.split()) <= words, col.header
            for row in table.rows:
                cell = row[j]
                text = cell.status or (cell.value if col.compact == "value" and cell.value
                                       else cell.text)
                if not text:
                    continue
                if col.numeric:
                    assert any(text in line for line in lines), (col.header, text)
                else:
                    assert set(text.split()) <= words, (col.header, text)
                checked += 1
    assert checked > 50


def test_the_flip_excess_interval_shows_whole_at_80_columns():
    # the case reported: a twins excess column dropped and its interval cut to its first digits
    out = _render(_hostile_widths(), 80)
    assert "0.198 [0.078, 0.317]" in out
    assert "-0.012 [-0.123, 0.099]" in out


def test_tables_that_fit_stay_in_columns():
    report = json.loads(GOLDEN.read_text())
    out = _render(report, 80)
    # the groups table of `sex` fits in 80 columns: one line per group with all its numbers
    f_row = next(line for line in out.splitlines() if line.startswith("F "))
    assert "1,502" in f_row and "0.593 [0.568, 0.618]" in f_row and "0.178" in f_row


def test_transport_rows_say_which_proxies_were_moved():
    out = _render(_hostile_widths(), 80)
    assert "proxies moved: region, employment" in out
    golden = _render(json.loads(GOLDEN.read_text()), 120)
    block = golden[golden.index("group · transport · a → b"):]
    assert "proxies moved: region" in block.split("group · transport · a → c")[0]


@pytest.mark.parametrize("width", [60, 80])
def test_the_verdict_panel_keeps_each_rules_numbers_whole(width):
    report = json.loads(GOLDEN.read_text())
    out = _render(report, width)
    verdict = build_model(report).sections[0]
    summary = next(b for b in verdict.blocks if isinstance(b, Table) and not b.detail)
    for row in summary.rows:
        measured = row[5].text
        assert any(measured in line for line in out.splitlines()), measured
    assert len(summary.rows) == 7
