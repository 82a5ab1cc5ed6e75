"""Every option of every analysis, defined once: one frozen class per plan section.

Each field carries its default, its range or choices and its help text. The same class is

- a section of the plan (``[slices]`` is :class:`SliceOptions`; an unknown key is refused by name);
- the source of the command line's flags (:mod:`probe.cli` derives them with :func:`add_flags`, so a
  flag's default and range are the plan's);
- what the Python API's keyword arguments are forwarded to (``find_slices(..., depth=2)`` builds a
  :class:`SliceOptions`), so a value is checked by one rule wherever it comes from.

A value out of range raises :class:`~probe.errors.PlanError` naming the option
(``\\`slices.depth\\` must be 1 to 4, got 9``).
"""

from __future__ import annotations

import math
from dataclasses import MISSING, dataclass, field, fields
from typing import Any

from .errors import PlanError
from .metrics import METRIC_NAMES

__all__ = ["DataOptions", "ModelOptions", "SliceOptions", "FlipOptions", "ProxyOptions",
           "CompareOptions", "PolicyOptions", "ReportOptions", "MODES", "FORMATS", "INTERVALS",
           "check_option", "coerce_option", "add_flags", "check_flags", "flag_values", "option_fields"]

#: The annotation of an option holding one value of a column (text, number or bool); checked by
#: :func:`coerce_option`.
Value = Any

#: The longest ``timeout`` (seconds, 30 days): a bound a clock can hold, far past any real batch.
MAX_TIMEOUT = 2_592_000.0

MODES = ("direct", "transport", "twins")
FORMATS = ("json", "html", "md", "junit")
INTERVALS = ("wilson", "bootstrap")


def opt(default: Any = MISSING, *, help: str, lo=None, hi=None, choices=None, flag: str | None = None,
        metavar: str | None = None, cli: bool = True, required: bool = False):
    """A field with its rule: inclusive range ``[lo, hi]`` or ``choices`` (for a list: each item)."""
    meta = {"help": help, "lo": lo, "hi": hi, "choices": choices, "flag": flag, "metavar": metavar,
            "cli": cli, "required": required}
    if isinstance(default, (list, tuple)):
        return field(default=tuple(default), metadata=meta)
    return field(default=default, metadata=meta)


def option_fields(cls) -> tuple:
    """The fields of an options class (each with ``.metadata`` holding its rule)."""
    return fields(cls)


# ------------------------------------------------------------------------------------------------
# checking


def _range_text(lo, hi) -> str:
    if lo is not None and hi is not None:
        if isinstance(lo, int) and isinstance(hi, int):
            return f"be {lo} to {hi}"
        return f"lie in [{lo:g}, {hi:g}]"
    return f"be at least {lo:g}" if lo is not None else f"be at most {hi:g}"


def check_option(f, value: Any, name: str) -> None:
    """Check one value against its field's range or choices; ``name`` is how the message names it."""
    meta = f.metadata
    if value is None:
        return
    shown = name if name.startswith("-") else f"`{name}`"  # a flag is named as typed: --threshold
    choices = meta.get("choices")
    if choices is not None:
        items = value if isinstance(value, tuple) else (value,)
        for item in items:
            if item not in choices:
                from .data import close_names

                hint = close_names(item, choices) if isinstance(item, str) else ""
                if isinstance(value, tuple):  # `flips.modes` has unknown mode 'direkt'
                    kind = f.name.removesuffix("s")
                    raise PlanError(f"{shown} has unknown {kind} {item!r}; expected "
                                    f"{', '.join(choices)}{hint}")
                raise PlanError(f"{shown} must be one of {', '.join(choices)}, got {item!r}{hint}")
    lo, hi = meta.get("lo"), meta.get("hi")
    if (lo is not None or hi is not None) and isinstance(value, (int, float)):
        if isinstance(value, float) and not math.isfinite(value):
            raise PlanError(f"{shown} must be a finite number, got {value!r}")
        if (lo is not None and value < lo) or (hi is not None and value > hi):
            raise PlanError(f"{shown} must {_range_text(lo, hi)}, got {value!r}")


