"""The simulation harness: figures with Monte Carlo standard errors, a table, a command line.

A simulation module (``sim_<topic>.py`` here) defines ``SIMS``: name -> ``function(runs, seed)``
returning a list of :class:`Figure`. Run them with::

    python tests/sim/run.py TOPIC [NAME ...] [--runs N] [--seed S]

The default test run imports the same functions with few runs (``test_guards_<topic>.py``), so a
regression of a level or a coverage shows up there too.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["Figure", "proportion", "table"]


@dataclass(frozen=True)
class Figure:
    """One measured figure: a proportion (or mean) over ``runs`` seeded runs, with its Monte Carlo
    standard error and the target it is held to (``"<= 0.05"``, ``">= 0.93"``, or a range
    ``"in 0.93 0.97"``)."""

    what: str
    value: float
    mcse: float
    runs: int
    target: str
    seeds: str

    @property
    def met(self) -> bool:
        op, *bounds = self.target.split()
        if op == "in":
            return float(bounds[0]) <= self.value <= float(bounds[1])
        bound = bounds[0]
        return self.value <= float(bound) if op == "<=" else self.value >= float(bound)

    def row(self) -> str:
        return (f"| {self.what} | {self.value:.3f} | {self.mcse:.3f} | {self.runs} | {self.target} "
                f"| {'yes' if self.met else 'NO'} | {self.seeds} |")


def proportion(what, hits, runs, target, seeds) -> Figure:
    """A proportion of runs with its binomial Monte Carlo standard error."""
    p = hits / runs if runs else math.nan
    return Figure(what, p, math.sqrt(p * (1 - p) / runs) if runs else math.nan, runs, target,
                  seeds)


def table(figures) -> str:
    head = ("| what | measured | MC s.e. | runs | target | met | seeds |\n"
            "|---|---|---|---|---|---|---|")
    return "\n".join([head] + [f.row() for f in figures])
