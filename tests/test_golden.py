"""Golden files: every renderer's output for one small seeded run of every section.

The run (``tests/golden/plan.toml`` on the committed ``holdout.csv`` with the closed-form models
in ``golden_model.py``) goes through the command line once; its ``report.json`` is normalised (the
date, timings, library versions and absolute paths vary by machine) and every renderer is then
driven from that one dict: the terminal on a colourless console at 80 and 120 columns, Markdown,
HTML, JUnit XML, and the JSON itself. A change to any of them must be deliberate: regenerate with
``PROBE_UPDATE_GOLDEN=1 python -m pytest tests/test_golden.py`` and review the diff.
"""

from __future__ import annotations

import io
import json
import os
from pathlib import Path

import pytest
from rich.console import Console

from probe.cli import main
from probe.report import terminal
from probe.report.html import render_html
from probe.report.json import to_json
from probe.report.junit import render_junit
from probe.report.markdown import render_markdown

HERE = Path(__file__).parent / "golden"
UPDATE = os.environ.get("PROBE_UPDATE_GOLDEN") == "1"


def _normalise(report: dict) -> dict:
    prov = report["provenance"]
    prov["created"] = "<created>"
    prov["command"] = "probe run plan.toml"
    prov["versions"] = {k: "<version>" for k in prov["versions"]}
    prov["timings"] = {k: 0.0 for k in prov["timings"]}
    text = json.dumps(report)
    text = text.replace(json.dumps(str(HERE.resolve()))[1:-1], "<golden>")
    return json.loads(text)


@pytest.fixture(scope="module")
def report(tmp_path_factory) -> dict:
    out = tmp_path_factory.mktemp("golden")
    code = main(["run", str(HERE / "plan.toml"), "--out", str(out), "--quiet"],
                console=Console(file=io.StringIO(), width=100, color_system=None))
    assert code == 1  # the plan's policy fails on purpose (planted direct dependence on `sex`)
    return _normalise(json.loads((out / "report.json").read_text()))


def _terminal(report: dict, width: int) -> str:
    buf = io.StringIO()
    console = Console(file=buf, width=width, color_system=None, force_terminal=False,
                      legacy_windows=False, highlight=False)
    terminal.render(report, console, quiet=False, written={})
    return buf.getvalue()


RENDERERS = {
    "report.json": lambda r: to_json(r),
    "report.md": render_markdown,
    "report.html": render_html,
    "junit.xml": render_junit,
    "terminal-80.txt": lambda r: _terminal(r, 80),
    "terminal-120.txt": lambda r: _terminal(r, 120),
}


@pytest.mark.parametrize("name", sorted(RENDERERS))
def test_renderer_matches_golden_file(report, name):
    text = RENDERERS[name](report)
    path = HERE / name
    if UPDATE:
        path.write_text(text, encoding="utf-8")
    assert path.exists(), f"no golden file {path}; run with PROBE_UPDATE_GOLDEN=1 once"
    expected = path.read_text(encoding="utf-8")
    assert text == expected, f"{name} differs from its golden file; review and regenerate"


def test_transport_moves_the_proxies_the_proxies_table_ranks(report):
    # one ranking: the features transport moves for `group` are the proxies table's top
    # `n_proxies` (3) at or above MIN_PROXY_AUC, in the table's order, after the attribute itself
    # (the golden model reads every column, `group` included)
    from probe.flips import MIN_PROXY_AUC

    table = next(p for p in report["proxies"] if p["attribute"] == "group")
    top = [f["feature"] for f in table["features"][:3] if f["auc"] >= MIN_PROXY_AUC]
    assert top == ["region"]
    rows = [r for r in report["flips"] if r["attribute"] == "group" and r["mode"] == "transport"]
    assert len(rows) == 6
    for row in rows:
        assert row["moved"] == ["group", *top]
        assert any(f"`region` (AUC {table['features'][0]['auc']:.3f})" in n for n in row["notes"])
