"""The ``probe`` command line: parse arguments, build a plan, call the library, render, exit.

``main(argv)`` returns the exit code (contract): 0 ran and the policy passed (or there was no policy),
1 ran and the policy failed, 2 bad usage or bad input (one line on stderr; ``--debug`` shows the
traceback), 3 an internal error (an exception that is not a :class:`ProbeError`: a bug in probe),
128 + N stopped by signal N (130 SIGINT, 143 SIGTERM). Every flag, the plan, the policy file and
the outputs are checked before any data is read or model loaded. No computation happens here.
"""

from __future__ import annotations

import argparse
import shlex
import sys
import warnings
from pathlib import Path
from typing import Sequence

from .cli_outcome import (EXIT_BAD_INPUT, EXIT_INTERNAL, EXIT_INTERRUPTED, EXIT_OK,
                          EXIT_POLICY_FAILED, print_warnings, report_failure)
from .cli_signals import Terminated, terminating_on_signals
from .errors import DataError, ProbeError

__all__ = ["main", "EXIT_OK", "EXIT_POLICY_FAILED", "EXIT_BAD_INPUT", "EXIT_INTERNAL",
           "EXIT_INTERRUPTED"]


_EXIT_CODES = ("Exit codes: 0 ran and the policy passed (or there is none), 1 the policy failed, "
               "2 bad usage or input, 3 internal error (a bug: re-run with --debug and report it), "
               "130/143 interrupted/terminated.")


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


#: The [model] settings `run` and `demo` take on the command line over the plan's: trust comes
#: from the person running probe, and so may the limits on the model.
_PERSON_FLAGS = ("trust_pickle", "timeout", "isolate", "allow_unseen")


def _person(p: argparse.ArgumentParser) -> None:
    from .options import ModelOptions, add_flags, option_fields

    add_flags(p.add_argument_group("model"), ModelOptions,
              skip=tuple(f.name for f in option_fields(ModelOptions)
                         if f.name not in _PERSON_FLAGS))


def _with_person(plan, args):
    """The plan with the `run`/`demo` model flags that were given."""
    from dataclasses import replace

    from .options import ModelOptions, flag_values

    given = flag_values(args, ModelOptions)
    return plan.with_overrides(model=replace(plan.model, **given)) if given else plan


def _output(p: argparse.ArgumentParser) -> None:
    o = p.add_argument_group("policy and output")
    o.add_argument("--policy", metavar="FILE",
                   help="judge the run against the rules of FILE's [policy] table (replacing the "
                        "plan's) and exit 1 when they fail")
    o.add_argument("--seed", type=int, help="random seed 0 to 2**32-1, written into the report "
                                            "(the plan's, else 0)")
    o.add_argument("--confidence-level", type=float,
                   help="for every interval, in [0.5, 1) (the plan's, else 0.95)")
    o.add_argument("--out", metavar="DIR",
                   help="report folder, replaced as a whole; relative to the working directory "
                        "(run/demo default: the plan's [report] out, else reports/<name>-<time>/)")
    o.add_argument("--json", metavar="FILE", help="also write the report JSON to FILE")
    _quiet_debug(o)


def _quiet_debug(o) -> None:
    o.add_argument("--quiet", action="store_true", help="print only the verdict line")
    o.add_argument("--debug", action="store_true", help="show tracebacks")


