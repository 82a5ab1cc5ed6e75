"""The ``probe`` command line: parse arguments, build a plan, call the library, render, exit.

``main(argv)`` returns the exit code (contract): 0 ran and the policy passed (or there was no policy),
1 ran and the policy failed, 2 bad usage or bad input (one line on stderr; ``--debug`` shows the
traceback). No computation happens here.
"""

from __future__ import annotations

import argparse
import shlex
import sys
import traceback
from datetime import datetime
from pathlib import Path
from typing import Sequence

from .errors import ProbeError

__all__ = ["main", "EXIT_OK", "EXIT_POLICY_FAILED", "EXIT_BAD_INPUT"]

EXIT_OK = 0
EXIT_POLICY_FAILED = 1
EXIT_BAD_INPUT = 2


class _Parser(argparse.ArgumentParser):
    """argparse that raises instead of exiting, so usage errors share the one error path."""

    def error(self, message):  # noqa: D401 - argparse API
        raise ProbeError(f"{self.prog}: {message}")


def _list(text: str | None) -> list[str] | None:
    if text is None:
        return None
    return [t.strip() for t in text.split(",") if t.strip()]


def _common(p: argparse.ArgumentParser, *, model: bool = True, label: bool = True) -> None:
    from .options import DataOptions, ModelOptions, add_flags

    g = p.add_argument_group("data and model")
    g.add_argument("--data", required=True, metavar="FILE", help="holdout table (CSV, Parquet, Feather)")
    g.add_argument("--label", required=label, metavar="COL",
                   help="the binary label column" + ("" if label else " (optional here)"))
    g.add_argument("--positive", metavar="VALUE", help="label value of the positive class")
    if model:
        g.add_argument("--model", required=True, metavar="SPEC",
                       help="model file, py:module:attr, cmd:COMMAND, http://127.0.0.1:PORT/PATH "
                            "or column:NAME")
        add_flags(g, ModelOptions)
        add_flags(g, DataOptions)
    else:
        add_flags(g, DataOptions, skip=("features", "reference_groups"))
    g.add_argument("--protected", metavar="A,B,...", help="protected attribute columns")
    g.add_argument("--intersection", action="append", default=[], metavar="A,B",
                   help="report the joint groups of these columns (repeatable)")
    _output(p)


def _output(p: argparse.ArgumentParser) -> None:
    o = p.add_argument_group("output")
    o.add_argument("--seed", type=int, help="random seed, written into the report (the plan's, else 0)")
    o.add_argument("--confidence-level", type=float,
                   help="for every interval (the plan's, else 0.95)")
    o.add_argument("--out", metavar="DIR", help="report folder (default reports/<name>-<time>/)")
    o.add_argument("--json", metavar="FILE", help="also write the report JSON to FILE")
    o.add_argument("--quiet", action="store_true", help="print only the verdict line")
    o.add_argument("--debug", action="store_true", help="show tracebacks")


