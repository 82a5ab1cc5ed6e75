"""The design on the command line and in plans: --weights, --cluster, [data.membership].

Every refusal is one line with exit 2; a design run records it in provenance and in each estimate;
unit weights change no finding.
"""

import io
import json

import numpy as np
import pandas as pd
import pytest
from rich.console import Console

from probe.cli import EXIT_BAD_INPUT, EXIT_OK, main


def _console():
    return Console(file=io.StringIO(), width=120, color_system=None, force_terminal=False)


def _holdout(tmp_path, n=1500, seed=0):
    rng = np.random.default_rng(seed)
    group = rng.choice(["A", "B"], n)
    area = rng.integers(0, 10, n)
    p_b = np.linspace(0.1, 0.9, 10)[area]
    frame = pd.DataFrame({
        "group": group,
        "y": (rng.random(n) < 0.5).astype(int),
        "score": np.where(rng.random(n) < np.where(group == "A", 0.5, 0.35), 0.9, 0.1),
        "w": rng.lognormal(0, 0.7, n).round(3),
        "ones": 1.0,
        "person": rng.integers(0, n // 3, n),
        "p_x": (1 - p_b).round(3),
        "p_z": p_b.round(3),
    })
    path = tmp_path / "h.csv"
    frame.to_csv(path, index=False)
    return path, frame


def _groups(tmp_path, capsys, *extra):
    path, _ = _holdout(tmp_path)
    out = tmp_path / "r.json"
    capsys.readouterr()
    code = main(["groups", "--model", "column:score", "--data", str(path), "--label", "y",
                 "--protected", "group", "--json", str(out), "--quiet", *extra],
                console=_console())
    return code, (json.loads(out.read_text()) if out.exists() else None), capsys.readouterr().err


def test_unit_weights_change_no_finding(tmp_path, capsys):
    _, plain, _ = _groups(tmp_path, capsys)
    (tmp_path / "r.json").unlink()
    code, ones, _ = _groups(tmp_path, capsys, "--weights", "ones")
    assert code == EXIT_OK
    for key in ("verdict", "groups", "groups_unknown"):
        assert ones[key] == plain[key]
    assert ones["provenance"]["design"]["weights"] == "ones"
    assert plain["provenance"]["design"] is None


def test_weights_and_clusters_reach_every_group_estimate(tmp_path, capsys):
    code, report, _ = _groups(tmp_path, capsys, "--weights", "w", "--cluster", "person")
    assert code == EXIT_OK
    design = report["provenance"]["design"]
    assert design["weights"] == "w" and design["cluster"] == "person" and design["clusters"] > 400
    for row in report["groups"]:
        assert row["clusters"] > 200
        for name in ("selection_rate", "error_rate", "fpr", "impact_ratio", "spd"):
            assert 0 < row[name]["n_effective"] <= row["rows"]


@pytest.mark.parametrize("flag, column, words", [
    ("--weights", "group", "weights column `group`"),
    ("--weights", "nosuch", "weights column `nosuch` is not in"),
    ("--cluster", "nosuch", "cluster column `nosuch` is not in"),
])
def test_bad_design_columns_are_one_line_and_exit_2(tmp_path, capsys, flag, column, words):
    code, _, text = _groups(tmp_path, capsys, flag, column)
    assert code == EXIT_BAD_INPUT
    lines = [ln for ln in text.splitlines() if ln.strip()]
    assert len(lines) == 1 and words in lines[0], text


def _plan(tmp_path, membership):
    path, frame = _holdout(tmp_path)
    plan = tmp_path / "plan.toml"
    plan.write_text(f'[data]\npath = "{path.name}"\nlabel = "y"\nprotected = ["group"]\n'
                    f'intersections = [["origin", "group"]]\n'
                    f'[data.membership]\n{membership}\n'
                    '[model]\nspec = "column:score"\n[report]\nout = "out"\nformats = ["json"]\n')
    return plan, frame


def test_membership_attribute_is_a_protected_attribute_with_its_caution(tmp_path):
    plan, frame = _plan(tmp_path, 'origin = { x = "p_x", z = "p_z" }')
    assert main(["run", str(plan)], console=_console()) == EXIT_OK
    report = json.loads((tmp_path / "out" / "report.json").read_text())
    rows = {(r["attribute"], r["group"]): r for r in report["groups"]}
    z = rows[("origin", "z")]
    expected = (frame["p_z"] * (frame["score"] >= 0.5)).sum() / frame["p_z"].sum()  # brute force
    assert z["selection_rate"]["value"] == pytest.approx(expected)
    assert z["rows"] == round(frame["p_z"].sum())
    assert ("origin & group", "z & B") in rows
    assert "Fairness under unawareness" in report["caution"]
    member = report["provenance"]["design"]["membership"]["origin"]
    top = np.maximum(frame["p_x"], frame["p_z"])
    assert member["uncertain_share"] == pytest.approx(float((top < 0.8).mean()))


def test_membership_that_does_not_sum_to_one_is_refused(tmp_path, capsys):
    plan, _ = _plan(tmp_path, 'origin = { x = "p_x", z = "p_x" }')
    assert main(["run", str(plan)], console=_console()) == EXIT_BAD_INPUT
    assert "one column for two groups" in capsys.readouterr().err
    plan, _ = _plan(tmp_path, 'origin = { x = "p_x", z = "ones" }')
    assert main(["run", str(plan)], console=_console()) == EXIT_BAD_INPUT
    text = capsys.readouterr().err
    assert "do not sum to 1" in text and len(text.strip().splitlines()) == 1


_SCORER = """
import numpy as np

def score(frame):
    z = 0.04 * (frame["income"] - 30) + np.where(frame["group"] == "B", -0.6, 0.0)
    return 1 / (1 + np.exp(-z))

def older(frame):
    z = 0.03 * (frame["income"] - 30) + np.where(frame["group"] == "B", -0.2, 0.0)
    return 1 / (1 + np.exp(-z))
"""


def test_unit_weights_and_no_clusters_equal_the_plain_run_in_every_section(tmp_path):
    rng = np.random.default_rng(3)
    n = 1200
    frame = pd.DataFrame({"group": rng.choice(["A", "B"], n), "income": rng.gamma(3, 10, n).round(1),
                          "region": rng.choice(["n", "s", "e"], n),
                          "y": (rng.random(n) < 0.5).astype(int), "ones": 1.0})
    frame.to_csv(tmp_path / "h.csv", index=False)
    (tmp_path / "scorer.py").write_text(_SCORER)
    for name, extra in (("plain", ""), ("ones", 'weights = "ones"\n')):
        (tmp_path / f"{name}.toml").write_text(
            f'[data]\npath = "h.csv"\nlabel = "y"\nprotected = ["group"]\n'
            f'features = ["group", "income", "region"]\n{extra}'
            '[model]\nspec = "py:scorer.py:score"\nisolate = false\n'
            '[slices]\ndepth = 2\nexclude = ["ones"]\n[flips]\nmodes = ["direct", "transport", "twins"]\n'
            '[compare]\nbaseline = "py:scorer.py:older"\n'
            f'[report]\nout = "{name}"\nformats = ["json"]\n')
        assert main(["run", str(tmp_path / f"{name}.toml")], console=_console()) in (0, 1)
    plain, ones = (json.loads((tmp_path / k / "report.json").read_text()) for k in ("plain", "ones"))
    for key in plain:
        if key not in ("provenance",):
            assert ones[key] == plain[key], key
    assert plain["slices"] and plain["flips"] and plain["comparison"]