def build_parser() -> argparse.ArgumentParser:
    from ._version import __version__
    from .options import (CompareOptions, FlipOptions, PolicyOptions, ProxyOptions, SliceOptions,
                          add_flags)

    parser = _Parser(
        prog="probe",
        description="Test a trained binary classifier before release.",
        epilog=_EXIT_CODES + " probe is a statistical screen, not a legal finding; the "
               "four-fifths rule is a rule of thumb; defer to counsel, local law and licensed practice.",
    )
    parser.add_argument("--version", action="version", version=f"probe {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    p = sub.add_parser("demo", help="build an invented scenario (data + model) and probe it")
    p.add_argument("scenario", nargs="?", default="lending", help="lending (default), hiring, claims, tenancy")
    p.add_argument("--rebuild", action="store_true", help="regenerate the scenario's data and model")
    p.add_argument("--list", action="store_true", help="list the scenarios and exit")
    p.add_argument("--strict", action="store_true",
                   help="exit 1 when the policy fails, as `probe run` does (the demo's scenarios are "
                        "built to fail some rules, so by default the demo exits 0 once it has run)")
    _person(p)
    _output(p)

    p = sub.add_parser("run", help="everything a plan file asks for, then the verdict")
    p.add_argument("plan", metavar="PLAN.toml",
                   help="the plan file; its relative paths resolve against its own folder")
    add_flags(p.add_argument_group("policy"), PolicyOptions)
    _person(p)
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

    p = sub.add_parser("render", help="write a saved report.json in other formats, without re-running")
    p.add_argument("report", metavar="REPORT.json", help="a report.json written by probe")
    p.add_argument("--format", default="html,md,junit", metavar="F[,F]",
                   help="formats to write: json, html, md, junit (html,md,junit)")
    p.add_argument("--out", metavar="DIR",
                   help="folder to write the files into (default: the folder holding REPORT.json)")
    _quiet_debug(p)
    return parser


_VERB = {"groups": "compare", "flips": "flip", "proxies": "find proxies for"}


def _check_flags(args) -> None:
    """Every option flag given, checked by its option's rule and blamed on the flag as typed."""
    from .options import SECTIONS, check_flags
    from .plan import check_top_level

    for cls in SECTIONS.values():
        check_flags(args, cls)
    if getattr(args, "data__reference_groups", None) is not None:
        from .options import check_references

        check_references(args.data__reference_groups, "--reference-group")
    for combo in getattr(args, "intersection", None) or ():
        names = _list(combo)
        if len(set(names)) != len(names) or len(names) < 2:
            raise ProbeError(f"--intersection joins two or more different columns, got {combo!r}")
    if getattr(args, "data__bins", None) is not None:
        from .bins import parse_bins

        parse_bins(args.data__bins, where="--bins")  # blamed on the flag, not the plan key
    for key in ("seed", "confidence_level"):
        if getattr(args, key, None) is not None:
            check_top_level(key, getattr(args, key), "--" + key.replace("_", "-"))


def _plan_dict(args) -> dict:
    """The plan (as the TOML would hold it) from a subcommand's flags."""
    from .options import (CompareOptions, DataOptions, FlipOptions, ModelOptions, ProxyOptions,
                          SliceOptions, flag_values)

    data = {"path": str(Path(args.data).resolve())}
    if getattr(args, "label", None):
        data["label"] = args.label
    if getattr(args, "positive", None) is not None:
        data["positive"] = args.positive
    protected = _list(args.protected)
    if protected:
        data["protected"] = protected
    if args.intersection:
        data["intersections"] = [_list(i) for i in args.intersection]
    # groups, flips and proxies do nothing without an attribute (groups: or an intersection)
    if not protected and args.command in _VERB and not (args.command == "groups" and args.intersection):
        raise ProbeError(f"probe {args.command}: --protected names the attribute(s) to "
                         f"{_VERB[args.command]} (e.g. --protected sex,age_band); none given")
    raw: dict = {"name": args.command, "data": data}
    data.update(flag_values(args, DataOptions))
    if getattr(args, "model", None):
        raw["model"] = {"spec": args.model, **flag_values(args, ModelOptions)}
    if args.command == "slices":
        raw["slices"] = flag_values(args, SliceOptions)
    elif args.command == "flips":
        raw["flips"] = {"attributes": protected, **flag_values(args, FlipOptions)}
    elif args.command == "proxies":
        raw["proxies"] = {"attributes": protected, **flag_values(args, ProxyOptions)}
    elif args.command == "compare":
        raw["compare"] = flag_values(args, CompareOptions)
        raw["slices"] = flag_values(args, SliceOptions)
    return raw


def _plan(args, console):
    """The validated plan of ``run``, ``demo`` or an analysis command, with the flags applied."""
    from dataclasses import replace

    from .cli_paths import Outputs
    from .plan import load_plan, load_policy, plan_from_dict

    policy = load_policy(args.policy) if args.policy else None
    if args.command == "demo":
        from .scenarios import build_scenario

        # explicit outputs are checked before the scenario is built (a first build trains models)
        Outputs(Path(args.out) if args.out else None, Path(args.json) if args.json else None).check()
        if not args.quiet:
            console.print(f"building scenario [bold]{args.scenario}[/] (cached after the first run) …")
        built = build_scenario(args.scenario, force=args.rebuild)
        plan = _with_person(load_plan(built.plan_path), args).with_overrides(
            name=f"demo-{args.scenario}")
    elif args.command == "run":
        plan = _with_person(load_plan(args.plan), args)
    else:
        plan = plan_from_dict(_plan_dict(args))
    if policy is not None:
        plan = plan.with_overrides(policy=policy)
    if getattr(args, "policy__fail_on_inconclusive", None):
        plan = plan.with_overrides(policy=replace(plan.policy, fail_on_inconclusive=True))
    # flags win over the plan; already checked by their own rules (named as typed)
    overrides = {k: v for k, v in (("seed", args.seed), ("confidence_level", args.confidence_level))
                 if v is not None}
    return plan.with_overrides(**overrides) if overrides else plan


def _inputs(args, plan) -> dict[str, Path]:
    """The files this run reads, by role: an output must never be one of them."""
    found = {"the data": plan.resolve(plan.data.path)}
    if args.command == "run":
        found["the plan"] = Path(args.plan)
    if getattr(args, "policy", None):
        found["the policy"] = Path(args.policy)
    specs = {"the model": plan.model.spec if plan.model else None,
             "the baseline": plan.compare.baseline if plan.compare else None}
    # a spec that is not a file (py:, cmd:, column:, http:) names no existing path, so never matches
    found.update({role: Path(plan.resolve_spec(spec)) for role, spec in specs.items() if spec})
    return found


def _execute(args, console) -> int:
    from . import pipeline
    from .cli_paths import report_outputs
    from .report import terminal
    from .report.files import write_file, write_report
    from .report.json import to_json

    _check_flags(args)
    if args.command == "render":
        return _render(args, console)
    if args.command == "demo" and args.list:
        from .scenarios import SCENARIOS

        for name in SCENARIOS:
            console.print(name)
        return EXIT_OK
    plan = _plan(args, console)
    outputs = report_outputs(args, plan)
    outputs.check(inputs=_inputs(args, plan))  # before any data is read or model loaded

    argv = sys.argv[1:] if args.argv is None else args.argv
    command = "probe " + " ".join(shlex.quote(a) for a in argv)
    with terminal.progress(console, enabled=not args.quiet) as progress:
        report = pipeline.run_plan(plan, command=command, progress=progress)

    text = to_json(report)
    written = {}
    if outputs.folder is not None:
        written = write_report(report, outputs.folder, formats=plan.report.formats, json_text=text)
    if outputs.json_file is not None:
        written["json-copy"] = write_file(outputs.json_file, text)
    terminal.render(report, console, quiet=args.quiet, written=written)
    if args.command == "demo" and not (args.strict or args.policy):
        return EXIT_OK
    return EXIT_POLICY_FAILED if report["verdict"]["passed"] is False else EXIT_OK


def _render(args, console) -> int:
    """``probe render``: the saved report's dict through the renderers, each file written atomically."""
    from rich.text import Text

    from .cli_paths import render_targets
    from .options import FORMATS, ReportOptions, check_option, option_fields
    from .report.files import render_files, write_file
    from .report.json import read_report, to_json

    formats = tuple(_list(args.format))
    if not formats:
        raise ProbeError(f"--format is empty; list some of {', '.join(FORMATS)}")
    check_option(next(f for f in option_fields(ReportOptions) if f.name == "formats"), formats,
                 "--format")
    source = Path(args.report)
    report = read_report(source)
    targets = render_targets(source, args.out, formats)
    try:
        texts = render_files(report, formats, json_text=to_json(report))
    except (KeyError, TypeError, ValueError, AttributeError, IndexError) as exc:
        raise DataError(f"`{source}` is not a complete report the renderers can read "
                        f"({type(exc).__name__}: {exc}); re-run the analysis") from None
    written = [write_file(targets[fmt], text) for fmt, text in texts.items()]
    if not args.quiet:
        console.print(Text("report: " + ", ".join(str(p) for p in written)))
    return EXIT_OK


def main(argv: Sequence[str] | None = None, *, console=None) -> int:
    """Run the command line; return the exit code.

    SIGINT, SIGTERM and SIGHUP unwind the run (temporary files are removed) and give ``128 + N``;
    a ``ProbeError`` gives one ``error:`` line and 2; any other exception is a bug: one line and 3.
    """
    from rich.console import Console

    console = console or Console(highlight=False)
    err = Console(stderr=True, highlight=False, soft_wrap=True)
    debug = "--debug" in (argv if argv is not None else sys.argv[1:])
    received: list[int] = []
    try:
        with terminating_on_signals() as received, \
                warnings.catch_warnings(record=True) as caught:  # the caller's filters hold
            parser = build_parser()
            args = parser.parse_args(argv)
            args.argv = None if argv is None else list(argv)
            if args.command is None:
                parser.print_help(console.file)
                return EXIT_BAD_INPUT
            code = _execute(args, console)
        if received:  # a signal whose exception a library swallowed
            raise Terminated(received[0])
        print_warnings(err, caught)  # after a finished run only: a failed one has its one line
        return code
    except (Exception, KeyboardInterrupt, Terminated) as exc:  # SystemExit (--help) passes
        if received and not isinstance(exc, Terminated):  # a library turned it into another error
            exc = Terminated(received[0])
        return report_failure(exc, err, debug)
