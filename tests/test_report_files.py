"""The report files other than JSON: report.md, report.html (with inline SVG), junit.xml, and the
atomic writing of the report folder.

External references used here: a real browser (headless Chromium) loads the HTML and reports console
errors and the DOM it built; markdown-it-py (a CommonMark + GFM-tables parser, shipped with rich)
parses the Markdown; xml.etree parses the JUnit XML and the SVG; html.parser checks the HTML's
nesting. The expected numbers come from the fixture's own counts, recomputed here by hand.
"""

from __future__ import annotations

import copy
import importlib.util
import json
import os
import re
import shutil
import subprocess
import xml.etree.ElementTree as ET
from html.parser import HTMLParser
from pathlib import Path

import pytest
from markdown_it import MarkdownIt

from probe.errors import PlanError
from probe.report import files as report_files
from probe.report import svg
from probe.report.files import write_file, write_report
from probe.report.html import render_html
from probe.report.junit import render_junit
from probe.report.fmt import CAUTION
from probe.report.markdown import render_markdown
from probe.report.model import Plot, build_model

_spec = importlib.util.spec_from_file_location(
    "report_fixture", Path(__file__).with_name("report_fixture.py")
)
fixture = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(fixture)
example_report = fixture.example_report

CAUTION_WORDS = ("not a legal finding", "rule of thumb", "counsel")


# -- helpers -------------------------------------------------------------------------------------

_VOID = {
    "area",
    "base",
    "br",
    "col",
    "embed",
    "hr",
    "img",
    "input",
    "link",
    "meta",
    "source",
    "track",
    "wbr",
}
# SVG children written self-closed (<line/>, <circle/>, <rect/>)
_SELF_CLOSING_OK = {"line", "circle", "rect", "path"}