def coerce_option(f, value: Any, name: str) -> Any:
    """Check a value's type against the field's annotation (as written in this module) and normalise."""
    ann = str(f.type).replace(" ", "")
    optional = ann.endswith("|None")
    base = ann[: -len("|None")] if optional else ann
    if value is None and optional:
        return None
    if base == "Any":
        return value
    if base == "Value":  # one value of a column: a label value, a model class, a level
        if isinstance(value, (list, tuple, dict, set)):
            raise PlanError(f"`{name}` must be one value (text, number or true/false), got {value!r}")
        return value
    if base == "bool":
        if not isinstance(value, bool):
            raise PlanError(f"`{name}` must be true or false, got {value!r}")
        return value
    if base == "int":
        if isinstance(value, bool) or not isinstance(value, int):
            raise PlanError(f"`{name}` must be a whole number, got {value!r}")
        return int(value)
    if base == "float":
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise PlanError(f"`{name}` must be a number, got {value!r}")
        return float(value)
    if base == "str":
        if not isinstance(value, str):
            raise PlanError(f"`{name}` must be a string, got {value!r}")
        return value
    if base == "tuple[str,...]":
        if isinstance(value, str):
            value = [value]
        if not isinstance(value, (list, tuple)) or not all(isinstance(v, str) for v in value):
            raise PlanError(f"`{name}` must be a list of strings, got {value!r}")
        return tuple(value)
    if base == "tuple[tuple[str,...],...]":
        if not isinstance(value, (list, tuple)) or not all(
            isinstance(v, (list, tuple)) and all(isinstance(s, str) for s in v) for v in value
        ):
            raise PlanError(f"`{name}` must be a list of lists of column names, got {value!r}")
        return tuple(tuple(v) for v in value)
    raise AssertionError(f"unhandled annotation {f.type}")  # a bug, not bad input


class _Checked:
    """Mixin: validate every field on construction, with the section's name in the message."""

    SECTION = ""

    def __post_init__(self):
        for f in fields(self):
            name = f"{self.SECTION}.{f.name}" if self.SECTION else f.name
            if f.metadata.get("required") and getattr(self, f.name) in (None, ""):
                raise PlanError(f"[{self.SECTION}] needs `{f.name}`")
            # the type first (a keyword argument in the API arrives unchecked), then the range
            value = coerce_option(f, getattr(self, f.name), name)
            object.__setattr__(self, f.name, value)
            check_option(f, value, name)

    def to_dict(self) -> dict:
        return {f.name: _plain(getattr(self, f.name)) for f in fields(self)}


def _plain(obj) -> Any:
    if hasattr(obj, "__dataclass_fields__"):
        return {f.name: _plain(getattr(obj, f.name)) for f in fields(obj)}
    if isinstance(obj, (tuple, list)):
        return [_plain(v) for v in obj]
    return obj


# ------------------------------------------------------------------------------------------------
# the sections


def check_references(entries, name: str) -> None:
    """Each reference-group entry is ``ATTRIBUTE=LEVEL``; ``name`` says where it came from."""
    for entry in entries:
        attribute, sep, level = entry.partition("=")
        if not sep or not attribute.strip() or not level.strip():
            raise PlanError(f"{name} entries are ATTRIBUTE=LEVEL, got {entry!r}")


