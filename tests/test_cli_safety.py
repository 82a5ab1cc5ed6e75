"""The command line under stress: internal errors, signals, outputs and options checked first,
the plan's name, the path rule, flags named as typed, commands that would do nothing, --policy,
``probe render`` and the help text."""

import argparse
import io
import json
import os
import signal
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from rich.console import Console

from probe import pipeline
from probe.cli import (EXIT_BAD_INPUT, EXIT_INTERNAL, EXIT_OK, EXIT_POLICY_FAILED, build_parser,
                       main)
from probe.plan import plan_from_dict

ROOT = Path(__file__).resolve().parents[1]


def _console(width=120):
    return Console(file=io.StringIO(), width=width, color_system=None, force_terminal=False)


def _holdout(folder, rate_b, n=2000, seed=0, name="h.csv"):
    """Two groups of n rows; selection rate 0.5 in A and `rate_b` in B (a score column decides)."""
    rng = np.random.default_rng(seed)
    group = np.repeat(["A", "B"], n)
    score = np.where(rng.uniform(size=2 * n) < np.where(group == "A", 0.5, rate_b), 0.9, 0.1)
    frame = pd.DataFrame({"group": group, "income": rng.gamma(3.0, 10.0, size=2 * n).round(1),
                          "y": (rng.uniform(size=2 * n) < 0.5).astype(int), "score": score})
    path = folder / name
    frame.to_csv(path, index=False)
    return path


def _one_error(capsys) -> str:
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and err.startswith("error: "), err
    assert "Traceback" not in err
    return err


def _groups(data, *extra):
    return ["groups", "--model", "column:score", "--data", str(data), "--label", "y",
            "--protected", "group", *extra]


@pytest.fixture
def no_run(monkeypatch):
    """Fails the test when the analysis starts: everything must be refused before it."""
    calls = []
    monkeypatch.setattr(pipeline, "run_plan", lambda *a, **k: calls.append(a) or 1 / 0)
    yield calls
    assert calls == []


def _write_plan(folder, data, body=""):
    plan = folder / "plan.toml"
    plan.write_text(f'{body}\n[data]\npath = "{os.path.relpath(data, folder)}"\nlabel = "y"\n'
                    'protected = ["group"]\n[model]\nspec = "column:score"\n')
    return plan


# -- 1. internal errors ---------------------------------------------------------------------------


def test_an_internal_error_is_one_line_and_exit_3(tmp_path, monkeypatch, capsys):
    def broken(*args, **kwargs):
        raise ValueError("window shape cannot be larger\nsecond line")

    monkeypatch.setattr(pipeline, "run_plan", broken)
    data = _holdout(tmp_path, 0.3, n=50)
    assert main(_groups(data), console=_console()) == EXIT_INTERNAL
    assert _one_error(capsys) == ("error: internal error (ValueError: window shape cannot be larger); "
                                  "re-run with --debug and report it")
    assert main(_groups(data, "--debug"), console=_console()) == EXIT_INTERNAL
    err = capsys.readouterr().err
    assert "Traceback" in err and err.rstrip().splitlines()[-1].startswith("error: internal error")


def test_keyboard_interrupt_is_130_and_signal_handlers_are_restored(tmp_path, monkeypatch, capsys):
    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(pipeline, "run_plan", interrupted)
    before = {s: signal.getsignal(s) for s in (signal.SIGINT, signal.SIGTERM, signal.SIGHUP)}
    assert main(_groups(_holdout(tmp_path, 0.3, n=50)), console=_console()) == 130
    assert capsys.readouterr().err.strip() == "interrupted"
    assert {s: signal.getsignal(s) for s in before} == before


def test_a_signal_a_library_turned_into_another_error_still_ends_the_run_as_the_signal(
        tmp_path, monkeypatch, capsys):
    # numpy, for one, can turn an exception raised inside its C code into a ValueError
    def converting(*args, **kwargs):
        try:
            os.kill(os.getpid(), signal.SIGTERM)
            time.sleep(5)
        except BaseException:
            raise ValueError("not a valid PEP 3118 buffer format string") from None

    monkeypatch.setattr(pipeline, "run_plan", converting)
    assert main(_groups(_holdout(tmp_path, 0.3, n=50)), console=_console()) == 143
    assert capsys.readouterr().err.strip() == "terminated (SIGTERM)"


