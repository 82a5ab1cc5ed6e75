"""The command line: exit codes, one-line errors, rendering, determinism of report.json."""

import io
import json

import numpy as np
import pandas as pd
import pytest
from rich.console import Console

from probe.cli import EXIT_BAD_INPUT, EXIT_OK, EXIT_POLICY_FAILED, main


def _console(width=120):
    return Console(file=io.StringIO(), width=width, color_system=None, force_terminal=False)


def _holdout(tmp_path, rate_b, n=2000, seed=0, name="h.csv"):
    """Two groups; selection rate 0.5 in A and `rate_b` in B, decided by a score column."""
    rng = np.random.default_rng(seed)
    group = np.repeat(["A", "B"], n)
    p = np.where(group == "A", 0.5, rate_b)
    score = np.where(rng.uniform(size=2 * n) < p, 0.9, 0.1)
    frame = pd.DataFrame({
        "group": group,
        "region[k]": rng.choice(["north", "south"], size=2 * n),  # brackets survive rendering
        "income": rng.gamma(3.0, 10.0, size=2 * n).round(1),
        "y": (rng.uniform(size=2 * n) < 0.5).astype(int),
        "score": score,
    })
    path = tmp_path / name
    frame.to_csv(path, index=False)
    return path


def _plan(tmp_path, data, *, policy="min_impact_ratio = 0.8", extra=""):
    plan = tmp_path / "plan.toml"
    plan.write_text(
        f'[data]\npath = "{data.name}"\nlabel = "y"\nprotected = ["group"]\n'
        f'[model]\nspec = "column:score"\n{extra}\n[policy]\n{policy}\n'
        f'[report]\nout = "out"\n'
    )
    return plan


@pytest.mark.parametrize("rate_b, n, code, status", [
    (0.30, 2000, EXIT_POLICY_FAILED, "fail"),     # IR 0.6, interval well below 0.8
    (0.50, 2000, EXIT_OK, "pass"),               # IR 1.0, interval well above 0.8
    (0.40, 150, EXIT_OK, "inconclusive"),        # IR 0.8, small groups: straddles
])
def test_run_exit_codes_follow_the_verdict(tmp_path, rate_b, n, code, status):
    plan = _plan(tmp_path, _holdout(tmp_path, rate_b, n=n))
    console = _console()
    assert main(["run", str(plan)], console=console) == code
    report = json.loads((tmp_path / "out" / "report.json").read_text())
    assert report["verdict"]["status"] == status
    assert f"verdict: {status.upper()}" in console.file.getvalue()
    if status == "inconclusive":
        assert main(["run", str(plan), "--fail-on-inconclusive"], console=_console()) == EXIT_POLICY_FAILED


def test_report_json_is_deterministic_apart_from_timings_and_dates(tmp_path):
    data = _holdout(tmp_path, 0.35)
    plan = _plan(tmp_path, data, extra="[slices]\nmetric = \"selection\"\ndepth = 2\n")
    texts = []
    for out in ("a", "b"):
        assert main(["run", str(plan), "--out", str(tmp_path / out)], console=_console()) in (0, 1)
        report = json.loads((tmp_path / out / "report.json").read_text())
        del report["provenance"]["timings"], report["provenance"]["created"]
        report["provenance"]["command"] = None
        texts.append(json.dumps(report, sort_keys=True))
    assert texts[0] == texts[1]
    assert set(json.loads(texts[0])) >= {"schema", "provenance", "groups", "slices", "flips",
                                         "comparison", "verdict"}


def test_groups_command_renders_on_a_narrow_plain_console(tmp_path, capsys):
    data = _holdout(tmp_path, 0.3)
    argv = ["groups", "--model", "column:score", "--data", str(data), "--label", "y",
            "--protected", "group,region[k]"]
    for width in (100, 30):
        console = _console(width=width)
        assert main(argv, console=console) == EXIT_OK  # no policy: nothing to fail
        text = console.file.getvalue()
        assert "\x1b[" not in text and "legal finding" in text.replace("\n", " ")
        assert width < 100 or "region[k]" in text