class _StrictHTML(HTMLParser):
    """Collects tags, attributes and nesting errors (html.parser itself never raises)."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.starts: list[tuple[str, dict]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.starts.append((tag, dict(attrs)))
        if tag not in _VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self.starts.append((tag, dict(attrs)))
        if tag not in _VOID and tag not in _SELF_CLOSING_OK:
            self.errors.append(f"self-closed <{tag}/>")

    def handle_endtag(self, tag):
        if tag in _VOID:
            return
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes <{self.stack[-1] if self.stack else None}>")
        else:
            self.stack.pop()

    def handle_data(self, data):
        self.text.append(data)


def _parse_html(text: str) -> _StrictHTML:
    p = _StrictHTML()
    p.feed(text)
    p.close()
    return p


def _f(x: float, digits: int = 3) -> str:
    return f"{x:.{digits}f}"


# -- HTML ----------------------------------------------------------------------------------------


def test_html_escapes_user_strings_and_has_no_script_or_external_url():
    report = example_report(with_comparison=True)
    text = render_html(report)
    assert fixture.SCRIPT_GROUP not in text
    assert "<script" not in text.lower()
    assert "&lt;script&gt;alert(&quot;x&quot;)&lt;/script&gt;" in text
    parsed = _parse_html(text)
    assert parsed.errors == []
    assert parsed.stack == []
    assert not any(tag == "script" for tag, _ in parsed.starts)
    for tag, attrs in parsed.starts:
        for name in ("src", "href", "xlink:href", "action", "srcset", "data"):
            value = attrs.get(name)
            if value is not None:
                assert value.startswith("#"), f"<{tag} {name}={value!r}> points outside the page"
        assert tag not in ("link", "img", "iframe", "object", "embed")
    assert not re.search(r"url\(|@import", text)
    # the group name reaches the reader as text, unchanged
    assert fixture.SCRIPT_GROUP in "".join(parsed.text)
    assert fixture.BRACKET_LABEL in "".join(parsed.text)


def test_html_sections_in_order_with_caution_and_pictures():
    report = example_report(with_comparison=True)
    text = render_html(report)
    parsed = _parse_html(text)
    ids = [a["id"] for t, a in parsed.starts if t == "section"]
    assert ids == ["verdict", "groups", "slices", "flips", "comparison", "provenance"]
    body = " ".join("".join(parsed.text).split())
    assert body.index("Caution.") < body.index("Verdict:")
    assert all(w in body for w in CAUTION_WORDS)
    svgs = [a for t, a in parsed.starts if t == "svg"]
    # one group chart per protected attribute, the slice forest, the flip chart
    n_attributes = len({g["attribute"] for g in report["groups"]})
    assert len(svgs) == n_attributes + 2
    assert all(a.get("role") == "img" and a.get("aria-labelledby") for a in svgs)
    # every id unique (aria-labelledby must point at exactly one element)
    all_ids = [a["id"] for _, a in parsed.starts if "id" in a]
    assert len(all_ids) == len(set(all_ids))
    # a null section says so
    assert "Not run." not in body
    text2 = render_html(example_report())
    assert '<section id="comparison"><h2>Comparison with the baseline</h2><p>Not run.</p>' in text2


def test_html_rerenders_identically_from_saved_json_and_leaves_input_alone():
    report = example_report(with_comparison=True)
    before = copy.deepcopy(report)
    text = render_html(report)
    assert report == before
    assert render_html(json.loads(json.dumps(report, allow_nan=False))) == text


def _plots(report: dict, key: str) -> list[Plot]:
    """The pictures the report model gives one section, in order."""
    section = next(s for s in build_model(report).sections if s.key == key)
    return [b for b in section.blocks if isinstance(b, Plot)]


def _axis_map(root: ET.Element):
    """Fit x = a + b * value from the tick labels under the axis (their x and their text)."""
    ticks = [
        (float(t.get("x")), float(t.text))
        for t in root.iter("text")
        if t.get("text-anchor") == "middle" and re.fullmatch(r"-?\d+(\.\d+)?", t.text or "")
    ]
    assert len(ticks) >= 3
    (x0, v0), (x1, v1) = ticks[0], ticks[-1]
    b = (x1 - x0) / (v1 - v0)
    for x, v in ticks:  # the ticks are evenly spaced on one linear scale
        assert x == pytest.approx(x0 + b * (v - v0), abs=0.05)
    return lambda x: v0 + (x - x0) / b


def test_group_chart_draws_four_fifths_line_at_0_8_of_highest_rate():
    report = example_report()
    root = ET.fromstring(svg.render_plot(_plots(report, "groups")[0], uid="t"))
    value_at = _axis_map(root)
    # selection counts of the fixture, by hand: M 2970/5210, F 1870/4630, tiny group 12/40
    highest = 2970 / 5210
    vertical = [ln for ln in root.iter("line") if ln.find("title") is not None]
    by_title = {ln.find("title").text: value_at(float(ln.get("x1"))) for ln in vertical}
    four_fifths = next(v for k, v in by_title.items() if k.startswith("four-fifths"))
    assert four_fifths == pytest.approx(0.8 * highest, abs=0.002)
    assert f"{0.8 * highest:.3f}" in next(k for k in by_title if k.startswith("four-fifths"))
    # each group's dot (circle, or square when flagged) sits at its selection rate
    marks = []
    for g in root.iter("g"):
        if g.get("class") != "row":
            continue
        c = g.find("circle")
        r = g.find("rect[@width='9']")
        marks.append(
            value_at(float(c.get("cx"))) if c is not None else value_at(float(r.get("x")) + 4.5)
        )
    assert marks == pytest.approx([2970 / 5210, 1870 / 4630, 12 / 40], abs=0.002)
    assert root.find("title").text == "Selection rate by sex"


def test_slice_forest_marks_overall_rate_and_each_slice_rate():
    s = example_report()["slices"]
    root = ET.fromstring(svg.render_plot(_plots(example_report(), "slices")[0], uid="t"))
    value_at = _axis_map(root)
    overall = next(ln for ln in root.iter("line") if ln.find("title") is not None)
    assert value_at(float(overall.get("x1"))) == pytest.approx(1020 / 5000, abs=0.002)
    cx = [value_at(float(c.get("cx"))) for c in root.iter("circle")]
    # the fixture's slice counts: 121/312, 142/455, 46/140, 170/610
    assert cx == pytest.approx([121 / 312, 142 / 455, 46 / 140, 170 / 610], abs=0.002)
    # each row's interval bar spans its Wilson interval
    rows = [g for g in root.iter("g") if g.get("class") == "row"]
    for g, found in zip(rows, s["found"]):
        bar = next(ln for ln in g.iter("line") if ln.get("y1") == ln.get("y2"))
        assert value_at(float(bar.get("x1"))) == pytest.approx(found["rate"]["low"], abs=0.002)
        assert value_at(float(bar.get("x2"))) == pytest.approx(found["rate"]["high"], abs=0.002)


def test_flip_chart_lists_impossible_test_as_not_possible():
    flips = example_report()["flips"]
    root = ET.fromstring(svg.render_plot(_plots(example_report(), "flips")[0], uid="t"))
    rows = [g for g in root.iter("g") if g.get("class") == "row"]
    assert len(rows) == len(flips)
    assert len(list(root.iter("circle"))) == sum(not f["impossible"] for f in flips)
    # a row without a value says why in place of the bar (its note), not a bare n/a
    assert "not possible" in [t.text for t in rows[-1].iter("text")]


# -- headless Chromium ---------------------------------------------------------------------------


def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


_CONSOLE = re.compile(r":CONSOLE(\(\d+\))?\]|Uncaught")


def _run_chromium(exe: str, url: str, profile: Path, *extra: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [
            exe,
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--disable-dev-shm-usage",
            f"--user-data-dir={profile}",
            "--enable-logging=stderr",
            "--v=0",
            *extra,
            url,
        ],
        check=False,
        capture_output=True,
        text=True,
        timeout=120,
    )


@pytest.fixture(scope="module")
def chromium():
    exe = _chromium()
    if exe is None:
        if os.environ.get("CI"):
            pytest.fail("chromium is not installed; CI needs `apt-get install -y chromium`")
        pytest.skip("chromium is not installed (set CI to make this a failure)")
    return exe


def test_html_in_headless_chromium_has_no_console_errors_and_shows_pictures(chromium, tmp_path):
    report = example_report(with_comparison=True)
    paths = write_report(report, tmp_path / "out", formats=("html",))
    url = paths["html"].resolve().as_uri()
    # the detector catches a page that does log an error, so a clean run means something
    bad = tmp_path / "bad.html"
    bad.write_text("<!DOCTYPE html><title>x</title><script>console.error('x'); nope();</script>")
    control = _run_chromium(chromium, bad.as_uri(), tmp_path / "p0", "--dump-dom")
    assert _CONSOLE.search(control.stderr), control.stderr[-2000:]

    run = _run_chromium(chromium, url, tmp_path / "p1", "--dump-dom")
    assert run.returncode == 0, run.stderr[-2000:]
    console = [ln for ln in run.stderr.splitlines() if _CONSOLE.search(ln)]
    assert console == []
    dom = _parse_html(run.stdout)
    svgs = [a for t, a in dom.starts if t == "svg"]
    assert len(svgs) == len({g["attribute"] for g in report["groups"]}) + 2
    assert sum(t == "circle" for t, _ in dom.starts) > 10
    assert "Verdict:" in "".join(dom.text)

    shot = tmp_path / "shot.png"
    run = _run_chromium(
        chromium,
        url,
        tmp_path / "p2",
        "--hide-scrollbars",
        f"--screenshot={shot}",
        "--window-size=1200,2000",
    )
    assert run.returncode == 0, run.stderr[-2000:]
    png = shot.read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    width, height = int.from_bytes(png[16:20], "big"), int.from_bytes(png[20:24], "big")
    assert (width, height) == (1200, 2000)


# -- JUnit ---------------------------------------------------------------------------------------


def _suite(text: str) -> ET.Element:
    root = ET.fromstring(text.encode("utf-8"))
    suites = [root] if root.tag == "testsuite" else root.findall("testsuite")
    assert len(suites) == 1
    return suites[0]


@pytest.mark.parametrize("strict", [False, True])
def test_junit_counts_and_failure_messages(strict):
    report = example_report()
    report["verdict"]["fail_on_inconclusive"] = strict
    rules = report["verdict"]["rules"]
    suite = _suite(render_junit(report))
    assert suite.get("name") == "probe policy"
    n_fail = sum(r["status"] == "fail" for r in rules)
    n_inc = sum(r["status"] == "inconclusive" for r in rules)
    cases = suite.findall("testcase")
    assert int(suite.get("tests")) == len(cases) == len(rules)
    assert int(suite.get("failures")) == n_fail + (n_inc if strict else 0)
    assert int(suite.get("skipped")) == (0 if strict else n_inc)
    assert int(suite.get("errors")) == 0
    assert int(suite.get("failures")) == len(suite.findall("testcase/failure"))
    assert int(suite.get("skipped")) == len(suite.findall("testcase/skipped"))
    for case, rule in zip(cases, rules):
        assert case.get("classname") == "probe.policy"
        assert case.get("name") == f"{rule['name']} ({rule['subject']})"
        failure = case.find("failure")
        if rule["status"] == "fail" or (strict and rule["status"] == "inconclusive"):
            msg = failure.get("message")
            est = rule["value"]
            if est["value"] is not None:
                for x in (est["value"], est["low"], est["high"]):
                    assert _f(x, 4) in msg
                assert f"[{_f(est['low'], 4)}, {_f(est['high'], 4)}]" in msg
            assert f"{rule['threshold']:g}" in msg
        else:
            assert failure is None
    names = [c.get("name") for c in cases]
    assert len(set(names)) == len(names)
    props = {p.get("name"): p.get("value") for p in suite.iter("property")}
    assert all(w in props["caution"] for w in CAUTION_WORDS)


def test_junit_survives_characters_xml_cannot_hold():
    report = example_report()
    report["verdict"]["rules"][0]["message"] = 'bad\x01byte\ufffe & <tag> "quoted"'
    suite = _suite(render_junit(report))
    msg = suite.find("testcase/failure").get("message")
    # a control character is shown escaped; a non-character XML cannot hold is dropped
    assert 'bad\\x01byte & <tag> "quoted"' in msg


def test_junit_without_policy_is_an_empty_suite():
    report = example_report()
    report["verdict"] = None
    suite = _suite(render_junit(report))
    assert suite.get("tests") == "0" and suite.findall("testcase") == []


# -- Markdown ------------------------------------------------------------------------------------

_UNESCAPED_PIPE = re.compile(r"(?<!\\)\|")


def _raw_tables(text: str) -> list[list[list[str]]]:
    """Tables as rows of raw cells, splitting on unescaped pipes (what a GFM parser does)."""
    tables, current = [], []
    for line in text.splitlines() + [""]:
        if line.startswith("|"):
            current.append([c.strip() for c in _UNESCAPED_PIPE.split(line.strip())[1:-1]])
        elif current:
            tables.append(current)
            current = []
    return tables


def test_markdown_tables_have_the_header_cell_count():
    text = render_markdown(example_report(with_comparison=True))
    tables = _raw_tables(text)
    # verdict (by rule, every check), 2 group tables, slices, flips, comparison metrics, worse
    # slices, provenance
    assert len(tables) == 9
    for table in tables:
        header = table[0]
        assert all(re.fullmatch(r"-{3}:?", c) for c in table[1])
        for row in table:
            assert len(row) == len(header), row
    # markdown-it-py finds the same tables
    html = MarkdownIt("commonmark").enable("table").render(text)
    assert html.count("<table>") == len(tables)
    for raw, rendered in zip(tables, re.findall(r"<table>.*?</table>", html, flags=re.DOTALL)):
        assert rendered.count("<tr>") == len(raw) - 1  # the separator line is not a row


def test_markdown_renders_labels_verbatim_and_escapes_html():
    text = render_markdown(example_report(with_comparison=True))
    html = MarkdownIt("commonmark").enable("table").render(text)
    assert "<script" not in html
    assert "&lt;script&gt;alert(&quot;x&quot;)&lt;/script&gt;" in html
    # brackets and the pipe survive, the pipe inside one table cell
    assert f"<td>{fixture.BRACKET_LABEL} and employment = self-employed</td>" in html
    assert f"<td>employment = {fixture.PIPE_LEVEL}</td>" in html
    assert "<a " not in html


def test_markdown_order_caution_and_null_section():
    text = render_markdown(example_report())
    heads = [ln for ln in text.splitlines() if ln.startswith("## ")]
    assert [h.split(":")[0] for h in heads] == [
        "## Verdict",
        "## Groups",
        "## Slices",
        "## Counterfactual flips",
        "## Comparison with the baseline",
        "## Provenance",
    ]
    assert heads[0] == "## Verdict: FAILED"
    caution_at = text.index("**Caution.**")
    assert caution_at < text.index("## Verdict")
    assert all(w in text[caution_at : text.index("## Verdict")] for w in CAUTION_WORDS)
    comparison = text[text.index("## Comparison") : text.index("## Provenance")]
    assert "Not run." in comparison
    # the verdict rows give the measured value, interval and bound of the failing impact ratio
    rule = example_report()["verdict"]["rules"][0]
    v = rule["value"]
    lines = [ln for ln in text.splitlines() if "sex = F |" in ln and "fail" in ln]
    assert any(f"| {_f(v['value'], 4)} | [{_f(v['low'], 4)}, {_f(v['high'], 4)}] | 95 % (1) | ≥ 0.8 |"
               in ln for ln in lines)


@pytest.mark.parametrize("render", [render_markdown, render_html, render_junit])
def test_every_renderer_falls_back_to_the_fixed_caution(render):
    report = example_report()
    del report["caution"]
    text = render(report)
    if render is render_html:
        text = "".join(_parse_html(text).text)
    elif render is render_markdown:
        text = text.replace("\\", "")
    else:
        text = next(
            p.get("value") for p in _suite(text).iter("property") if p.get("name") == "caution"
        )
    assert CAUTION in text


# -- write_report --------------------------------------------------------------------------------


def test_write_report_creates_folder_and_writes_every_file(tmp_path):
    report = example_report(with_comparison=True)
    out = tmp_path / "a" / "b" / "report"
    paths = write_report(report, out)
    assert {k: p.name for k, p in paths.items()} == {
        "json": "report.json",
        "html": "report.html",
        "md": "report.md",
        "junit": "junit.xml",
    }
    assert sorted(os.listdir(out)) == ["junit.xml", "report.html", "report.json", "report.md"]
    assert json.loads(paths["json"].read_text()) == report
    assert paths["md"].read_text(encoding="utf-8") == render_markdown(report)
    assert paths["html"].read_text(encoding="utf-8") == render_html(report)
    assert paths["junit"].read_text(encoding="utf-8") == render_junit(report)


def test_write_report_replaces_existing_files_whole_and_uses_json_text(tmp_path):
    report = example_report()
    (tmp_path / "report.md").write_text("x" * 500_000)
    (tmp_path / "report.json").write_text("y" * 500_000)
    paths = write_report(report, tmp_path, formats=("md", "json"), json_text='{"canonical": 1}')
    assert list(paths) == ["md", "json"]
    assert (tmp_path / "report.md").read_text(encoding="utf-8") == render_markdown(report)
    assert (tmp_path / "report.json").read_text() == '{"canonical": 1}'
    assert sorted(os.listdir(tmp_path)) == ["report.json", "report.md"]


def _snapshot(folder):
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


@pytest.mark.parametrize("fail_at", ["second file", "swap"])
def test_write_report_failure_leaves_the_old_folder_whole_and_no_temp_files(tmp_path, monkeypatch,
                                                                            fail_at):
    out = tmp_path / "out"
    write_report(example_report(), out)
    before = _snapshot(out)
    calls = []
    real_write, real_rename = report_files._write_synced, report_files.os.rename

    def failing_write(path, data):
        calls.append(path)
        if len(calls) == 2:
            raise OSError(28, "No space left on device")
        real_write(path, data)

    def failing_rename(src, dst):
        calls.append(dst)
        if Path(dst) == out and str(src).endswith(".tmp"):  # the new folder moving in
            raise OSError(28, "No space left on device")
        real_rename(src, dst)

    if fail_at == "swap":
        monkeypatch.setattr(report_files, "_exchange", lambda a, b: False)  # the two-rename path
        monkeypatch.setattr(report_files.os, "rename", failing_rename)
    else:
        monkeypatch.setattr(report_files, "_write_synced", failing_write)
    with pytest.raises(PlanError, match="cannot write report folder .*out.*No space left"):
        write_report(example_report(with_comparison=True), out)
    assert calls
    assert os.listdir(tmp_path) == ["out"] and _snapshot(out) == before


@pytest.mark.parametrize("exchange", [True, False])
def test_write_report_replaces_the_folder_as_a_whole(tmp_path, monkeypatch, exchange):
    out = tmp_path / "out"
    write_report(example_report(), out, formats=("json", "md", "junit"))
    inode = out.stat().st_ino
    if not exchange:
        monkeypatch.setattr(report_files, "_exchange", lambda a, b: False)
    paths = write_report(example_report(), out, formats=("html",))
    assert paths == {"html": out / "report.html"}
    assert os.listdir(out) == ["report.html"]  # the old files went with the old folder
    assert os.listdir(tmp_path) == ["out"] and out.stat().st_ino != inode


def test_write_report_refuses_a_folder_holding_other_files(tmp_path):
    (tmp_path / "data.csv").write_text("a\n1\n")
    with pytest.raises(PlanError, match="holds files probe did not write .*data.csv"):
        write_report(example_report(), tmp_path)
    assert os.listdir(tmp_path) == ["data.csv"]


def test_write_report_renders_before_writing(tmp_path):
    report = example_report()
    report["slices"]["overall"]["value"] = float("nan")  # not JSON: must fail before any file
    out = tmp_path / "new"
    with pytest.raises(ValueError):
        write_report(report, out)
    assert not out.exists()


def test_write_report_rejects_bad_formats_and_folders(tmp_path):
    with pytest.raises(PlanError, match=r"`report.formats` has unknown format 'pdf'"):
        write_report(example_report(), tmp_path, formats=("md", "pdf"))
    target = tmp_path / "file"
    target.write_text("")
    with pytest.raises(PlanError, match="exists and is not a folder"):
        write_report(example_report(), target, formats=("md",))


def test_a_report_with_nothing_run_still_renders_everywhere():
    report = {
        "schema": "probe.report/2",
        "provenance": {"probe_version": "0.1.0", "confidence_level": 0.9},
        "groups": None,
        "slices": None,
        "flips": None,
        "comparison": None,
        "verdict": {"passed": None, "fail_on_inconclusive": False, "rules": []},
    }
    md = render_markdown(report)
    assert md.count("Not run.") == 4 and "## Verdict: NO POLICY" in md
    html = render_html(report)
    parsed = _parse_html(html)
    assert parsed.errors == [] and not any(t == "svg" for t, _ in parsed.starts)
    assert html.count("<p>Not run.</p>") == 4
    suite = _suite(render_junit(report))
    assert (suite.get("tests"), suite.get("failures"), suite.get("skipped")) == ("0", "0", "0")


def test_write_file_is_atomic_and_leaves_no_temp_file(tmp_path, monkeypatch):
    path = write_file(tmp_path / "a" / "x.json", "{}")
    assert path == tmp_path / "a" / "x.json" and path.read_text() == "{}"

    def failing_replace(src, dst):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(report_files.os, "replace", failing_replace)
    with pytest.raises(PlanError, match="cannot write file .*x.json.*No space left"):
        write_file(path, '{"new": 1}')
    assert os.listdir(path.parent) == ["x.json"] and path.read_text() == "{}"


def test_number_formatting_helpers():
    from probe.report.fmt import fmt_est, fmt_num, fmt_p, metric_name

    assert fmt_num(-0.0001) == "0.000" and fmt_num(-0.0015) == "-0.002"
    assert fmt_num(None) == "n/a" and fmt_num(float("nan")) == "n/a"
    assert fmt_p(0.0) == "< 1e-300" and fmt_p(0.00031) == "3.1e-04" and fmt_p(0.25) == "0.250"
    assert fmt_est({"value": 0.5, "low": None, "high": None, "method": "wilson"}) == "0.500"
    assert metric_name("fnr") == "false-negative rate" and metric_name("auc") == "auc rate"


def test_proxies_section_renders_when_present():
    from probe.report.html import render_html
    from probe.report.markdown import render_markdown

    report = example_report()
    report["proxies"] = [{
        "attribute": "sex", "multivariate_auc": {"value": 0.71, "low": 0.69, "high": 0.73,
                                                 "method": "cv-fold-t"},
        "features": [{"feature": "part_time|x", "mutual_information": 0.09, "auc": 0.68,
                      "importance": 0.12},
                     {"feature": "<b>income</b>", "mutual_information": 0.02, "auc": 0.55,
                      "importance": 0.01}],
    }]
    md = render_markdown(report)
    section = md[md.index("## Proxies"):]
    assert "part\\_time\\|x" in section and "0.710 [0.690, 0.730]" in section
    html_text = render_html(report)
    assert 'id="proxies"' in html_text and "<b>income</b>" not in html_text
    assert html_text.index('id="flips"') < html_text.index('id="proxies"') < html_text.index('id="comparison"')
    assert "## Proxies" not in render_markdown(example_report())  # absent section: nothing rendered


def test_flip_concentration_is_rendered_when_present():
    from probe.report.html import render_html
    from probe.report.markdown import render_markdown

    report = example_report()
    flips = [f for f in report["flips"] if f.get("flip_rate")]
    flips[0]["by_slice"] = [{"predicates": [], "label": "region = <north> & age in [25, 34)",
                             "rows": 212, "flip_rate": {"value": 0.25, "low": 0.2, "high": 0.31,
                                                        "method": "wilson"}}]
    md = render_markdown(report)
    section = md[md.index("### Where the flips concentrate"):]
    assert "age in \\[25, 34)" in section and "0.250 [0.200, 0.310]" in section
    html_text = render_html(report)
    assert "Where the flips concentrate" in html_text and "&lt;north&gt;" in html_text