# -- 2 and 3. signals mid-write: no temporary file, the old folder or the new one whole ----------


def _wait_for(pattern, parent, proc, timeout=120.0):
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if list(parent.glob(pattern)):
            return
        if proc.poll() is not None:
            pytest.fail(f"probe ended before writing: {proc.communicate()}")
        time.sleep(0.02)
    pytest.fail(f"no {pattern} appeared")


@pytest.mark.parametrize("sig, code, old, stage", [
    (signal.SIGTERM, 143, False, "folder"),
    (signal.SIGTERM, 143, True, "folder"),
    (signal.SIGINT, 130, True, "folder"),
    (signal.SIGHUP, 129, False, "json"),
    (signal.SIGTERM, 143, True, "json"),
])
def test_a_signal_mid_write_leaves_no_temporary_file(tmp_path, sig, code, old, stage):
    data = _holdout(tmp_path, 0.3, n=300)
    parent = tmp_path / "reports"
    out, copy = parent / "out", parent / "copy.json"
    if old:
        parent.mkdir()
        for name in ("report.json", "junit.xml"):
            (parent / "out").mkdir(exist_ok=True)
            (out / name).write_text(f"old {name}")
        copy.write_text("old copy")
    before = {p: p.read_bytes() for p in parent.rglob("*") if p.is_file()}
    data_bytes = data.read_bytes()
    env = {**os.environ, "PROBE_TEST_WRITE_DELAY": "0.5", "PYTHONPATH": str(ROOT)}
    proc = subprocess.Popen(
        [sys.executable, "-m", "probe", *_groups(data, "--out", str(out), "--json", str(copy),
                                                 "--quiet")],
        cwd=ROOT, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    _wait_for(".out.*.tmp/report.json" if stage == "folder" else ".copy.json.*.tmp", parent, proc)
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == code, err
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1
    assert [p for p in parent.rglob("*") if p.name.endswith((".tmp", ".old"))] == []
    if stage == "folder":  # stopped before the swap: the old folder (or none) exactly as it was
        assert {p: p.read_bytes() for p in parent.rglob("*") if p.is_file()} == before
    else:  # the folder was swapped in whole before the copy was started
        assert sorted(os.listdir(out)) == ["junit.xml", "report.html", "report.json", "report.md"]
        assert json.loads((out / "report.json").read_text())["schema"] == "probe.report/2"
        assert (copy.read_text() == "old copy") if old else not copy.exists()
    assert data.read_bytes() == data_bytes


# -- 4. outputs and options refused before the analysis ------------------------------------------


@pytest.mark.parametrize("flag, target, needle", [
    ("--out", "data.csv", "exists and is not a folder"),
    ("--out", "data.csv/sub", "is a file, not a folder"),
    ("--out", ".", "holds files probe did not write"),
    ("--out", "/proc/probe-out", "`/proc` is not writable"),
    ("--json", "data.csv/r.json", "is a file, not a folder"),
    ("--json", ".", "is a folder; give a file name"),
    ("--json", "/proc/x/r.json", "`/proc` is not writable"),
])
def test_unwritable_outputs_are_refused_before_the_analysis(tmp_path, monkeypatch, capsys, no_run,
                                                            flag, target, needle):
    monkeypatch.chdir(tmp_path)
    data = _holdout(tmp_path, 0.3, n=50, name="data.csv")
    before = sorted(os.listdir(tmp_path)), data.read_bytes()
    assert main(_groups(data, flag, target), console=_console()) == EXIT_BAD_INPUT
    assert needle in _one_error(capsys)
    assert (sorted(os.listdir(tmp_path)), data.read_bytes()) == before


@pytest.mark.skipif(hasattr(os, "geteuid") and os.geteuid() == 0, reason="root writes anywhere")
def test_a_folder_without_write_permission_is_refused_first(tmp_path, capsys, no_run):
    locked = tmp_path / "locked"
    locked.mkdir(mode=0o500)
    data = _holdout(tmp_path, 0.3, n=50)
    assert main(_groups(data, "--out", str(locked / "r")), console=_console()) == EXIT_BAD_INPUT
    assert "is not writable" in _one_error(capsys)


@pytest.mark.parametrize("command, extra, needle", [
    ("slices", ["--top", "0"], "error: --top must be 1 to 1000, got 0"),
    ("flips", ["--n-proxies", "51"], "error: --n-proxies must be 1 to 50, got 51"),
    ("slices", ["--depth", "9"], "error: --depth must be 1 to 4, got 9"),
    ("flips", ["--mode", "direct,sideways"], "error: --mode has unknown mode 'sideways'"),
])
def test_invalid_options_are_refused_before_the_analysis(tmp_path, capsys, no_run, command, extra,
                                                          needle):
    argv = [command, *_groups(_holdout(tmp_path, 0.3, n=50))[1:], *extra]
    assert main(argv, console=_console()) == EXIT_BAD_INPUT
    assert _one_error(capsys).startswith(needle)


# -- 5. the plan's name ---------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["../../../x", "/tmp/abs", ".hidden", "a/b", "a\\\\b", "x" * 81,
                                  "red\\u001b[31m", "", "a..b", "right\\u202eleft"])