@pytest.mark.parametrize("argv, needle", [
    (["groups", "--model", "column:score", "--data", "MISSING.csv", "--label", "y",
          "--protected", "group"], "not found"),
    (["groups", "--model", "column:score", "--data", "{data}", "--label", "yy", "--protected", "group"],
     "label column `yy` is not in"),
    (["groups", "--model", "column:scor", "--data", "{data}", "--label", "y", "--protected", "group"], "scor"),
    (["groups", "--model", "column:score", "--data", "{data}", "--label", "income", "--protected", "group"],
         "not binary"),
    (["groups", "--model", "column:score", "--data", "{data}", "--label", "y", "--positive", "7",
          "--protected", "group"],
     "does not occur"),
    (["groups", "--data", "{data}"], "required"),
    (["frobnicate"], "invalid choice"),
    (["groups", "--model", "column:score", "--data", "{data}", "--label", "y", "--protected",
      "group", "--reference-group", "group"], "entries are ATTRIBUTE=LEVEL, got 'group'"),
    (["groups", "--model", "column:score", "--data", "{data}", "--label", "y", "--protected",
      "group", "--reference-group", "group=C"], "reference group `C` of `group` is not an observed"),
])
def test_bad_input_is_one_line_and_exit_2(tmp_path, capsys, argv, needle):
    data = _holdout(tmp_path, 0.3)
    argv = [a.replace("{data}", str(data)) for a in argv]
    assert main(argv, console=_console()) == EXIT_BAD_INPUT
    err = capsys.readouterr().err.strip()
    assert err.startswith("error: ") and needle in err
    assert len(err.splitlines()) == 1 and "Traceback" not in err


def test_a_fixed_reference_group_is_used_and_reported(tmp_path):
    # B selects less (0.3 against 0.5), so the data would choose A; the flag fixes B instead
    data = _holdout(tmp_path, 0.3)
    out = tmp_path / "r.json"
    argv = ["groups", "--model", "column:score", "--data", str(data), "--label", "y",
            "--protected", "group", "--reference-group", "group=B", "--json", str(out)]
    assert main(argv, console=_console()) == EXIT_OK
    rows = {g["group"]: g for g in json.loads(out.read_text())["groups"]}
    assert {g["reference_group"] for g in rows.values()} == {"B"}
    assert all(g["reference_fixed"] for g in rows.values())
    assert rows["A"]["impact_ratio"]["value"] > 1 and rows["B"]["impact_ratio"]["method"] == "reference"


def test_unknown_plan_key_is_named(tmp_path, capsys):
    plan = _plan(tmp_path, _holdout(tmp_path, 0.3), policy="min_impact_ration = 0.8")
    assert main(["run", str(plan)], console=_console()) == EXIT_BAD_INPUT
    assert "unknown key `min_impact_ration` in [policy]; did you mean `min_impact_ratio`" in capsys.readouterr().err


def test_input_file_is_not_modified(tmp_path):
    data = _holdout(tmp_path, 0.3)
    before = data.read_bytes()
    main(["run", str(_plan(tmp_path, data))], console=_console())
    assert data.read_bytes() == before


@pytest.mark.slow
@pytest.mark.parametrize("name", ["slices", "flips", "proxies", "compare"])
def test_each_subcommand_runs_on_a_built_scenario(tmp_path, built, name):
    s = built("hiring")  # sex is a model input there, so direct flips apply
    data, model = str(s.data_path), str(s.model_path)
    label = s.truths["label"]
    argv = {
        "slices": ["slices", "--model", model, "--data", data, "--label", label, "--metric", "fpr",
                   "--depth", "2"],
        "flips": ["flips", "--model", model, "--data", data, "--protected", "sex", "--mode", "direct"],
        "proxies": ["proxies", "--data", data, "--protected", "group", "--label", label],
        "compare": ["compare", "--model", str(s.candidate_path), "--baseline", model, "--data", data,
                    "--label", label, "--depth", "2"],
    }[name]
    out = tmp_path / name
    assert main([*argv, "--json", str(out / "r.json")], console=_console()) == EXIT_OK, name
    report = json.loads((out / "r.json").read_text())
    section = {"proxies": "proxies", "flips": "flips", "slices": "slices",
               "compare": "comparison"}[name]
    assert report[section], f"{name}: empty {section}"
    assert report["verdict"]["status"] == "no policy"
    if name == "flips":
        assert report["groups"] is None  # no label given: no group metrics, and no error
        assert max(f["flip_rate"]["value"] for f in report["flips"]) > 0.05  # scenarios/hiring/README.md
    if name == "proxies":
        assert report["proxies"][0]["features"][0]["feature"] == s.truths["proxies"]["group"]


