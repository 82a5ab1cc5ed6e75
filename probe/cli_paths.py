"""Where a command writes its report: one rule, checked before any data is read or model loaded.

The rule (contract):

- ``--out DIR`` and ``--json FILE`` are relative to the working directory, like every flag's path;
- ``[report] out`` in a plan file is relative to the plan file's folder, like every path in a plan;
- without either, ``probe run`` and ``probe demo`` write ``reports/<name>-<YYYYmmdd-HHMMSS>/``
  under the working directory; the other commands write a folder only when ``--out`` is given;
- ``probe render`` writes next to the report it reads unless ``--out`` is given.

A report folder is replaced as a whole and ``--json`` is written atomically on its own
(:mod:`probe.report.files`).
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

from .errors import PlanError
from .report.files import FILE_NAMES, check_file_target, check_report_folder

__all__ = ["Outputs", "report_outputs", "render_targets"]


@dataclass(frozen=True)
class Outputs:
    """Where a run writes.

    Attributes
    ----------
    folder : Path or None
        The report folder (replaced as a whole), or None.
    json_file : Path or None
        The ``--json`` copy, or None.
    """

    folder: Path | None
    json_file: Path | None

    def check(self, inputs: Mapping[str, Path] | None = None) -> None:
        """Refuse outputs that could not be written, or that would overwrite one of ``inputs``
        (role → path: the data, the plan, the model …), before the analysis runs."""
        targets = {}
        if self.folder is not None:
            check_report_folder(self.folder, flag="--out")
            targets.update({self.folder / name: "--out" for name in FILE_NAMES.values()})
        if self.json_file is not None:
            check_file_target(self.json_file, flag="--json")
            if self.folder is not None and _inside(self.json_file, self.folder):
                raise PlanError(f"--json `{self.json_file}` is inside the report folder "
                                f"`{self.folder}`, which already holds report.json (and is "
                                "replaced as a whole by the next run); write it elsewhere")
            targets[self.json_file] = "--json"
        for role, source in (inputs or {}).items():
            for target, flag in targets.items():
                if _same_file(source, target):
                    raise PlanError(f"{flag} `{target}` is {role} of this run; writing there would "
                                    "overwrite it: choose another path")


def _inside(path: Path, folder: Path) -> bool:
    return Path(os.path.abspath(folder)) in Path(os.path.abspath(path)).parents


def _same_file(a: Path, b: Path) -> bool:
    try:
        return a.exists() and b.exists() and os.path.samefile(a, b)
    except OSError:
        return False


def report_outputs(args, plan) -> Outputs:
    """The outputs of ``run``, ``demo`` and the analysis commands, by the rule above."""
    folder = None
    if args.out:
        folder = Path(args.out)
    elif args.command in ("run", "demo"):
        if plan.report.out:
            folder = plan.resolve(plan.report.out)
        else:
            stamp = datetime.now().strftime("%Y%m%d-%H%M%S")
            folder = Path("reports") / f"{plan.name}-{stamp}"
    return Outputs(folder, Path(args.json) if args.json else None)


def render_targets(source: Path, out: str | None, formats) -> dict[str, Path]:
    """``probe render``'s files: format → path in ``--out`` (default: the report's folder).

    Raises
    ------
    PlanError
        A target that cannot be written, or one that is the report being read.
    """
    folder = Path(out) if out else source.parent
    targets = {fmt: folder / FILE_NAMES[fmt] for fmt in formats}
    for path in targets.values():
        if path.exists() and path.resolve() == source.resolve():
            raise PlanError(f"`{path}` is the report being read; choose another --out or leave "
                            "out --format json")
        check_file_target(path, flag="--out")
    return targets
