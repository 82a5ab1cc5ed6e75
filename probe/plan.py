"""The probe plan: a TOML file (or the same settings as flags) turned into one validated, frozen Plan.

Every key has a default except ``data.path``, ``data.label`` and ``model.spec`` (a plan that only
runs flips or proxies needs no label; one that only runs proxies needs no model). An unknown key is an
error that names it and suggests the close key: a typo must not silently change a release decision.
Every relative path in a plan file (``data.path``, a model file, ``report.out``) is relative to the
plan file's folder (flags' paths: to the working directory). The sections present decide what ``probe run`` does:
groups always (when protected attributes are given), slices / flips / proxies / compare when their
section is present, the policy when ``[policy]`` has rules.
"""

from __future__ import annotations

import hashlib
import re
import sys
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from .data import close_names
from .errors import PlanError, TrustError
from .options import (SECTIONS, CompareOptions, DataOptions, FlipOptions, ModelOptions,
                      PolicyOptions, ProxyOptions, ReportOptions, SliceOptions, check_option,
                      coerce_option, option_fields)

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised on Python 3.10 only
    import tomli as tomllib

__all__ = ["Plan", "load_plan", "load_policy", "plan_from_dict", "check_top_level"]


@dataclass(frozen=True)
class Plan:
    """A validated probe plan.

    Attributes
    ----------
    data, model : DataOptions, ModelOptions
        Always present.
    slices, flips, proxies, compare : section or None
        None when the section is absent (that analysis is not run).
    policy, report : PolicyOptions, ReportOptions
    seed : int
    confidence_level : float
    name : str
        Used in the default report folder name, so a plain file-name fragment (letters, digits,
        ``-``, ``_``, ``.``; no leading dot, no ``..``, at most 80 characters).
    base_dir : Path
        Where relative paths resolve (the plan file's folder, or the working directory).
    source : dict
        The plan as given (after defaults), for the report's provenance.
    sha256 : str or None
        The plan file's SHA-256 (None for flags).
    """

    data: DataOptions
    model: ModelOptions | None = None
    slices: SliceOptions | None = None
    flips: FlipOptions | None = None
    proxies: ProxyOptions | None = None
    compare: CompareOptions | None = None
    policy: PolicyOptions = field(default_factory=PolicyOptions)
    report: ReportOptions = field(default_factory=ReportOptions)
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
    def search(self) -> SliceOptions:
        """The slice search's options: ``[slices]``, else the defaults (the comparison uses them too)."""
        return self.slices or SliceOptions()

    @property
    def favorable(self) -> bool:
        return self.model is None or self.model.favorable != "negative"

    def to_dict(self) -> dict:
        """The plan as plain data (JSON-ready), for provenance."""
        out: dict[str, Any] = {"name": self.name, "seed": self.seed,
                               "confidence_level": self.confidence_level}
        for section in SECTIONS:
            value = getattr(self, section)
            out[section] = None if value is None else value.to_dict()
        return out

    def with_overrides(self, **sections) -> "Plan":
        return replace(self, **sections)


_TOP_LEVEL = {"name": "str", "seed": "int", "confidence_level": "float"}
_SEED_MAX = 2**32 - 1
_NAME = re.compile(r"[A-Za-z0-9_-][A-Za-z0-9._-]{0,79}")


def _fail(where: str, message: str) -> PlanError:
    return PlanError(f"{where}: {message}")


def _section(name: str, raw: Any, where: str):
    """One section, checked key by key with the options class's own types and rules."""
    cls = SECTIONS[name]
    if not isinstance(raw, dict):
        raise _fail(where, f"`{name}` must be a table ([{name}]), got {raw!r}")
    known = {f.name: f for f in option_fields(cls)}
    for key in raw:
        if key not in known:
            raise _fail(where, f"unknown key `{key}` in [{name}]{close_names(key, list(known))}")
    for key, f in known.items():
        if f.metadata.get("required") and raw.get(key) in (None, ""):
            raise _fail(where, f"[{name}] needs `{key}`")
    values = {}
    try:
        for key, value in raw.items():
            values[key] = coerce_option(known[key], value, f"{name}.{key}")
        return cls(**values)  # checks every value against its rule, named `section.key`
    except PlanError as exc:
        raise _fail(where, str(exc)) from None


class _Top:
    """The plan's top-level keys, as fields for :func:`coerce_option` and :func:`check_option`."""

    def __init__(self, name, type_):
        self.name, self.type = name, type_
        self.metadata = {"lo": 0, "hi": _SEED_MAX} if name == "seed" else {}