def build_parser() -> argparse.ArgumentParser:
    from ._version import __version__
    from .options import (CompareOptions, FlipOptions, PolicyOptions, ProxyOptions, SliceOptions,
                          add_flags)

    parser = _Parser(
        prog="probe",
        description="Test a trained binary classifier before release.",
        epilog="Exit codes: 0 ran and the policy passed (or there is none), 1 the policy failed, "
               "2 bad usage or input. probe is a statistical screen, not a legal finding; the "
               "four-fifths rule is a rule of thumb; defer to counsel, local law and licensed practice.",
    )
    parser.add_argument("--version", action="version", version=f"probe {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    p = sub.add_parser("demo", help="build an invented scenario (data + model) and probe it")
    p.add_argument("scenario", nargs="?", default="lending", help="lending (default), hiring, claims")
    p.add_argument("--rebuild", action="store_true", help="regenerate the scenario's data and model")
    p.add_argument("--list", action="store_true", help="list the scenarios and exit")
    p.add_argument("--strict", action="store_true",
                   help="exit 1 when the policy fails, as `probe run` does (the demo's scenarios are "
                        "built to fail some rules, so by default the demo exits 0 once it has run)")
    _output(p)

    p = sub.add_parser("run", help="everything a plan file asks for, then the verdict")
    p.add_argument("plan", metavar="PLAN.toml")
    add_flags(p.add_argument_group("policy"), PolicyOptions)
    _output(p)

    p = sub.add_parser("groups", help="rates, impact ratios and differences per protected group")
    _common(p)

    p = sub.add_parser("slices", help="the subgroups where the model fails, with honest intervals")
    _common(p)
    add_flags(p.add_argument_group("slice search"), SliceOptions)

    p = sub.add_parser("flips", help="do decisions move when a protected attribute is changed?")
    _common(p, label=False)
    add_flags(p.add_argument_group("flips"), FlipOptions)

    p = sub.add_parser("proxies", help="which features stand in for a protected attribute (no model)")
    _common(p, model=False, label=False)
    add_flags(p.add_argument_group("proxies"), ProxyOptions)

    p = sub.add_parser("compare", help="candidate vs production on the same rows")
    _common(p)
    add_flags(p.add_argument_group("comparison"), CompareOptions)
    add_flags(p.add_argument_group("worse-slice search"), SliceOptions, skip=("metric",))
    return parser


def _plan_dict(args) -> dict:
    """The plan (as the TOML would hold it) from a subcommand's flags."""
    from .options import (CompareOptions, DataOptions, FlipOptions, ModelOptions, ProxyOptions,
                          SliceOptions, flag_values)

    data = {"path": str(Path(args.data).resolve())}
    if getattr(args, "label", None):
        data["label"] = args.label
    if getattr(args, "positive", None) is not None:
        data["positive"] = args.positive
    if args.protected:
        data["protected"] = _list(args.protected)
    if args.intersection:
        data["intersections"] = [_list(i) for i in args.intersection]
    raw: dict = {"name": args.command, "data": data}
    data.update(flag_values(args, DataOptions))
    if getattr(args, "model", None):
        raw["model"] = {"spec": args.model, **flag_values(args, ModelOptions)}
    if args.command == "slices":
        raw["slices"] = flag_values(args, SliceOptions)
    elif args.command == "flips":
        if not args.protected:
            raise ProbeError("probe flips: --protected names the attribute to flip")
        raw["flips"] = {"attributes": _list(args.protected), **flag_values(args, FlipOptions)}
    elif args.command == "proxies":
        if not args.protected:
            raise ProbeError("probe proxies: --protected names the attribute(s)")
        raw["proxies"] = {"attributes": _list(args.protected), **flag_values(args, ProxyOptions)}
    elif args.command == "compare":
        raw["compare"] = flag_values(args, CompareOptions)
        raw["slices"] = flag_values(args, SliceOptions)
    return raw


def _out_dir(args, plan) -> Path | None:
    if args.out:
        return Path(args.out)
    if args.command in ("run", "demo"):
        if plan.report.out:
            return plan.resolve(plan.report.out)
        stamp = datetime.now().strftime("%Y%m%d-%H%M%S")
        return Path("reports") / f"{plan.name}-{stamp}"
    return None


def _execute(args, console) -> int:
    from . import pipeline
    from .plan import load_plan, plan_from_dict
    from .report import terminal
    from .report.files import write_report
    from .report.json import to_json

    if args.command == "demo":
        from .scenarios import SCENARIOS, build_scenario

        if args.list:
            for name in SCENARIOS:
                console.print(name)
            return EXIT_OK
        if not args.quiet:
            console.print(f"building scenario [bold]{args.scenario}[/] (cached after the first run) …")
        built = build_scenario(args.scenario, force=args.rebuild)
        plan = load_plan(built.plan_path).with_overrides(name=f"demo-{args.scenario}")
    elif args.command == "run":
        plan = load_plan(args.plan)
        if args.policy__fail_on_inconclusive:
            from dataclasses import replace

            plan = plan.with_overrides(policy=replace(plan.policy, fail_on_inconclusive=True))
    else:
        plan = plan_from_dict(_plan_dict(args))
    overrides = {k: v for k, v in (("seed", args.seed), ("confidence_level", args.confidence_level))
                 if v is not None}
    if overrides:  # flags win over the plan; validated like the plan's own values
        raw = {k: v for k, v in plan.to_dict().items() if v is not None}
        plan = plan_from_dict({**raw, **overrides}, base_dir=plan.base_dir, sha256=plan.sha256)

    argv = sys.argv[1:] if args.argv is None else args.argv
    command = "probe " + " ".join(shlex.quote(a) for a in argv)
    with terminal.progress(console, enabled=not args.quiet) as progress:
        report = pipeline.run_plan(plan, command=command, progress=progress)

    out = _out_dir(args, plan)
    written = {}
    text = to_json(report)
    if out is not None:
        written = write_report(report, out, formats=plan.report.formats, json_text=text)
    if args.json:
        written["json-copy"] = write_report(report, Path(args.json).parent, formats=("json",),
                                            json_text=text, names={"json": Path(args.json).name})["json"]
    terminal.render(report, console, quiet=args.quiet, written=written)
    if args.command == "demo" and not args.strict:
        return EXIT_OK
    return EXIT_POLICY_FAILED if report["verdict"]["passed"] is False else EXIT_OK


def main(argv: Sequence[str] | None = None, *, console=None) -> int:
    """Run the command line; return the exit code."""
    from rich.console import Console

    console = console or Console(highlight=False)
    err = Console(stderr=True, highlight=False, soft_wrap=True)
    debug = "--debug" in (argv if argv is not None else sys.argv[1:])
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
        args.argv = None if argv is None else list(argv)
        if args.command is None:
            parser.print_help(console.file)
            return EXIT_BAD_INPUT
        return _execute(args, console)
    except ProbeError as exc:
        if debug:
            traceback.print_exc()
        err.print(f"error: {exc}", markup=False)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        err.print("interrupted", markup=False)
        return 130
