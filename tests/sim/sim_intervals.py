"""Coverage of the comparison's paired interval and of the impact-ratio intervals.

``python tests/sim/run.py intervals [NAME ...] [--runs N] [--seed S]``

- ``paired``: candidate-minus-baseline rate on the same rows, rare discordance (and settings where the
  two models agree on every row in most runs), several sizes; Tango's score interval (what probe
  reports) and Newcombe's paired interval beside it, with the share of zero-width intervals.
- ``impact_equal``: 4 groups with equal selection rates (every true impact ratio is 1), reference
  chosen from the data: per-interval coverage and the share of datasets with any interval missing 1.
- ``impact_uneven``: 4 groups of uneven sizes and rates (true ratios known), same figures.
- ``rate_gaps``: 3 groups (uneven shares, base rates, FPR and FNR; the reference fixed): coverage of
  the true gap in error rate, FPR and FNR to the reference by ``GroupRow.gap_at`` (Newcombe), what
  the policy's ``max_*_gap`` rules judge.

Each run draws its own data from its own seed (``seed + run``).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness import Figure, proportion
from generators import group_column

from probe.groups import group_metrics
from probe.paired import newcombe_paired_interval, tango_interval

# (rows, P(only the candidate has the outcome), P(only the baseline has it), P(both))
PAIRED = [(500, 0.002, 0.004, 0.10), (2000, 0.002, 0.004, 0.10), (20000, 0.0005, 0.001, 0.10),
          (300, 0.001, 0.001, 0.20), (5000, 0.01, 0.02, 0.15)]


def _seeds(seed, runs):
    return f"{seed}-{seed + runs - 1}"


def paired(runs=2000, seed=0, settings=PAIRED):
    figures = []
    for n, pb, pc, pa in settings:
        truth = pb - pc
        hits = {"tango": 0, "newcombe": 0}
        zero = agree = 0
        for r in range(runs):
            rng = np.random.default_rng([seed + r, n])
            a, b, c, d = rng.multinomial(n, [pa, pb, pc, 1 - pa - pb - pc])
            tl, th = tango_interval(b, c, n)
            nl, nh = newcombe_paired_interval(a, b, c, d)
            hits["tango"] += bool(tl <= truth <= th)
            hits["newcombe"] += bool(nl <= truth <= nh)
            zero += bool(th - tl <= 0)
            agree += b + c == 0
        where = f"n={n}, discordant {100 * pb:g}%/{100 * pc:g}% (all agree in {agree / runs:.0%})"
        figures.append(proportion(f"paired Tango coverage, {where}", hits["tango"], runs,
                                  ">= 0.93", _seeds(seed, runs)))
        figures.append(proportion(f"paired Newcombe coverage, {where}", hits["newcombe"], runs,
                                  ">= 0.93", _seeds(seed, runs)))
        figures.append(proportion(f"paired Tango zero-width intervals, {where}", zero, runs,
                                  "<= 0", _seeds(seed, runs)))
    return figures


def _impact(runs, seed, n, shares, rates, label, reference=None):
    """Coverage of every group's impact ratio against the true ratio: over the truly best group's
    rate when the reference is chosen from the data, over the fixed reference's rate otherwise."""
    rates = np.asarray(rates, dtype=float)
    denom = rates.max() if reference is None else rates[int(reference[1:])]
    truth = {f"g{i}": rates[i] / denom for i in range(len(rates))}
    per_run = np.empty(runs)
    for r in range(runs):
        rng = np.random.default_rng([seed + r, n, len(rates)])
        g = group_column(rng, n, shares)
        sel = rng.random(n) < rates[np.array([int(v[1:]) for v in g])]
        m = group_metrics(pd.DataFrame({"g": g}), sel, sel, attributes=["g"], min_share=0.0,
                          reference=None if reference is None else {"g": reference})
        per_run[r] = np.mean([row.impact_ratio.low <= truth[row.group] <= row.impact_ratio.high
                              for row in m.rows])
    # intervals of one dataset are correlated: the s.e. is over datasets, not over intervals
    coverage = Figure(f"impact ratio coverage per interval, {label}", float(per_run.mean()),
                      float(per_run.std(ddof=1) / np.sqrt(runs)), runs, ">= 0.94",
                      _seeds(seed, runs))
    if reference is not None:  # a fixed reference is judged per interval; the policy adjusts
        return [coverage]
    return [coverage, proportion(
        f"impact ratio: datasets with any interval missing the truth, {label}",
        int(np.sum(per_run < 1)), runs, "<= 0.05", _seeds(seed, runs))]


def impact_equal(runs=2000, seed=0, n=2000):
    """4 equal groups, equal rates: the reference chosen from the data, then fixed."""
    label = f"4 equal groups, equal rates 0.3, n={n}"
    return (_impact(runs, seed, n, [1, 1, 1, 1], [0.3] * 4, label + ", reference chosen")
            + _impact(runs, seed, n, [1, 1, 1, 1], [0.3] * 4, label + ", reference fixed g0",
                      reference="g0"))


def impact_uneven(runs=2000, seed=0, n=4000):
    """Uneven sizes and rates (true ratios 1, .95, .75, 1): the reference chosen, then fixed."""
    label = f"shares 50/25/15/10 %, rates .40/.38/.30/.40, n={n}"
    shares, rates = [0.5, 0.25, 0.15, 0.10], [0.40, 0.38, 0.30, 0.40]
    return (_impact(runs, seed, n, shares, rates, label + ", reference chosen")
            + _impact(runs, seed, n, shares, rates, label + ", reference fixed g2", reference="g2"))


# per group: share, P(label positive), FPR, FNR (g0 is the reference)
GAP_GROUPS = [(0.5, 0.40, 0.20, 0.10), (0.3, 0.30, 0.30, 0.10), (0.2, 0.50, 0.20, 0.25)]


def rate_gaps(runs=2000, seed=0, n=1500, level=0.95):
    """Coverage of the gap to a fixed reference in each rate, per compared group."""
    share, pos, fpr, fnr = (np.array(c) for c in zip(*GAP_GROUPS))
    truth = {"fpr": fpr, "fnr": fnr, "error_rate": pos * fnr + (1 - pos) * fpr}
    hits = {(rate, g): 0 for rate in truth for g in (1, 2)}
    for r in range(runs):
        rng = np.random.default_rng([seed + r, n, 7])
        g = group_column(rng, n, share)
        k = np.array([int(v[1:]) for v in g])
        y = rng.random(n) < pos[k]
        u = rng.random(n)
        pred = np.where(y, u >= fnr[k], u < fpr[k])
        m = group_metrics(pd.DataFrame({"g": g}), y, pred, attributes=["g"], min_share=0.0,
                          reference={"g": "g0"})
        for row in m.rows[1:]:
            i = int(row.group[1:])
            for rate, true in truth.items():
                e = row.gap_at(rate, level)
                hits[(rate, i)] += bool(e.low <= true[i] - true[0] <= e.high)
    return [proportion(f"{rate} gap coverage, g{i} vs g0, n={n}, level {level:g}", h, runs,
                       f">= {level - 0.02:g}", _seeds(seed, runs))
            for (rate, i), h in hits.items()]


SIMS = {"paired": paired, "impact_equal": impact_equal, "impact_uneven": impact_uneven,
        "rate_gaps": rate_gaps}
