"""The probe plan: a TOML file (or the same settings as flags) turned into one validated, frozen Plan.

Every key has a default except ``data.path``, ``data.label`` and ``model.spec`` (a plan that only
runs flips or proxies needs no label; one that only runs proxies needs no model). An unknown key is an
error that names it and suggests the close key: a typo must not silently change a release decision.
Relative paths are relative to the plan file. The sections present decide what ``probe run`` does:
groups always (when protected attributes are given), slices / flips / proxies / compare when their
section is present, the policy when ``[policy]`` has rules.
"""

from __future__ import annotations

import hashlib
import sys
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import Any

from .data import close_names
from .errors import PlanError

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised on Python 3.10 only
    import tomli as tomllib

__all__ = ["Plan", "load_plan", "plan_from_dict", "METRICS", "MODES", "FORMATS"]

METRICS = ("error", "fpr", "fnr", "selection")
MODES = ("direct", "transport", "twins")
FORMATS = ("json", "html", "md", "junit")


@dataclass(frozen=True)
class DataSection:
    path: str
    label: str = ""
    positive: Any = None
    protected: tuple[str, ...] = ()
    intersections: tuple[tuple[str, ...], ...] = ()
    features: tuple[str, ...] | None = None


@dataclass(frozen=True)
class ModelSection:
    spec: str
    threshold: float = 0.5
    favorable: str = "positive"
    trust_pickle: bool = False
    trusted_types: tuple[str, ...] = ()
    batch_size: int = 50_000


@dataclass(frozen=True)
class SlicesSection:
    metric: str = "error"
    depth: int = 3
    min_rows: int | None = None
    bins: int = 5
    top: int = 10
    split: bool = True
    columns: tuple[str, ...] | None = None
    exclude: tuple[str, ...] = ()
    interval: str = "wilson"


@dataclass(frozen=True)
class FlipsSection:
    attributes: tuple[str, ...] = ()
    modes: tuple[str, ...] = MODES
    reference: Any = None
    proxies: tuple[str, ...] | None = None
    n_proxies: int = 3
    k: int = 5


@dataclass(frozen=True)
class ProxiesSection:
    attributes: tuple[str, ...] = ()
    features: tuple[str, ...] | None = None


@dataclass(frozen=True)
class CompareSection:
    baseline: str = ""
    metric: str = "error"


@dataclass(frozen=True)
class PolicySection:
    min_impact_ratio: float | None = None
    max_flip_rate: float | None = None
    max_slice_gap: float | None = None
    max_regression: float | None = None
    fail_on_inconclusive: bool = False

    def has_rules(self) -> bool:
        return any(getattr(self, f.name) is not None for f in fields(self) if f.name.startswith(("min_", "max_")))


@dataclass(frozen=True)
class ReportSection:
    out: str | None = None
    formats: tuple[str, ...] = FORMATS


@dataclass(frozen=True)
class Plan:
    """A validated probe plan.

    Attributes
    ----------
    data, model : DataSection, ModelSection
        Always present.
    slices, flips, proxies, compare : section or None
        None when the section is absent (that analysis is not run).
    policy, report : PolicySection, ReportSection
    seed : int
    confidence_level : float
    name : str
        Used in the default report folder name.
    base_dir : Path
        Where relative paths resolve (the plan file's folder, or the working directory).
    source : dict
        The plan as given (after defaults), for the report's provenance.
    sha256 : str or None
        The plan file's SHA-256 (None for flags).
    """

    data: DataSection
    model: ModelSection | None = None
    slices: SlicesSection | None = None
    flips: FlipsSection | None = None
    proxies: ProxiesSection | None = None
    compare: CompareSection | None = None
    policy: PolicySection = field(default_factory=PolicySection)
    report: ReportSection = field(default_factory=ReportSection)
    seed: int = 0
    confidence_level: float = 0.95
    name: str = "probe"
    base_dir: Path = field(default_factory=Path.cwd)
    sha256: str | None = None

    def resolve(self, path: str) -> Path:
        """A plan path made absolute against the plan's folder."""
        p = Path(path).expanduser()
        return p if p.is_absolute() else self.base_dir / p

    def resolve_spec(self, spec: str) -> str:
        """A model spec whose file path is made absolute; other kinds pass through."""
        if ":" in spec.split("/")[0] and not spec[1:3] == ":\\":
            return spec  # py:, cmd:, column:, http: ...
        return str(self.resolve(spec))

    @property
    def favorable(self) -> bool:
        return self.model is None or self.model.favorable == "positive"

    def to_dict(self) -> dict:
        """The plan as plain data (JSON-ready), for provenance."""
        out: dict[str, Any] = {"name": self.name, "seed": self.seed,
                               "confidence_level": self.confidence_level}
        for section in _SECTIONS:
            value = getattr(self, section)
            out[section] = None if value is None else _plain(value)
        return out

    def with_overrides(self, **sections) -> "Plan":
        return replace(self, **sections)


