"""The HTML pictures: stripes under the reference lines, and no bar for a flip that does not apply."""

from __future__ import annotations

import json
import re
from pathlib import Path

from probe.report.html import render_html
from tests.report_fixture import example_report

GOLDEN = Path(__file__).parent / "golden" / "report.json"


def _svgs(html: str) -> list[str]:
    return re.findall(r"<svg class=\"plot\".*?</svg>", html, flags=re.S)


def test_row_stripes_are_drawn_before_the_reference_lines_and_the_data():
    svgs = _svgs(render_html(json.loads(GOLDEN.read_text())))
    assert svgs
    lined = 0
    for svg in svgs:
        stripes = [m.start() for m in re.finditer(r'fill="#f6f8fa"', svg)]
        # a reference line carries its legend as a <title>; the data are circles and squares
        lines = [m.start() for m in re.finditer(r'stroke-width="1\.5"( stroke-dasharray="5 3")?>'
                                                r"<title>", svg)]
        data = [m.start() for m in re.finditer(r"<circle |<rect x=\"[\d.]+\" y=\"[\d.]+\" "
                                               r"width=\"9\"", svg)]
        assert stripes and data
        assert max(stripes) < min(data)
        if lines:
            lined += 1
            assert max(stripes) < min(lines)
    assert lined >= 2  # the group plots draw the four-fifths and reference lines


def test_a_flip_mode_that_does_not_apply_has_no_bar_and_says_why():
    report = example_report()
    note = "`region` is not a model input, so a direct flip does not apply (use the transport mode)"
    report["flips"].append({
        "attribute": "region", "mode": "direct", "from": None, "to": None, "rows": 0,
        "flip_rate": None, "to_favorable": None, "to_unfavorable": None,
        "mean_score_change": None, "applicable": False, "sentence": note, "notes": [note]})
    html = render_html(report)
    assert "None" not in html
    svg = next(s for s in _svgs(html) if "flip" in s)
    row = next(g for g in re.findall(r'<g class="row">.*?</g>', svg, flags=re.S)
               if "region" in g)
    assert "does not apply: not a model input" in row
    assert "<circle" not in row and "<line" not in row


def test_the_gap_rules_are_rendered_like_the_others():
    from probe.report.junit import render_junit
    from probe.report.markdown import render_markdown

    report = json.loads(GOLDEN.read_text())
    rules = [r for r in report["verdict"]["rules"] if r["name"] in
             ("max_fpr_gap", "max_fnr_gap", "max_error_gap")]
    assert len(rules) == 30  # 10 groups compared (3 + 1 + 1 + 5), three rules
    failed = next(r for r in rules if r["status"] == "fail")
    value = f"{failed['value']['value']:.4f}"
    for out in (render_html(report), render_markdown(report), render_junit(report)):
        for name in ("max_fpr_gap", "max_fnr_gap", "max_error_gap"):
            assert name in out
        assert value in out
