"""The verdict's error rate: a model that meets every rule exactly at its bound.

Each run draws, from one seed, data on which every rule's truth sits exactly on its bound, runs the
four analyses through the public API and judges the four rules together:

- ``min_impact_ratio = 0.8``: four groups (shares 40/30/20/10 %), selection 50 % in the first and
  40 % in the others, so every true impact ratio against the best group is exactly 0.8;
- ``max_flip_rate = 0.02``: a model whose decision changes with the attribute for exactly the rows
  with ``u < 0.02`` (``u`` uniform, an input), so the true direct flip rate is 0.02 both ways;
- ``max_slice_gap = 0.05``: error 15 % everywhere except one 2-way slice (``region = r1`` and
  ``channel = c0``) at 20 %: the worst true gap to the rest is exactly 0.05;
- ``max_regression = 0.02``: the candidate errs on every row the baseline errs on, plus 2 % of the
  others chosen at random: the shortfall is 0.02 overall and in every slice.

A correct simultaneous judgement fails the whole policy in at most 5 % of runs (the target).
Command: ``python tests/sim/run.py policy --runs 300``.
"""

from __future__ import annotations

import numpy as np

from generators import group_column, mixed_frame
from harness import proportion

from probe.compare import compare_models
from probe.flips import flip_test
from probe.groups import group_metrics
from probe.options import PolicyOptions, SliceOptions
from probe.policy import judge, measure
from probe.slices import find_slices

POLICY = PolicyOptions(min_impact_ratio=0.8, max_flip_rate=0.02, max_slice_gap=0.05,
                       max_regression=0.02)


class _AtTheBound:
    """Decides on ``z``; the attribute flips the decision exactly where ``u < 0.02``."""

    feature_names = ("grp", "z", "u")
    categories = None

    def scores(self, frame):
        z = frame["z"].to_numpy()
        base = z > 0
        flip = (frame["u"].to_numpy() < 0.02) & (frame["grp"].to_numpy() == "g1")
        return np.where(base ^ flip, 0.8, 0.2)


def one_run(seed, n):
    rng = np.random.default_rng(seed)
    X = mixed_frame(rng, n, 12)
    X["grp"] = group_column(rng, n, [0.4, 0.3, 0.2, 0.1])
    X["z"], X["u"] = rng.normal(size=n), rng.random(n)
    g = X["grp"].to_numpy()
    sel = rng.random(n) < np.where(g == "g0", 0.5, 0.4)
    groups = group_metrics(X, sel, sel, attributes=["grp"])
    flips = [flip_test(_AtTheBound(), X[["grp", "z", "u"]], "grp", mode="direct", rng=seed)]
    # error outcome: y_true vs a decision; 15 % error, 20 % in the planted slice
    planted = (X["region"].to_numpy() == "r1") & (X["channel"].to_numpy() == "c0")
    pred = rng.random(n) < 0.5
    err = rng.random(n) < np.where(planted, 0.20, 0.15)
    truth = pred ^ err
    cols = X[["region", "channel", "age", "income", "band", "segment"]]
    slices = find_slices(cols, truth, pred, options=SliceOptions(depth=2), rng=seed)
    extra = (~err) & (rng.random(n) < 0.02 / 0.85)
    cand = pred ^ extra  # errs where the baseline errs, and on 2 % more of the rows
    comparison = compare_models(cols, truth, cand, pred, metric="error",
                                options=SliceOptions(depth=2), rng=seed)
    return judge(measure(groups=groups, flips=flips, slices=slices, comparison=comparison),
                 POLICY)


def at_the_bound(runs=300, seed=0, n=20000):
    fails, by_rule = 0, {name: 0 for name in ("min_impact_ratio", "max_flip_rate",
                                             "max_slice_gap", "max_regression")}
    for s in range(seed, seed + runs):
        verdict = one_run(s, n)
        fails += verdict.status == "fail"
        for name in {r.name for r in verdict.rules if r.status == "fail"}:
            by_rule[name] += 1
    seeds = f"{seed}-{seed + runs - 1}"
    out = [proportion(f"every rule at its bound, {n} rows: the policy fails", fails, runs,
                      "<= 0.05", seeds)]
    out += [proportion(f"  of which `{k}` fails", v, runs, "<= 0.05", seeds)
            for k, v in by_rule.items()]
    return out


SIMS = {"at_the_bound": at_the_bound}
