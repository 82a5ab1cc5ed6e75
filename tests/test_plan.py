"""The plan file: defaults, resolution of paths, and every validation message."""

from pathlib import Path

import pytest

from probe.errors import PlanError
from probe.plan import load_plan, plan_from_dict

MINIMAL = {"data": {"path": "h.csv", "label": "y"}, "model": {"spec": "m.txt"}}


def test_minimal_plan_has_defaults(tmp_path):
    p = tmp_path / "plan.toml"
    p.write_text('[data]\npath = "h.csv"\nlabel = "y"\n[model]\nspec = "m.txt"\n')
    plan = load_plan(p)
    assert plan.model.threshold == 0.5 and plan.favorable
    assert plan.slices is None and plan.flips is None and plan.compare is None
    assert not plan.policy.has_rules()
    assert plan.resolve("h.csv") == tmp_path.resolve() / "h.csv"
    assert plan.resolve_spec("m.txt") == str(tmp_path.resolve() / "m.txt")
    assert plan.resolve_spec("cmd:python s.py") == "cmd:python s.py"
    assert plan.resolve_spec("http://127.0.0.1:8000/score") == "http://127.0.0.1:8000/score"
    assert len(plan.sha256) == 64


@pytest.mark.parametrize("raw, message", [
    ({**MINIMAL, "polcy": {}}, r"unknown key `polcy`; did you mean `policy`"),
    ({**MINIMAL, "policy": {"min_impact_raito": 0.8}},
     r"unknown key `min_impact_raito` in \[policy\]; did you mean `min_impact_ratio`"),
    ({"data": {"path": "h.csv"}, "model": {"spec": "m"}}, r"\[data\] needs `label`"),
    ({"data": {"path": "h.csv", "label": "y"}}, r"needs a \[model\] table"),
    ({**MINIMAL, "model": {"spec": "m", "threshold": "high"}}, r"`model.threshold` must be a number"),
    ({**MINIMAL, "model": {"spec": "m", "threshold": 1.5}}, r"must lie in \[0, 1\], got 1.5"),
    ({**MINIMAL, "slices": {"metric": "fnrr"}}, r"`slices.metric` must be one of .*did you mean `fnr`"),
    ({**MINIMAL, "slices": {"depth": 9}}, r"`slices.depth` must be 1 to 4"),
    ({**MINIMAL, "flips": {"modes": ["direkt"]}}, r"unknown mode 'direkt'.*did you mean `direct`"),
    ({**MINIMAL, "compare": {}}, r"\[compare\] needs `baseline`"),
    ({**MINIMAL, "report": {"formats": ["pdf"]}}, r"unknown format 'pdf'"),
    ({**MINIMAL, "data": {"path": "h", "label": "y", "protected": "sex", "intersections": ["sex"]}},
     r"`data.intersections` must be a list of lists"),
    ({**MINIMAL, "model": {"spec": "m", "trust_pickle": "yes"}}, r"must be true or false"),
    ({**MINIMAL, "data": {"path": "h", "label": "y", "reference_groups": ["sex:F"]}},
     r"`data.reference_groups` entries are ATTRIBUTE=LEVEL, got 'sex:F'"),
    ({**MINIMAL, "compare": {"baseline": "b", "n_resamples": 4000}},
     r"unknown key `n_resamples` in \[compare\]"),
])
def test_every_validation_message(raw, message):
    with pytest.raises(PlanError, match=message):
        plan_from_dict(raw)


def test_single_string_becomes_a_list_and_proxies_need_no_model():
    plan = plan_from_dict({**MINIMAL, "data": {"path": "h", "label": "y", "protected": "sex"}})
    assert plan.data.protected == ("sex",)
    only = plan_from_dict({"data": {"path": "h", "protected": ["sex"]}, "proxies": {}})
    assert only.model is None


def test_bad_toml_and_missing_file(tmp_path):
    with pytest.raises(PlanError, match="not found"):
        load_plan(tmp_path / "nope.toml")
    bad = tmp_path / "bad.toml"
    bad.write_text("[data\npath=")
    with pytest.raises(PlanError, match="not valid TOML"):
        load_plan(bad)


def test_reference_groups_become_a_mapping():
    raw = {**MINIMAL, "data": {"path": "h", "label": "y",
                               "reference_groups": ["sex = F", "race & sex=b & F"]}}
    assert plan_from_dict(raw).data.references == {"sex": "F", "race & sex": "b & F"}


def test_to_dict_round_trips():
    plan = plan_from_dict({**MINIMAL, "slices": {"metric": "fpr"}, "policy": {"max_flip_rate": 0.01}},
                          base_dir=Path("/x"))
    again = plan_from_dict({k: v for k, v in plan.to_dict().items() if v is not None}, base_dir=Path("/x"))
    assert again == plan