@dataclass(frozen=True)
class DataOptions(_Checked):
    """``[data]``: the holdout file and the roles of its columns."""

    SECTION = "data"
    path: str = opt(help="holdout table (CSV, TSV, Parquet, Feather)", required=True, cli=False)
    label: str = opt("", help="the binary label column", cli=False)
    positive: Value | None = opt(None, help="label value of the positive class", cli=False)
    protected: tuple[str, ...] = opt((), help="protected attribute columns", cli=False)
    intersections: tuple[tuple[str, ...], ...] = opt((), help="joint groups to report", cli=False)
    features: tuple[str, ...] | None = opt(None, help="the model's input columns, in order",
                                           metavar="A,B,...")
    reference_groups: tuple[str, ...] = opt((), flag="--reference-group", metavar="ATTR=LEVEL,...",
                                            help="fix an attribute's reference group for the impact "
                                                 "ratio (default: the most-favoured group, allowed "
                                                 "for in the intervals)")
    bins: Any = opt(None, metavar="ATTR=25:40:60|ATTR=4",
                    help="bands of a numeric protected attribute: edges, or a number of quantile "
                         "bins (comma-separated for several)")
    weights: str | None = opt(None, metavar="COL",
                              help="column of row weights (design or reweighting weights): every "
                                   "rate is weighted and every interval uses the effective size")
    cluster: str | None = opt(None, metavar="COL",
                              help="column naming each row's cluster (a person or household seen "
                                   "several times): intervals treat clusters as the units")
    membership: Any = opt(None, cli=False,
                          help="attributes known as probabilities: {attribute = {group = column}}")

    def __post_init__(self):
        super().__post_init__()
        from .bins import parse_bins
        from .design_data import parse_membership

        object.__setattr__(self, "bins", parse_bins(self.bins))
        object.__setattr__(self, "membership", parse_membership(self.membership))
        for name in ("weights", "cluster"):
            value = getattr(self, name)
            if value is not None and (not isinstance(value, str) or not value):
                raise PlanError(f"`data.{name}` must name a column, got {value!r}")
        check_references(self.reference_groups, "`data.reference_groups`")
        for combo in self.intersections:
            if len(set(combo)) != len(combo) or len(combo) < 2:
                raise PlanError(f"`data.intersections` entries join two or more different columns, "
                                f"got {list(combo)!r}")

    @property
    def references(self) -> dict[str, str]:
        """``reference_groups`` as ``{attribute: level}`` (an intersection as ``"a & b": "x & y"``)."""
        return {a.strip(): level.strip()
                for a, _, level in (e.partition("=") for e in self.reference_groups)}


@dataclass(frozen=True)
class ModelOptions(_Checked):
    """``[model]``: the model under test and how its scores become decisions."""

    SECTION = "model"
    spec: str = opt(help="model file, py:module:attr, cmd:COMMAND, http://127.0.0.1:PORT/PATH or "
                         "column:NAME", required=True, cli=False)
    threshold: float = opt(0.5, lo=0.0, hi=1.0, help="decision = score >= T")
    favorable: str | None = opt(None, choices=("positive", "negative"),
                                help="which decision is the favourable outcome (default: "
                                     "positive, unless the label reads as adverse: then say)")
    positive_class: Value | None = opt(None, metavar="VALUE",
                              help="the model's class that means the label's positive value (when "
                                   "the model's classes and the label's values differ)")
    trust_pickle: bool = opt(False, help="trust the pickle/joblib model file named here (loading "
                                         "it executes its code); a plan file cannot set this: "
                                         "pin the file with sha256 instead")
    sha256: str | None = opt(None, cli=False, help="the SHA-256 the model file must have; a "
                                                   "pickle whose hash matches is trusted")
    trusted_types: tuple[str, ...] = opt((), flag="--trust-type", metavar="TYPE",
                                         help="types to trust when loading a .skops file")
    batch_size: int = opt(50_000, lo=1, help="rows per call to the model")
    timeout: float = opt(600.0, lo=0.001, hi=MAX_TIMEOUT,
                         help="seconds loading the model, then each batch, may take (every kind "
                              "but a model in this process)")
    isolate: bool = opt(True, flag="--no-isolate",
                        help="load and score model files and py: models in this process, with no "
                             "time limit and no protection from a crash or exit (by default they "
                             "run in a child process)")
    allow_unseen: bool = opt(False, help="score rows whose categorical value the model never saw "
                                         "(as the model treats unknown values) instead of "
                                         "refusing them")