def _plain(obj) -> Any:
    if hasattr(obj, "__dataclass_fields__"):
        return {f.name: _plain(getattr(obj, f.name)) for f in fields(obj)}
    if isinstance(obj, (tuple, list)):
        return [_plain(v) for v in obj]
    return obj


_SECTIONS = {
    "data": DataSection,
    "model": ModelSection,
    "slices": SlicesSection,
    "flips": FlipsSection,
    "proxies": ProxiesSection,
    "compare": CompareSection,
    "policy": PolicySection,
    "report": ReportSection,
}
_TOP_LEVEL = {"name": str, "seed": int, "confidence_level": float}
_REQUIRED = {"data": ("path",), "model": ("spec",)}


def _fail(where: str, message: str) -> PlanError:
    return PlanError(f"{where}: {message}")


def _coerce(where: str, key: str, value: Any, annotation: str) -> Any:
    """Check one value against its field's annotation (a string, as written in this module)."""
    ann = annotation.replace(" ", "")
    optional = ann.endswith("|None")
    base = ann[: -len("|None")] if optional else ann
    if value is None and optional:
        return None
    if base == "Any":
        return value
    if base == "bool":
        if not isinstance(value, bool):
            raise _fail(where, f"`{key}` must be true or false, got {value!r}")
        return value
    if base == "int":
        if isinstance(value, bool) or not isinstance(value, int):
            raise _fail(where, f"`{key}` must be a whole number, got {value!r}")
        return value
    if base == "float":
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise _fail(where, f"`{key}` must be a number, got {value!r}")
        return float(value)
    if base == "str":
        if not isinstance(value, str):
            raise _fail(where, f"`{key}` must be a string, got {value!r}")
        return value
    if base == "tuple[str,...]":
        if isinstance(value, str):
            value = [value]
        if not isinstance(value, (list, tuple)) or not all(isinstance(v, str) for v in value):
            raise _fail(where, f"`{key}` must be a list of strings, got {value!r}")
        return tuple(value)
    if base == "tuple[tuple[str,...],...]":
        if not isinstance(value, (list, tuple)) or not all(
            isinstance(v, (list, tuple)) and all(isinstance(s, str) for s in v) for v in value
        ):
            raise _fail(where, f"`{key}` must be a list of lists of column names, got {value!r}")
        return tuple(tuple(v) for v in value)
    raise AssertionError(f"unhandled annotation {annotation}")  # a bug, not bad input


def _section(name: str, raw: Any, where: str):
    cls = _SECTIONS[name]
    if not isinstance(raw, dict):
        raise _fail(where, f"`{name}` must be a table ([{name}]), got {raw!r}")
    known = {f.name: f for f in fields(cls)}
    for key in raw:
        if key not in known:
            raise _fail(where, f"unknown key `{key}` in [{name}]{close_names(key, list(known))}")
    for key in _REQUIRED.get(name, ()):
        if raw.get(key) in (None, ""):
            raise _fail(where, f"[{name}] needs `{key}`")
    values = {k: _coerce(where, f"{name}.{k}", v, str(known[k].type)) for k, v in raw.items()}
    return cls(**values)