def test_seed_and_confidence_flags_override_the_plan(tmp_path):
    plan = _plan(tmp_path, _holdout(tmp_path, 0.3), extra="seed = 3")
    plan.write_text("seed = 3\n" + plan.read_text().replace("seed = 3", ""))
    main(["run", str(plan)], console=_console())
    assert json.loads((tmp_path / "out" / "report.json").read_text())["provenance"]["seed"] == 3
    main(["run", str(plan), "--seed", "7", "--confidence-level", "0.9"], console=_console())
    prov = json.loads((tmp_path / "out" / "report.json").read_text())["provenance"]
    assert (prov["seed"], prov["confidence_level"]) == (7, 0.9)
    assert main(["run", str(plan), "--confidence-level", "2"], console=_console()) == EXIT_BAD_INPUT


def test_a_model_reading_the_whole_frame_never_sees_the_label(tmp_path):
    data = _holdout(tmp_path, 0.3)
    (tmp_path / "scorer.py").write_text(
        "def score(frame):\n"
        "    assert 'y' not in frame.columns, 'the label reached the model'\n"
        "    return frame['score']\n")
    plan = _plan(tmp_path, data, policy="")
    plan.write_text(plan.read_text().replace('spec = "column:score"', 'spec = "py:scorer.py:score"')
                    + '[flips]\nattributes = ["group"]\nmodes = ["transport"]\n')
    assert main(["run", str(plan)], console=_console()) == EXIT_OK
    report = json.loads((tmp_path / "out" / "report.json").read_text())
    assert report["provenance"]["model"]["kind"] == "python" and report["flips"]


def _rename_label(path, new):
    frame = pd.read_csv(path).rename(columns={"y": new})
    frame.to_csv(path, index=False)
    return path


def test_an_adverse_label_is_refused_until_the_favourable_decision_is_stated(tmp_path, capsys):
    data = _rename_label(_holdout(tmp_path, 0.5, n=300), "denied")
    base = ["groups", "--data", str(data), "--label", "denied", "--model", "column:score",
            "--protected", "group", "--quiet"]
    assert main(base, console=_console()) == EXIT_BAD_INPUT
    err = capsys.readouterr().err.strip().splitlines()
    assert err == ["error: label `denied` (positive value 1) reads as an adverse outcome, so the "
                   "favourable decision is probably the negative one; say which: --favorable "
                   "negative (or --favorable positive to keep the default reading; plan: "
                   "`favorable` in [model])"]
    for stated in ("negative", "positive"):
        out = tmp_path / f"{stated}.json"
        assert main([*base, "--favorable", stated, "--json", str(out)], console=_console()) == EXIT_OK
        prov = json.loads(out.read_text())["provenance"]
        assert (prov["favorable"], prov["favorable_stated"]) == (stated, True)
    plain = _holdout(tmp_path, 0.5, n=300, name="plain.csv")
    out = tmp_path / "default.json"
    assert main(["groups", "--data", str(plain), "--label", "y", "--model", "column:score",
                 "--protected", "group", "--quiet", "--json", str(out)], console=_console()) == 0
    prov = json.loads(out.read_text())["provenance"]
    assert (prov["favorable"], prov["favorable_stated"]) == ("positive", False)


def test_flips_of_fixed_scores_and_proxies_without_a_label_are_refused(tmp_path, capsys):
    data = _holdout(tmp_path, 0.5, n=300)
    assert main(["flips", "--data", str(data), "--label", "y", "--model", "column:score",
                 "--protected", "group", "--quiet"], console=_console()) == EXIT_BAD_INPUT
    assert "reads fixed scores" in capsys.readouterr().err
    assert main(["proxies", "--data", str(data), "--protected", "group", "--quiet"],
                console=_console()) == EXIT_BAD_INPUT
    assert "--label COL" in capsys.readouterr().err


def test_no_model_s_score_column_is_sliced_in_a_comparison(tmp_path):
    # the baseline's scores are a column too: slicing on them would find "old_score >= 0.6", a
    # region defined by a model's output, not by the people; both score columns are left out
    data = _holdout(tmp_path, 0.3)
    frame = pd.read_csv(data)
    rng = np.random.default_rng(5)
    wrong = (frame["score"] >= 0.5).astype(int) != frame["y"]  # the candidate's errors
    frame["old_score"] = (0.5 * wrong + rng.uniform(0, 0.5, len(frame))).round(3)
    frame.to_csv(data, index=False)
    plan = _plan(tmp_path, data, policy="", extra='[compare]\nbaseline = "column:old_score"\n'
                                                  '[slices]\ndepth = 2\n')
    assert main(["run", str(plan)], console=_console()) == EXIT_OK
    report = json.loads((tmp_path / "out" / "report.json").read_text())
    found = report["slices"]["found"] + report["comparison"]["worse_slices"]
    sliced = {p["column"] for s in found for p in s["predicates"]}
    assert sliced and not sliced & {"score", "old_score", "y"}
