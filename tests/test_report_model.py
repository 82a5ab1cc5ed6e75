"""The report model's wording against the report's own numbers, in every renderer.

Each test changes one fact of the fixture report (whether slice rows were held out, the confidence
level, which decision is favourable, a small group with the highest rate, flip notes, an empty list
of worse slices) and checks that Markdown, HTML and the terminal all say what that fact implies,
with the numbers read from the report dict itself (or recomputed from the fixture's counts).
"""

from __future__ import annotations

import html
import importlib.util
import io
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest
from rich.console import Console

from probe.report import svg, terminal
from probe.report.html import render_html
from probe.report.markdown import render_markdown
from probe.report.model import Plot, build_model

_spec = importlib.util.spec_from_file_location(
    "report_fixture", Path(__file__).with_name("report_fixture.py")
)
fixture = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(fixture)


def _terminal(report: dict, width: int = 200) -> str:
    buf = io.StringIO()
    console = Console(file=buf, width=width, color_system=None, force_terminal=False,
                      legacy_windows=False, highlight=False)
    terminal.render(report, console, written={})
    return buf.getvalue()


def _html_text(report: dict) -> str:
    """The page's visible text, tags dropped and entities decoded, whitespace collapsed."""
    return " ".join(html.unescape(re.sub(r"<[^>]+>", " ", render_html(report))).split())


def _md_text(report: dict) -> str:
    return " ".join(render_markdown(report).replace("\\", "").split())


def _all(report: dict, width: int = 200) -> dict[str, str]:
    return {"md": _md_text(report), "html": _html_text(report),
            "terminal": " ".join(_terminal(report, width).split())}


def _section(text: str, start: str, end: str) -> str:
    i = text.index(start)
    return text[i:text.index(end, i)]


# -- held-out rows -----------------------------------------------------------------------------


def test_slices_without_a_split_say_rates_are_on_the_searched_rows_and_optimistic():
    report = fixture.example_report()
    s = report["slices"]
    n = 5000  # the fixture's estimate rows; without a split the search saw all of them
    s.update(search_rows=n, estimate_rows=n, base_rows=n, settings={"split": False})
    for name, text in _all(report).items():
        part = _section(text, "Slices", "flips")
        assert f"estimated on the same {n:,} rows that chose" in part, name
        assert "overstated" in part, name
        assert "held-out" not in part, name


def test_slices_split_read_from_the_plan_when_settings_lack_it():
    report = fixture.example_report()
    report["slices"].pop("settings", None)
    report["provenance"]["plan"]["slices"]["split"] = False
    assert "held-out" not in _section(_md_text(report), "## Slices", "## Counterfactual")
    report["provenance"]["plan"]["slices"]["split"] = True
    rows = report["slices"]["estimate_rows"]
    for name, text in _all(report).items():
        assert f"re-estimated on {rows:,} held-out rows" in text, name


def test_slices_claim_no_held_out_rows_when_the_report_does_not_say():
    report = fixture.example_report()
    report["slices"].pop("settings", None)
    del report["provenance"]["plan"]["slices"]
    s = report["slices"]
    for name, text in _all(report).items():
        part = _section(text, "Slices", "flips")
        assert "held-out" not in part, name
        assert f"estimated on {s['estimate_rows']:,} rows" in part, name


# -- confidence level --------------------------------------------------------------------------


def test_every_renderer_states_the_reports_own_confidence_level():
    report = fixture.example_report(with_comparison=True)
    report["provenance"]["confidence_level"] = 0.9
    report["verdict"]["error_control"]["error_rate"] = 0.1
    for rule in report["verdict"]["rules"]:
        rule["level"] = 0.9
    for name, text in _all(report).items():
        assert "90 % interval" in text, name
        assert not re.search(r"95 ?%", text), name


# -- four-fifths line --------------------------------------------------------------------------


def _line_values(svg_text: str) -> dict[str, float]:
    """Reference lines' titles → the value at their x, read back through the axis ticks."""
    root = ET.fromstring(svg_text)
    ticks = [(float(t.get("x")), float(t.text)) for t in root.iter("text")
             if t.get("text-anchor") == "middle" and re.fullmatch(r"-?\d+(\.\d+)?", t.text or "")]
    (x0, v0), (x1, v1) = ticks[0], ticks[-1]
    return {ln.find("title").text: v0 + (float(ln.get("x1")) - x0) * (v1 - v0) / (x1 - x0)
            for ln in root.iter("line") if ln.find("title") is not None}


