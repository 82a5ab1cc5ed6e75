"""Control characters from the data are shown escaped by every renderer but the JSON.

A hostile level carries an ANSI colour escape, a carriage return, a bell, a right-to-left override,
a zero-width space and a C1 control; the terminal, Markdown, HTML and JUnit show each as its escape
and never the raw character, while ``report.json`` keeps the true value. Which characters count is
checked against :mod:`unicodedata`'s categories over the whole Basic Multilingual Plane.
"""

from __future__ import annotations

import io
import json
import unicodedata
import xml.etree.ElementTree as ET

import pytest
from rich.console import Console

from probe.report import terminal
from probe.report.fmt import visible, visible_all
from probe.report.html import render_html
from probe.report.json import to_json
from probe.report.junit import render_junit
from probe.report.markdown import render_markdown
from tests.report_fixture import example_report

HOSTILE = "F\x1b[31mRED\r\x07\u202eevil\u200b\x85"
SHOWN = r"F\x1b[31mRED\r\x07\u202eevil\u200b\x85"
RAW = ("\x1b", "\r", "\x07", "\u202e", "\u200b", "\x85")


def _hostile() -> dict:
    report = example_report(with_comparison=True)
    for row in report["groups"]:
        if row["group"] == "F":
            row["group"] = HOSTILE
    for rule in report["verdict"]["rules"]:
        rule["subject"] = rule["subject"].replace("= F", f"= {HOSTILE}")
    report["flips"][0]["attribute"] = HOSTILE
    report["slices"]["found"][0]["label"] = f"employment = {HOSTILE}"
    report["provenance"]["model"]["spec"] = f"py:m{HOSTILE}:f"
    return report


def _terminal(report) -> str:
    buf = io.StringIO()
    terminal.render(report, Console(file=buf, width=100, color_system=None, force_terminal=False,
                                    legacy_windows=False, highlight=False), written={})
    return buf.getvalue()


RENDERERS = {"terminal": _terminal, "markdown": render_markdown, "html": render_html,
             "junit": render_junit}


@pytest.mark.parametrize("name", sorted(RENDERERS))
def test_every_renderer_shows_control_characters_escaped(name):
    report = _hostile()
    out = RENDERERS[name](report)
    assert not any(ch in out for ch in RAW)
    # Markdown escapes its own specials too: each backslash and the `[` (shown as written when read)
    shown = SHOWN.replace("\\", "\\\\").replace("[", "\\[") if name == "markdown" else SHOWN
    assert shown in out
    if name == "junit":
        ET.fromstring(out.encode())  # still parses


def test_json_keeps_the_true_value():
    report = _hostile()
    text = to_json(report)
    assert HOSTILE in [r["group"] for r in json.loads(text)["groups"]]
    assert not any(ch in text for ch in ("\x1b", "\r", "\x07"))  # JSON's own escapes


def test_rendering_leaves_the_report_unchanged():
    report = _hostile()
    before = json.dumps(report)
    for render in RENDERERS.values():
        render(report)
    assert json.dumps(report) == before


def test_visible_escapes_exactly_the_hidden_categories():
    hidden = {"Cc", "Cf", "Zl", "Zp", "Cs"}
    for code in range(0x10000):
        ch = chr(code)
        out = visible(ch)
        if unicodedata.category(ch) in hidden:
            assert out.startswith("\\") and out.isascii() and len(out) > 1, hex(code)
        else:
            assert out == ch, hex(code)
    # a few spelled out: the bidi overrides and isolates, zero-width joiners, BOM, DEL, C1
    assert visible("\u202a\u202e\u2066\u2069\u200d\ufeff\x7f\x9b\t\n") == (
        r"\u202a\u202e\u2066\u2069\u200d\ufeff\x7f\x9b\t\n")
    assert visible("\U000e0041") == r"\U000e0041"  # a tag character (Cf) beyond the BMP
    assert visible("café – ≥ 0.8 · a\\b") == "café – ≥ 0.8 · a\\b"


def test_visible_all_reaches_keys_and_nested_values():
    out = visible_all({"a\x1b": [{"b": "\u202e"}, 1.5, None, ("x\r",)]})
    assert out == {r"a\x1b": [{"b": r"\u202e"}, 1.5, None, [r"x\r"]]}


def test_markdown_keeps_table_structure_with_a_hostile_level():
    report = _hostile()
    report["groups"][0]["group"] = "# a | b *c* `d`"
    md = render_markdown(report)
    row = next(line for line in md.splitlines() if "a \\| b" in line)
    assert r"\# a \| b \*c\* \`d\`" in row
    header = next(line for line in md.splitlines()[md.splitlines().index(row) - 5:]
                  if line.startswith("| group"))
    assert row.count(" | ") == header.count(" | ")
