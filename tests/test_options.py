"""Options are defined once: the plan's sections, the command line's flags and the API read the same
defaults and ranges, found by introspecting the options classes."""

import dataclasses
import re
from pathlib import Path

import pytest

from probe.cli import build_parser
from probe.errors import PlanError
from probe.metrics import METRIC_NAMES, METRICS
from probe.options import (FlipOptions, ModelOptions, SliceOptions, add_flags, check_option,
                           option_fields)
from probe.plan import plan_from_dict

MINIMAL = {"data": {"path": "h.csv", "label": "y"}, "model": {"spec": "m.txt"}}
PACKAGE = Path(__file__).parents[1] / "probe"


def _subparser(name):
    parser = build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    return sub.choices[name]


@pytest.mark.parametrize("cls, command", [(SliceOptions, "slices"), (FlipOptions, "flips"),
                                          (ModelOptions, "slices")])
def test_every_flag_leaves_the_plan_default_alone_and_states_it(cls, command):
    p = _subparser(command)
    flags = {a.dest: a for a in p._actions}
    for f in option_fields(cls):
        if not f.metadata.get("cli"):
            continue
        action = flags[f"{cls.SECTION}__{f.name}"]
        assert action.default is None, f"--{f.name} must not carry a default of its own"
        default = f.default
        if default not in (None, (), "") and not isinstance(default, bool):
            shown = ",".join(default) if isinstance(default, tuple) else str(default)
            assert f"({shown})" in action.help


@pytest.mark.parametrize("cls", [SliceOptions, FlipOptions])
def test_a_plan_section_without_keys_holds_the_class_defaults(cls):
    plan = plan_from_dict({**MINIMAL, cls.SECTION: {}})
    assert getattr(plan, cls.SECTION) == cls()


@pytest.mark.parametrize("key, bad", [("depth", 5), ("depth", 0), ("min_rows", 1), ("bins", 21),
                                      ("top", 0), ("metric", "recall")])
def test_one_range_for_the_plan_the_flags_and_the_api(key, bad):
    with pytest.raises(PlanError, match=f"`slices.{key}`"):
        plan_from_dict({**MINIMAL, "slices": {key: bad}})
    with pytest.raises(PlanError, match=f"`slices.{key}`"):
        SliceOptions(**{key: bad})
    with pytest.raises(PlanError, match=f"`slices.{key}`"):
        dataclasses.replace(SliceOptions(), **{key: bad})


def test_cli_flags_reach_the_plan():
    from probe.cli import _plan_dict

    args = _subparser("compare").parse_args(
        ["--data", "h.csv", "--label", "y", "--model", "m", "--baseline", "b", "--depth", "2",
         "--top", "4", "--no-split", "--interval", "bootstrap", "--timeout", "30"])
    args.command = "compare"
    plan = plan_from_dict(_plan_dict(args))
    assert plan.search.depth == 2 and plan.search.top == 4 and plan.search.split is False
    assert plan.search.interval == "bootstrap" and plan.model.timeout == 30.0


def test_each_metric_name_is_written_once_in_the_package():
    # the list of metrics lives in probe/metrics.py; no other module spells the tuple out
    for path in PACKAGE.rglob("*.py"):
        if path.name == "metrics.py":
            continue
        text = path.read_text()
        assert not re.search(r"\(\s*\"error\",\s*\"fpr\",\s*\"fnr\",\s*\"selection\"\s*\)", text), path
    assert METRIC_NAMES == tuple(METRICS) == ("error", "fpr", "fnr", "selection")


def test_add_flags_skips_what_is_not_a_flag():
    import argparse

    p = argparse.ArgumentParser()
    add_flags(p, SliceOptions, skip=("metric",))
    dests = {a.dest for a in p._actions}
    assert "slices__metric" not in dests and "slices__depth" in dests


def test_check_option_names_the_option_as_asked():
    (depth,) = [f for f in option_fields(SliceOptions) if f.name == "depth"]
    with pytest.raises(PlanError, match=r"^`depth` must be 1 to 4, got 9$"):
        check_option(depth, 9, "depth")


def test_no_module_is_over_450_lines():
    sizes = {p.relative_to(PACKAGE).as_posix(): len(p.read_text().splitlines())
             for p in PACKAGE.rglob("*.py")}
    assert {k: v for k, v in sizes.items() if v > 450} == {}


@pytest.mark.parametrize("kwargs, message", [
    ({"depth": "3"}, r"`(slices\.)?depth` must be a whole number, got '3'"),
    ({"split": "yes"}, r"`(slices\.)?split` must be true or false"),
    ({"columns": [1, 2]}, r"`(slices\.)?columns` must be a list of strings"),
])
def test_the_api_checks_types_as_the_plan_does(kwargs, message):
    # a keyword argument reaches the options class unchecked by any parser: one clear line
    from probe.slices import find_slices

    with pytest.raises(PlanError, match=message):
        SliceOptions(**kwargs)
    with pytest.raises(PlanError, match=message):
        find_slices(None, [1, 0], [1, 0], **kwargs)