def test_four_fifths_line_is_drawn_from_the_named_reference_group_not_a_small_one():
    report = fixture.example_report()
    small = next(g for g in report["groups"] if g["group"] == fixture.SCRIPT_GROUP)
    small["selection_rate"] = {"value": 0.95, "low": 0.83, "high": 0.99, "method": "wilson"}
    section = next(s for s in build_model(report).sections if s.key == "groups")
    plots = [b for b in section.blocks if isinstance(b, Plot)]
    assert [p.title for p in plots] == ["Selection rate by sex", "Selection rate by age_band"]
    # the fixture's counts: the references are M (2970 of 5210 selected) and 55+ (1172 of 2250)
    assert [next(g for g in report["groups"] if g["attribute"] == a)["reference_group"]
            for a in ("sex", "age_band")] == ["M", "55+"]
    for plot, ref in zip(plots, (2970 / 5210, 1172 / 2250)):
        lines = _line_values(svg.render_plot(plot, uid="t"))
        four_fifths = next(v for k, v in lines.items() if k.startswith("four-fifths"))
        assert four_fifths == pytest.approx(0.8 * ref, abs=0.002)
        assert f"{0.8 * ref:.3f}" in next(k for k in lines if k.startswith("four-fifths"))
    assert "reference M" in render_html(report)


# -- EOD ---------------------------------------------------------------------------------------


@pytest.mark.parametrize(("favorable", "short", "rate", "other"), [
    ("positive", "TPR", "true-positive rate", "true-negative rate"),
    ("negative", "TNR", "true-negative rate", "true-positive rate"),
])
def test_eod_is_named_for_the_rate_it_compares(favorable, short, rate, other):
    report = fixture.example_report()
    report["provenance"]["favorable"] = favorable
    for name in ("md", "html"):
        text = _all(report)[name]
        assert f"EOD ({short})" in text, name
        meaning = re.search(r"equal opportunity difference \((\w+)\): the group's ([\w-]+ rate)", text)
        assert meaning and meaning.groups() == (short, rate), name
        assert f"group's {other}" not in text, name


# -- flip notes --------------------------------------------------------------------------------


def test_flip_notes_are_rendered_under_their_test_in_every_renderer():
    report = fixture.example_report()
    flips = report["flips"]
    notes = ["proxies moved: income, region", "twins matched on income & tenure [k = 5]"]
    flips[2]["notes"] = notes  # sex, transport, F -> M
    flips[3]["notes"] = []
    sentence = flips[2]["sentence"]
    md = render_markdown(report).splitlines()
    i = next(k for k, ln in enumerate(md) if ln.startswith("- ") and "transport" in ln)
    assert [ln.strip() for ln in md[i + 1:i + 3]] == ["- proxies moved: income, region",
                                                      "- twins matched on income \\& tenure \\[k = 5\\]"]
    assert not md[i + 3].strip().startswith("- ") or "twins" in md[i + 3]
    page = render_html(report)
    item = re.search(r"<li>([^<]*)<ul class=\"notes\">(.*?)</ul></li>", page)
    assert html.unescape(item.group(1)) == sentence
    assert [html.unescape(x) for x in re.findall(r"<li>(.*?)</li>", item.group(2))] == notes
    assert page.count('class="notes"') == 1  # an empty list gives nothing
    out = _terminal(report)
    at = out.index("sex transport F → M")
    assert out.index(f"note: {notes[0]}") > at and out.index(f"note: {notes[1]}") > at
    assert out.count("note: ") == 2


def test_flip_rows_without_notes_render_as_before():
    report = fixture.example_report()
    assert all("notes" not in f for f in report["flips"])
    assert 'class="notes"' not in render_html(report)
    assert "note: " not in _terminal(report)


# -- comparison --------------------------------------------------------------------------------


def test_empty_worse_slices_are_said_in_words_everywhere():
    report = fixture.example_report(with_comparison=True)
    report["comparison"]["worse_slices"] = []
    for name, text in _all(report).items():
        part = text[text.index("Comparison"):]
        assert "No slice where the candidate is worse" in part, name
        assert "at the 95 % level" in part, name
    report["comparison"]["worse_slices"] = fixture.example_report(
        with_comparison=True)["comparison"]["worse_slices"]
    assert "No slice where the candidate is worse" not in _md_text(report)


# -- the sampling design ----------------------------------------------------------------------


def _design_report() -> dict:
    import json

    golden = Path(__file__).parent / "golden" / "design" / "report.json"
    return json.loads(golden.read_text(encoding="utf-8"))


def _group_headers(model) -> list[str]:
    groups = next(s for s in model.sections if s.key == "groups")
    table = next(b for b in groups.blocks if hasattr(b, "columns"))
    return [c.header for c in table.columns]


def test_a_plain_report_has_no_design_line_and_no_effective_n_column():
    model = build_model(fixture.example_report())
    assert model.design is None
    assert "n eff" not in _group_headers(model) and "weight" not in _group_headers(model)


def test_the_design_line_names_only_what_the_design_has():
    report = _design_report()
    full = build_model(report)
    assert "n eff" in _group_headers(full) and "clusters" in _group_headers(full)
    design = report["provenance"]["design"]
    design.update(cluster=None, clusters=None, membership={})
    text = "".join(getattr(p, "text", p) for p in build_model(report).design.parts)
    kish = round(design["kish_effective_rows"])
    assert text == (f"Sampling design: rows weighted by {design['weights']} (Kish effective rows "
                    f"{kish:,} of {report['provenance']['data']['rows']:,}).")
