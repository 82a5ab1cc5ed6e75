"""The README's Python example runs as written, and its set-up commands are the ones CI runs."""

import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text(encoding="utf-8")


@pytest.mark.slow
def test_readme_python_example_runs(built, monkeypatch, tmp_path):
    built("lending")
    monkeypatch.chdir(tmp_path)
    code = re.search(r"## Python API\n\n```python\n(.*?)```", README, re.S).group(1)
    namespace: dict = {}
    exec(compile(code, "README.md", "exec"), namespace)
    assert namespace["report"]["schema"] == "probe.report/2"
    assert namespace["slices"].found


def test_readme_leads_with_the_job_and_the_two_commands():
    lines = [line for line in README.splitlines() if line.strip()]
    assert lines[0] == "# probe"
    block = re.search(r"```\n(.*?)\n```", README, re.S).group(1).splitlines()
    assert block == ["pip install . && probe demo", "pip install '.[test]' && python -m pytest"]
    ci = (ROOT / ".ci" / "run").read_text()
    assert "pip install -q '.[test]'" in ci and ci.rstrip().endswith("python -m pytest")
    prose = " ".join(line.lstrip("> ") for line in README.splitlines())
    assert "not a legal finding" in prose and "rule of thumb" in prose and "counsel" in prose
