"""Golden files: every renderer's output for one small seeded run of every section, and for a run
under a sampling design.

The run (``tests/golden/plan.toml`` on the committed ``holdout.csv`` with the closed-form models
in ``golden_model.py``) goes through the command line once; its ``report.json`` is normalised (the
date, timings, library versions and absolute paths vary by machine) and every renderer is then
driven from that one dict: the terminal on a colourless console at 80 and 120 columns, Markdown,
HTML, JUnit XML, and the JSON itself. A change to any of them must be deliberate: regenerate with
``PROBE_UPDATE_GOLDEN=1 python -m pytest tests/test_golden.py`` and review the diff.

The design run (``tests/golden/design/``: weights, clusters and membership probabilities, groups
only, the model's scores a column) pins the same renderers in ``tests/golden/design/``: the design
line under the header, ``n eff`` beside the group rates, the group weights and clusters, the
membership caution.
"""

from __future__ import annotations

import io
import json
import os
from pathlib import Path

import pandas as pd
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


def _run(folder: Path, tmp: Path, expected_code: int) -> dict:
    code = main(["run", str(folder / "plan.toml"), "--out", str(tmp), "--quiet"],
                console=Console(file=io.StringIO(), width=100, color_system=None))
    assert code == expected_code
    return _normalise(json.loads((tmp / "report.json").read_text()))


@pytest.fixture(scope="module")
def report(tmp_path_factory) -> dict:
    # the plan's policy fails on purpose (planted direct dependence on `sex`)
    return _run(HERE, tmp_path_factory.mktemp("golden"), 1)


@pytest.fixture(scope="module")
def design_report(tmp_path_factory) -> dict:
    # every impact ratio's interval straddles 0.8 on 600 rows: inconclusive, exit 0
    return _run(HERE / "design", tmp_path_factory.mktemp("golden-design"), 0)


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


def _check(text: str, path: Path) -> None:
    if UPDATE:
        path.write_text(text, encoding="utf-8")
    assert path.exists(), f"no golden file {path}; run with PROBE_UPDATE_GOLDEN=1 once"
    expected = path.read_text(encoding="utf-8")
    assert text == expected, f"{path.name} differs from its golden file; review and regenerate"


@pytest.mark.parametrize("name", sorted(RENDERERS))
def test_renderer_matches_golden_file(report, name):
    _check(RENDERERS[name](report), HERE / name)


@pytest.mark.parametrize("name", sorted(RENDERERS))
def test_renderer_under_a_design_matches_golden_file(design_report, name):
    _check(RENDERERS[name](design_report), HERE / "design" / name)


def test_design_report_shows_the_design_in_every_renderer(design_report):
    design = design_report["provenance"]["design"]
    frame = pd.read_csv(HERE / "design" / "holdout.csv")
    w = frame["weight"].to_numpy()
    # Kish's effective rows (sum w)^2 / sum w^2 and the clusters, from the CSV itself
    kish = f"{round(w.sum() ** 2 / (w * w).sum()):,}"
    clusters = f"{frame['person'].nunique():,} clusters"
    uncertain = f"{100 * (frame[['p_north', 'p_south']].max(axis=1) < 0.8).mean():.1f} %"
    assert design["clusters"] == frame["person"].nunique()
    for name, render in RENDERERS.items():
        if name == "report.json":
            continue
        text = " ".join(render(design_report).split())  # a terminal wraps lines anywhere
        for piece in (kish, clusters, uncertain, "Fairness under unawareness"):
            assert piece in text, (name, piece)
        if name != "junit.xml":  # the verdict's XML has no group table
            assert "n eff" in text, name


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