@dataclass(frozen=True)
class SliceOptions(_Checked):
    """``[slices]``: the search for the subgroups where the model fails."""

    SECTION = "slices"
    metric: str = opt("error", choices=METRIC_NAMES, help="the rate to search on")
    depth: int = opt(3, lo=1, hi=4, help="largest number of conditions")
    min_rows: int | None = opt(None, lo=2, help="smallest slice, in rows of the metric's "
                                                "population (default: by the data's size)")
    bins: int = opt(5, lo=2, hi=20, flag="--slice-bins",
                    help="quantile bins per numeric column")
    top: int = opt(10, lo=1, hi=1000, help="slices to report")
    max_share: float = opt(0.5, lo=0.0, hi=1.0, help="largest share of the rows a slice may hold "
                                                      "(slices are sub-groups)")
    split: bool = opt(True, flag="--no-split", help="search on half the rows and estimate on the "
                                                    "other half (--no-split: all rows, small data)")
    columns: tuple[str, ...] | None = opt(None, metavar="A,B,...", help="search only these columns")
    exclude: tuple[str, ...] = opt((), metavar="A,B,...", help="never slice on these columns")
    interval: str = opt("wilson", choices=INTERVALS, help="interval for the reported rates")


@dataclass(frozen=True)
class FlipOptions(_Checked):
    """``[flips]``: counterfactual flip tests."""

    SECTION = "flips"
    attributes: tuple[str, ...] = opt((), cli=False, help="attributes to flip")
    modes: tuple[str, ...] = opt(MODES, choices=MODES, flag="--mode", metavar="M[,M]",
                                 help="direct, transport, twins")
    reference: Value | None = opt(None, help="flip only into this value")
    proxies: tuple[str, ...] | None = opt(None, metavar="A,B,...",
                                          help="proxies to move in transport mode")
    n_proxies: int = opt(3, lo=1, hi=50, help="proxies probe chooses when none are given")
    k: int = opt(5, lo=1, hi=100, help="twins per person")


@dataclass(frozen=True)
class ProxyOptions(_Checked):
    """``[proxies]``: which features stand in for a protected attribute."""

    SECTION = "proxies"
    attributes: tuple[str, ...] = opt((), cli=False, help="attributes to predict")
    features: tuple[str, ...] | None = opt(None, metavar="A,B,...",
                                           help="candidate features (default: all others)")


@dataclass(frozen=True)
class CompareOptions(_Checked):
    """``[compare]``: candidate against the production model; the worse-slice search uses ``[slices]``."""

    SECTION = "compare"
    baseline: str = opt("", required=True, metavar="SPEC", help="the production model")
    metric: str = opt("error", choices=METRIC_NAMES, help="the rate compared and searched")
    baseline_sha256: str | None = opt(None, cli=False, help="the SHA-256 the baseline's model file "
                                                            "must have; a pickle whose hash "
                                                            "matches is trusted")


@dataclass(frozen=True)
class PolicyOptions(_Checked):
    """``[policy]``: the release rules, each judged on its interval."""

    SECTION = "policy"
    min_impact_ratio: float | None = opt(None, lo=0.0, hi=1.0, cli=False, help="")
    max_fpr_gap: float | None = opt(None, lo=0.0, hi=1.0, cli=False,
                                    help="largest gap in false-positive rate to the reference group")
    max_fnr_gap: float | None = opt(None, lo=0.0, hi=1.0, cli=False,
                                    help="largest gap in false-negative rate to the reference group")
    max_error_gap: float | None = opt(None, lo=0.0, hi=1.0, cli=False,
                                      help="largest gap in error rate to the reference group")
    max_flip_rate: float | None = opt(None, lo=0.0, hi=1.0, cli=False, help="")
    max_slice_gap: float | None = opt(None, lo=0.0, hi=1.0, cli=False, help="")
    max_regression: float | None = opt(None, lo=0.0, hi=1.0, cli=False, help="")
    min_rows: int = opt(30, lo=1, cli=False,
                        help="a subject with fewer rows is inconclusive (common practice: 30)")
    fail_on_inconclusive: bool = opt(False, help="an inconclusive rule fails the run")

    def has_rules(self) -> bool:
        # the rules are the fields that default to "not set"; the others say how rules are judged
        return any(getattr(self, f.name) is not None for f in fields(self) if f.default is None)


