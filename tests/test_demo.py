"""`probe demo` end to end: groups, slices, flips, comparison and the verdict, all four report files."""

import io
import json

import pytest
from rich.console import Console

from probe.cli import EXIT_BAD_INPUT, EXIT_OK, EXIT_POLICY_FAILED, main


def _console():
    return Console(file=io.StringIO(), width=120, color_system=None)


@pytest.mark.slow
@pytest.mark.parametrize("scenario", ["lending", "hiring"])
def test_demo_runs_every_section_and_writes_all_four_files(tmp_path, built, scenario):
    built(scenario)  # build outside the timed run
    console = _console()
    # the scenarios' plans are written to fail (scenarios/*/README.md: the candidate has a defect):
    # --strict gives `probe run`'s exit code; without it the demo exits 0 once it has run (one
    # scenario each way, so each demo runs once)
    strict = scenario == "hiring"
    code = main(["demo", scenario, "--out", str(tmp_path)] + ["--strict"] * strict, console=console)
    assert code == (EXIT_POLICY_FAILED if strict else EXIT_OK)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["junit.xml", "report.html", "report.json",
                                                        "report.md"]
    report = json.loads((tmp_path / "report.json").read_text())
    assert report["schema"] == "probe.report/2"
    for key in ("groups", "slices", "flips", "comparison", "verdict"):
        assert report[key], f"section {key} is empty"
    assert report["verdict"]["passed"] is False
    prov = report["provenance"]
    assert len(prov["model"]["sha256"]) == 64 and len(prov["data"]["sha256"]) == 64
    assert len(prov["plan_sha256"]) == 64 and prov["seed"] == 0
    assert "legal finding" in report["caution"]
    text = console.file.getvalue()
    assert text.index("verdict:") < text.index("Groups") < text.index("Slices")
    assert "<svg" in (tmp_path / "report.html").read_text()
    if scenario == "hiring":  # the protected attribute is a model input there: direct flips apply
        direct = [f for f in report["flips"] if f["mode"] == "direct" and f.get("flip_rate")]
        assert direct and max(f["flip_rate"]["value"] for f in direct) > 0.05


def test_demo_unknown_scenario_is_a_clear_error(capsys):
    assert main(["demo", "mortgages"], console=_console()) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "lending" in err and len(err.strip().splitlines()) == 1


@pytest.mark.slow
def test_demo_of_the_design_scenario_reports_its_design(tmp_path, built):
    scenario = built("tenancy")  # build outside the run
    console = _console()
    assert main(["demo", "tenancy", "--out", str(tmp_path)], console=console) == EXIT_OK
    report = json.loads((tmp_path / "report.json").read_text())
    design = report["provenance"]["design"]
    truths = scenario.truths["design"]
    assert design["weights"] == truths["weights"] and design["cluster"] == truths["cluster"]
    # the share of uncertain rows is the holdout's (the truths' is the fresh draw's)
    assert abs(design["membership"]["heritage"]["uncertain_share"]
               - truths["membership"]["uncertain_share"]) < 0.02
    assert {g["attribute"] for g in report["groups"]} == {"age_band", "heritage",
                                                          "heritage & age_band"}
    for key in ("groups", "slices", "flips", "comparison", "verdict"):
        assert report[key], f"section {key} is empty"
    text = " ".join(console.file.getvalue().split())  # the terminal wraps lines anywhere
    assert "Fairness under unawareness" in text and "rows weighted by design_weight" in text