def check_top_level(key: str, value: Any, name: str) -> Any:
    """Check and normalise the top-level ``key`` (``name``, ``seed``, ``confidence_level``).

    ``name`` is how the message names it: the plan key, or the flag the user typed (``--seed``).
    """
    field_ = _Top(key, _TOP_LEVEL[key])
    value = coerce_option(field_, value, name)
    check_option(field_, value, name)
    shown = name if name.startswith("-") else f"`{name}`"
    if key == "confidence_level" and not 0.5 <= value < 1.0:
        raise PlanError(f"{shown} must lie in [0.5, 1), got {value}")
    if key == "name" and (not _NAME.fullmatch(value) or ".." in value):
        raise PlanError(f"{shown} must be a plain file-name fragment (letters, digits, `-`, `_`, `.`; "
                        f"no leading dot, no `..`, at most 80 characters), got {value!r}")
    return value


def plan_from_dict(raw: dict, *, base_dir: str | Path | None = None, where: str = "plan",
                   sha256: str | None = None) -> Plan:
    """Validate a plan given as nested dicts (the parsed TOML, or flags gathered by the CLI).

    Raises
    ------
    PlanError
        Unknown key (named, with a close match), missing required key, wrong type or bad value.
    """
    allowed = set(SECTIONS) | set(_TOP_LEVEL)
    for key in raw:
        if key not in allowed:
            raise _fail(where, f"unknown key `{key}`{close_names(key, sorted(allowed))}")
    if "data" not in raw:
        raise _fail(where, "the plan needs a [data] table")
    needs_model = not ("proxies" in raw and not {"slices", "flips", "compare"} & set(raw))
    if needs_model and "model" not in raw:
        raise _fail(where, "the plan needs a [model] table with `spec`")
    kwargs: dict[str, Any] = {}
    for key in _TOP_LEVEL:
        if key in raw:
            try:
                kwargs[key] = check_top_level(key, raw[key], key)
            except PlanError as exc:
                raise _fail(where, str(exc)) from None
    for name in SECTIONS:
        if name in raw:
            kwargs[name] = _section(name, raw[name], where)
    # flips and proxies need no label; groups, slices and the comparison do
    needs_label = bool({"slices", "compare"} & set(raw)) or not ({"flips", "proxies"} & set(raw))
    if needs_label and not kwargs["data"].label:
        raise _fail(where, "[data] needs `label`")
    return Plan(base_dir=Path(base_dir) if base_dir is not None else Path.cwd(), sha256=sha256, **kwargs)


def _read_toml(path: Path, what: str) -> tuple[dict, bytes]:
    if not path.is_file():
        raise PlanError(f"{what} `{path}` not found")
    content = path.read_bytes()
    try:
        return tomllib.loads(content.decode("utf-8")), content
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise PlanError(f"{what} `{path}` is not valid TOML: {exc}") from None


def load_plan(path: str | Path) -> Plan:
    """Read and validate a plan TOML file; relative paths in it resolve against its folder."""
    path = Path(path)
    raw, content = _read_toml(path, "plan file")
    plan = plan_from_dict(raw, base_dir=path.resolve().parent, where=f"plan `{path}`",
                          sha256=hashlib.sha256(content).hexdigest())
    if plan.model is not None and plan.model.trust_pickle:
        raise _file_grants_trust(plan, path)
    return plan


def _file_grants_trust(plan: Plan, path: Path) -> TrustError:
    """A plan file must not grant itself the right to run a pickle's code: the person running
    probe grants it (``--trust-pickle``), or the file pins the exact model file (``sha256``)."""
    model_file = Path(plan.resolve_spec(plan.model.spec))
    try:
        pin = f'"{hashlib.sha256(model_file.read_bytes()).hexdigest()}"'
    except OSError:
        pin = '"<the SHA-256 of the model file>"'
    return TrustError(
        f"plan `{path}`: `trust_pickle = true` under [model] cannot come from a plan file; remove "
        f"it and pass --trust-pickle, or pin the model file with sha256 = {pin} under [model]"
    )


def load_policy(path: str | Path) -> PolicyOptions:
    """Read a policy file: a TOML file holding one ``[policy]`` table, checked like a plan's.

    Raises
    ------
    PlanError
        Not found, not TOML, no ``[policy]`` table, another top-level key, or a bad rule (named).
    """
    path = Path(path)
    raw, _ = _read_toml(path, "policy file")
    where = f"policy file `{path}`"
    for key in raw:
        if key != "policy":
            raise _fail(where, f"unknown key `{key}`; a policy file holds one [policy] table")
    if "policy" not in raw:
        raise _fail(where, "no [policy] table")
    return _section("policy", raw["policy"], where)