@dataclass(frozen=True)
class ReportOptions(_Checked):
    """``[report]``: where and in which formats the report is written."""

    SECTION = "report"
    out: str | None = opt(None, cli=False, help="report folder (relative to the plan file's folder)")
    formats: tuple[str, ...] = opt(FORMATS, choices=FORMATS, cli=False, help="files to write")

    def __post_init__(self):
        super().__post_init__()
        if not self.formats:
            raise PlanError(f"`report.formats` is empty; list some of {', '.join(FORMATS)}")


SECTIONS = {cls.SECTION: cls for cls in (DataOptions, ModelOptions, SliceOptions, FlipOptions,
                                         ProxyOptions, CompareOptions, PolicyOptions, ReportOptions)}


# ------------------------------------------------------------------------------------------------
# command-line flags, derived from the fields


def _flag(f) -> str:
    return f.metadata.get("flag") or "--" + f.name.replace("_", "-")


def add_flags(group, cls, *, skip: tuple[str, ...] = ()) -> None:
    """Add one flag per field of ``cls`` to an argparse group; every flag defaults to "not given"."""
    for f in fields(cls):
        meta = f.metadata
        if not meta.get("cli") or f.name in skip:
            continue
        ann = str(f.type).replace(" ", "")
        default = f.default
        shown = ",".join(default) if isinstance(default, tuple) else default
        quiet = default in (None, (), "") or isinstance(default, bool)
        help_text = meta["help"] + ("" if quiet else f" ({shown})")
        if ann == "bool":
            group.add_argument(_flag(f), dest=f"{cls.SECTION}__{f.name}", action="store_const",
                               const=not default, default=None, help=help_text)
            continue
        kwargs: dict[str, Any] = {"dest": f"{cls.SECTION}__{f.name}", "default": None,
                                  "help": help_text, "required": bool(meta.get("required")),
                                  "metavar": meta.get("metavar") or f.name.upper()}
        if ann.startswith("tuple"):
            kwargs["type"] = _comma_list
            if f.name == "trusted_types":
                kwargs.update(type=str, action="append")
        elif ann.startswith("int"):
            kwargs["type"] = int
        elif ann.startswith("float"):
            kwargs["type"] = float
        if meta.get("choices") and not ann.startswith("tuple"):
            kwargs["choices"] = meta["choices"]
            kwargs.pop("metavar")
        group.add_argument(_flag(f), **kwargs)


def _comma_list(text: str) -> list[str]:
    return [t.strip() for t in text.split(",") if t.strip()]


def check_flags(args, cls) -> None:
    """Check the flags of ``cls`` that were given, each blamed on the flag as typed (``--top``)."""
    for f in fields(cls):
        value = getattr(args, f"{cls.SECTION}__{f.name}", None)
        if value is not None:
            check_option(f, tuple(value) if isinstance(value, list) else value, _flag(f))


def flag_values(args, cls) -> dict:
    """The values of ``cls``'s flags that were given on the command line, as plan keys."""
    out = {}
    prefix = f"{cls.SECTION}__"
    for key, value in vars(args).items():
        if key.startswith(prefix) and value is not None:
            out[key[len(prefix):]] = value
    return out