def test_a_plan_name_that_is_not_a_file_name_fragment_is_refused(tmp_path, capsys, no_run, name):
    plan = _write_plan(tmp_path, _holdout(tmp_path, 0.3, n=50), f'name = "{name}"')
    before = sorted(os.listdir(tmp_path))
    assert main(["run", str(plan)], console=_console()) == EXIT_BAD_INPUT
    assert "`name` must be a plain file-name fragment" in _one_error(capsys)
    assert sorted(os.listdir(tmp_path)) == before


def test_a_plain_plan_name_is_accepted():
    plan = plan_from_dict({"name": "lending-v2.1_" + "x" * 67, "data": {"path": "d.csv", "label": "y"},
                           "model": {"spec": "column:s"}})
    assert len(plan.name) == 80


# -- 6. one rule for report paths ----------------------------------------------------------------


def test_report_paths_follow_one_rule_and_the_report_line_names_the_files(tmp_path, monkeypatch):
    project, elsewhere = tmp_path / "project", tmp_path / "elsewhere"
    project.mkdir(), elsewhere.mkdir()
    data = _holdout(project, 0.5, n=100)
    monkeypatch.chdir(elsewhere)
    # [report] out: relative to the plan file's folder, wherever probe is run from
    plan = _write_plan(project, data, 'name = "lending"\n[report]\nout = "rep"')
    console = _console(width=400)
    assert main(["run", str(plan)], console=console) == EXIT_OK
    assert (project / "rep" / "report.json").is_file()
    assert f"report: {project / 'rep' / 'report.json'}, " in console.file.getvalue()
    # --out: relative to the working directory
    assert main(["run", str(plan), "--out", "here"], console=_console()) == EXIT_OK
    assert (elsewhere / "here" / "report.json").is_file()
    # neither: reports/<name>-<time>/ under the working directory
    plan = _write_plan(project, data, 'name = "lending"')
    assert main(["run", str(plan)], console=_console()) == EXIT_OK
    (made,) = (elsewhere / "reports").iterdir()
    assert made.name.startswith("lending-") and (made / "junit.xml").is_file()


# -- 7. a flag out of range is blamed on the flag ------------------------------------------------


@pytest.mark.parametrize("extra, message", [
    (["--threshold", "1.5"], "error: --threshold must lie in [0, 1], got 1.5"),
    (["--seed", "-1"], "error: --seed must be 0 to 4294967295, got -1"),
    (["--seed", str(2**32)], "error: --seed must be 0 to 4294967295, got 4294967296"),
    (["--confidence-level", "1"], "error: --confidence-level must lie in [0.5, 1), got 1.0"),
    (["--batch-size", "0"], "error: --batch-size must be at least 1, got 0"),
])
def test_a_flag_out_of_range_names_the_flag(tmp_path, capsys, no_run, extra, message):
    assert main(_groups(_holdout(tmp_path, 0.3, n=50), *extra), console=_console()) == EXIT_BAD_INPUT
    assert _one_error(capsys) == message


@pytest.mark.parametrize("body, message", [
    ("seed = -1", "`seed` must be 0 to 4294967295, got -1"),
    ("[slices]\ntop = 0", "`slices.top` must be 1 to 1000, got 0"),
    ("[report]\nformats = []", "`report.formats` is empty; list some of json, html, md, junit"),
])
def test_a_plan_value_out_of_range_keeps_the_plan_wording(tmp_path, capsys, no_run, body, message):
    plan = _write_plan(tmp_path, _holdout(tmp_path, 0.3, n=50), body)
    assert main(["run", str(plan)], console=_console()) == EXIT_BAD_INPUT
    assert _one_error(capsys) == f"error: plan `{plan}`: {message}"