def _validate(plan: Plan, where: str) -> None:
    m = plan.model or ModelSection(spec="-")
    if not 0.0 <= m.threshold <= 1.0:
        raise _fail(where, f"`model.threshold` must lie in [0, 1], got {m.threshold}")
    if m.favorable not in ("positive", "negative"):
        raise _fail(where, f"`model.favorable` must be \"positive\" or \"negative\", got {m.favorable!r}")
    if m.batch_size < 1:
        raise _fail(where, f"`model.batch_size` must be at least 1, got {m.batch_size}")
    if not 0.5 <= plan.confidence_level < 1.0:
        raise _fail(where, f"`confidence_level` must lie in [0.5, 1), got {plan.confidence_level}")
    s = plan.slices
    if s is not None:
        if s.metric not in METRICS:
            raise _fail(where, f"`slices.metric` must be one of {', '.join(METRICS)}, got {s.metric!r}"
                        + close_names(s.metric, METRICS))
        if not 1 <= s.depth <= 4:
            raise _fail(where, f"`slices.depth` must be 1 to 4, got {s.depth}")
        if s.min_rows is not None and s.min_rows < 1:
            raise _fail(where, f"`slices.min_rows` must be at least 1, got {s.min_rows}")
        if not 2 <= s.bins <= 20:
            raise _fail(where, f"`slices.bins` must be 2 to 20, got {s.bins}")
        if s.interval not in ("wilson", "bootstrap"):
            raise _fail(where, f"`slices.interval` must be \"wilson\" or \"bootstrap\", got {s.interval!r}")
    f = plan.flips
    if f is not None:
        bad = [mode for mode in f.modes if mode not in MODES]
        if bad:
            raise _fail(where, f"`flips.modes` has unknown mode {bad[0]!r}; expected {', '.join(MODES)}"
                        + close_names(bad[0], MODES))
        if f.k < 1:
            raise _fail(where, f"`flips.k` must be at least 1, got {f.k}")
    if plan.compare is not None and not plan.compare.baseline:
        raise _fail(where, "[compare] needs `baseline` (the production model's spec)")
    if plan.compare is not None and plan.compare.metric not in METRICS:
        raise _fail(where, f"`compare.metric` must be one of {', '.join(METRICS)}, got {plan.compare.metric!r}")
    bad = [fmt for fmt in plan.report.formats if fmt not in FORMATS]
    if bad:
        raise _fail(where, f"`report.formats` has unknown format {bad[0]!r}; expected {', '.join(FORMATS)}")
    for rule in ("min_impact_ratio", "max_flip_rate", "max_slice_gap", "max_regression"):
        value = getattr(plan.policy, rule)
        if value is not None and not 0.0 <= value <= 1.0:
            raise _fail(where, f"`policy.{rule}` must lie in [0, 1], got {value}")


def plan_from_dict(raw: dict, *, base_dir: str | Path | None = None, where: str = "plan",
                   sha256: str | None = None) -> Plan:
    """Validate a plan given as nested dicts (the parsed TOML, or flags gathered by the CLI).

    Raises
    ------
    PlanError
        Unknown key (named, with a close match), missing required key, wrong type or bad value.
    """
    allowed = set(_SECTIONS) | set(_TOP_LEVEL)
    for key in raw:
        if key not in allowed:
            raise _fail(where, f"unknown key `{key}`{close_names(key, sorted(allowed))}")
    if "data" not in raw:
        raise _fail(where, "the plan needs a [data] table")
    needs_model = not ("proxies" in raw and not {"slices", "flips", "compare"} & set(raw))
    if needs_model and "model" not in raw:
        raise _fail(where, "the plan needs a [model] table with `spec`")
    kwargs: dict[str, Any] = {}
    for key, typ in _TOP_LEVEL.items():
        if key in raw:
            kwargs[key] = _coerce(where, key, raw[key], typ.__name__)
    for name in _SECTIONS:
        if name in raw:
            kwargs[name] = _section(name, raw[name], where)
    # flips and proxies need no label; groups, slices and the comparison do
    needs_label = bool({"slices", "compare"} & set(raw)) or not ({"flips", "proxies"} & set(raw))
    if needs_label and not kwargs["data"].label:
        raise _fail(where, "[data] needs `label`")
    plan = Plan(base_dir=Path(base_dir) if base_dir is not None else Path.cwd(), sha256=sha256, **kwargs)
    _validate(plan, where)
    return plan


def load_plan(path: str | Path) -> Plan:
    """Read and validate a plan TOML file; relative paths in it resolve against its folder."""
    path = Path(path)
    if not path.is_file():
        raise PlanError(f"plan file `{path}` not found")
    content = path.read_bytes()
    try:
        raw = tomllib.loads(content.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise PlanError(f"plan file `{path}` is not valid TOML: {exc}") from None
    return plan_from_dict(raw, base_dir=path.resolve().parent, where=f"plan `{path}`",
                          sha256=hashlib.sha256(content).hexdigest())