def test_the_largest_seed_is_accepted():
    plan = plan_from_dict({"seed": 2**32 - 1, "data": {"path": "d.csv", "label": "y"},
                           "model": {"spec": "column:s"}})
    assert plan.seed == 2**32 - 1


# -- 8. commands that would do nothing; --policy ---------------------------------------------------


@pytest.mark.parametrize("command, protected", [
    ("groups", None), ("groups", ",,"), ("flips", ",,"), ("proxies", " , "),
])
def test_a_command_with_nothing_to_do_is_refused(tmp_path, capsys, no_run, command, protected):
    argv = [command, "--data", str(_holdout(tmp_path, 0.3, n=50)), "--label", "y"]
    argv += [] if command == "proxies" else ["--model", "column:score"]
    argv += [] if protected is None else ["--protected", protected]
    assert main(argv, console=_console()) == EXIT_BAD_INPUT
    assert f"probe {command}: --protected names the attribute(s)" in _one_error(capsys)


def _policy(tmp_path, text, name="policy.toml"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_policy_on_a_subcommand_gives_the_verdicts_exit_code(tmp_path):
    # planted truth: B is selected at 0.3 against A's 0.5, an impact ratio of 0.6 (< 0.8, > 0.5)
    data = _holdout(tmp_path, 0.3)
    assert main(_groups(data), console=_console()) == EXIT_OK  # no policy: nothing to fail
    strict = _policy(tmp_path, "[policy]\nmin_impact_ratio = 0.8\n")
    out = tmp_path / "r.json"
    assert main(_groups(data, "--policy", str(strict), "--json", str(out)),
                console=_console()) == EXIT_POLICY_FAILED
    assert json.loads(out.read_text())["verdict"]["status"] == "fail"
    lenient = _policy(tmp_path, "[policy]\nmin_impact_ratio = 0.5\n", "lenient.toml")
    assert main(_groups(data, "--policy", str(lenient)), console=_console()) == EXIT_OK
    # on `probe run` the file replaces the plan's [policy]
    plan = _write_plan(tmp_path, data, "")
    plan.write_text(plan.read_text() + "[policy]\nmin_impact_ratio = 0.8\n")
    assert main(["run", str(plan), "--out", str(tmp_path / "a")], console=_console()) == 1
    assert main(["run", str(plan), "--out", str(tmp_path / "b"), "--policy", str(lenient)],
                console=_console()) == EXIT_OK


@pytest.mark.parametrize("text, needle", [
    ("[policy]\nmin_impact_ratoi = 0.8\n", "unknown key `min_impact_ratoi` in [policy]; did you mean"),
    ("seed = 1\n[policy]\n", "unknown key `seed`; a policy file holds one [policy] table"),
    ("[data]\npath = 'x'\n", "unknown key `data`"),
    ("", "no [policy] table"),
    ("[policy]\nmin_impact_ratio = 1.5\n", "`policy.min_impact_ratio` must lie in [0, 1], got 1.5"),
    ("[policy\n", "is not valid TOML"),
])
def test_a_bad_policy_file_is_refused_by_name(tmp_path, capsys, no_run, text, needle):
    path = _policy(tmp_path, text)
    assert main(_groups(_holdout(tmp_path, 0.3, n=50), "--policy", str(path)),
                console=_console()) == EXIT_BAD_INPUT
    err = _one_error(capsys)
    assert err.startswith(f"error: policy file `{path}`") and needle in err


# -- 9. probe render --------------------------------------------------------------------------------


def test_render_rewrites_a_saved_report_as_the_run_did(tmp_path, capsys):
    run_out = tmp_path / "run"
    assert main(_groups(_holdout(tmp_path, 0.3, n=200), "--out", str(run_out)),
                console=_console()) == EXIT_OK
    source = run_out / "report.json"
    before = source.read_bytes()
    out = tmp_path / "again"
    console = _console(width=400)
    assert main(["render", str(source), "--out", str(out), "--format", "json,html,md,junit"],
                console=console) == EXIT_OK
    for name in ("report.json", "report.html", "report.md", "junit.xml"):  # the run's own files
        assert (out / name).read_bytes() == (run_out / name).read_bytes(), name
    assert f"report: {out / 'report.json'}, " in console.file.getvalue()
    # default: next to the report, every format but json
    (run_out / "report.md").unlink()
    assert main(["render", str(source), "--quiet"], console=_console()) == EXIT_OK
    assert (run_out / "report.md").read_bytes() == (out / "report.md").read_bytes()
    assert source.read_bytes() == before


@pytest.mark.parametrize("content, args, needle", [
    ('{"schema": "probe.report/1"}', [], "has schema 'probe.report/1'; this probe renders"),
    ('{"rows": [1, 2]}', [], "is not a probe report"),
    ("[1, 2]", [], "is not a probe report"),
    ("not json", [], "is not a readable JSON file"),
    ('{"schema": "probe.report/2"}', ["--format", "json"], "is the report being read"),
    ('{"schema": "probe.report/2"}', ["--format", "pdf"], "--format has unknown format 'pdf'"),
    ('{"schema": "probe.report/2"}', ["--format", ","], "--format is empty"),
    ('{"schema": "probe.report/2", "groups": [1]}', [], "is not a complete report"),
])
def test_render_refuses_what_is_not_this_schemas_report(tmp_path, capsys, content, args, needle):
    source = tmp_path / "report.json"
    source.write_text(content)
    assert main(["render", str(source), *args], console=_console()) == EXIT_BAD_INPUT
    assert needle in _one_error(capsys)
    assert os.listdir(tmp_path) == ["report.json"] and source.read_text() == content


# -- 10. help ---------------------------------------------------------------------------------------


def test_every_option_of_every_command_has_help_text():
    parser = build_parser()
    (sub,) = [a for a in parser._actions if isinstance(a, argparse._SubParsersAction)]
    assert set(sub.choices) == {"demo", "run", "groups", "slices", "flips", "proxies", "compare",
                                "render"}
    for name, command in [("probe", parser), *sub.choices.items()]:
        for action in command._actions:
            if isinstance(action, argparse._SubParsersAction):
                continue
            text = action.help
            assert text and text is not argparse.SUPPRESS and text.strip(), (name, action.dest)
        if name not in ("render", "probe"):
            assert "--policy" in command.format_help(), name


def test_readme_and_contracts_document_the_new_surface():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    contracts = (ROOT / "docs" / "contracts.md").read_text(encoding="utf-8")
    for needle in ("PROBE_CACHE_DIR", "~/.cache/probe", "[proxies]", "share", "probe render",
                   "--policy", "`3`"):
        assert needle in readme, needle
    for needle in ("| 3 |", "| 143 |", "probe render", "--policy", "**The path rule.**"):
        assert needle in contracts, needle


def _warning_model(folder, *, fail: bool):
    (folder / "warns.py").write_text(
        "import warnings\nimport numpy as np\n"
        "def score(frame):\n"
        "    for _ in range(3):\n"
        "        warnings.warn('careful\\nnow \\x1b[31m')\n"
        f"    return np.full(len(frame), {'np.nan' if fail else 0.6})\n")
    return f"py:{folder / 'warns.py'}:score"


def test_warnings_are_one_line_each_after_a_finished_run(tmp_path, capsys):
    # the same warning three times: one line, escaped, after the run's output
    data = _holdout(tmp_path, 0.3)
    with warnings.catch_warnings():
        warnings.simplefilter("default")  # Python's own filter for a user's run (the suite's: error)
        code = main(["groups", "--data", str(data), "--label", "y", "--protected", "group",
                     "--quiet", "--model", _warning_model(tmp_path, fail=False), "--no-isolate"],
                    console=_console())
    assert code == EXIT_OK
    assert capsys.readouterr().err.splitlines() == ["warning: UserWarning: careful\\nnow \\x1b[31m"]


def test_a_failed_run_prints_its_error_line_alone(tmp_path, capsys):
    data = _holdout(tmp_path, 0.3)
    code = main(["groups", "--data", str(data), "--label", "y", "--protected", "group", "--quiet",
                 "--model", _warning_model(tmp_path, fail=True), "--no-isolate"],
                console=_console())
    assert code == EXIT_BAD_INPUT
    assert "warns.py" in _one_error(capsys)  # the scoring failure, with no warning line beside it
