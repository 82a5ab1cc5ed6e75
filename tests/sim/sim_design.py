"""Coverage of intervals under a sampling design: unequal weights, clusters, membership probabilities.

Run: ``python tests/sim/run.py design [weights|clusters|membership] [--runs N] [--seed S]``.

Each figure is the share of seeded datasets whose 95 % interval holds the truth the generator knows
exactly (:mod:`generators_design`), with its Monte Carlo standard error; the target is nominal
within 2 points. The naive intervals (clusters ignored; membership probabilities summed as if they
were rows) are measured beside them, to show what the design corrects.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from generators_design import (clustered_sample, kish_deff, membership_sample,
                               stratified_sample)
from harness import Figure, proportion
from probe.design import Design, Membership
from probe.groups import group_metrics
from probe.stats import wilson_interval

NOMINAL = "in 0.93 0.97"  # 95 % within 2 points


def _seeds(seed, runs):
    return f"{seed}..{seed + runs - 1}"


def _covers(est, truth) -> bool:
    return bool(est.low <= truth <= est.high)


def _rows(result, attribute):
    return {r.group: r for r in result.rows if r.attribute == attribute}


def weights(runs=2000, seed=0, n=3000):
    """Stratified sample, oversampled minority stratum, noisy weights (Kish deff about 2.3)."""
    hits = {g: 0 for g in "abc"}
    gap_hits = {g: 0 for g in "bc"}
    deffs = []
    for r in range(runs):
        rng = np.random.default_rng(seed + r)
        frame, sel, w, truth = stratified_sample(rng, n)
        deffs.append(kish_deff(w))
        m = group_metrics(frame, sel, sel, attributes=["group"], reference={"group": "a"},
                          design=Design(w))
        rows = _rows(m, "group")
        for g in "abc":
            hits[g] += _covers(rows[g].selection_rate, truth[g])
        for g in "bc":
            gap_hits[g] += _covers(rows[g].spd, truth[g] - truth["a"])
    d = np.array(deffs)
    out = [Figure("weights: Kish design effect (mean)", float(d.mean()),
                  float(d.std() / np.sqrt(runs)), runs, ">= 2", _seeds(seed, runs))]
    out += [proportion(f"weights: coverage of group {g}'s selection rate", hits[g], runs, NOMINAL,
                       _seeds(seed, runs)) for g in "abc"]
    out += [proportion(f"weights: coverage of group {g}'s gap to a", gap_hits[g], runs, NOMINAL,
                       _seeds(seed, runs)) for g in "bc"]
    return out


def clusters(runs=2000, seed=0, n_clusters=400):
    """People seen 1-10 times, intra-cluster correlation 0.3; clusters as units vs rows as units."""
    hits = {g: 0 for g in "abc"}
    naive = {g: 0 for g in "abc"}
    for r in range(runs):
        rng = np.random.default_rng(seed + r)
        frame, sel, truth = clustered_sample(rng, n_clusters)
        design = Design(cluster=pd.factorize(frame["person"])[0])
        rows = _rows(group_metrics(frame, sel, sel, attributes=["group"], design=design), "group")
        plain = _rows(group_metrics(frame, sel, sel, attributes=["group"]), "group")
        for g in "abc":
            hits[g] += _covers(rows[g].selection_rate, truth[g])
            naive[g] += _covers(plain[g].selection_rate, truth[g])
    shared = {g: 0 for g in "bc"}
    for r in range(runs):
        rng = np.random.default_rng(seed + r)
        frame, sel, truth = clustered_sample(rng, n_clusters, shared=True)
        design = Design(cluster=pd.factorize(frame["person"])[0])
        rows = _rows(group_metrics(frame, sel, sel, attributes=["group"], design=design,
                                   reference={"group": "a"}), "group")
        for g in "bc":
            shared[g] += _covers(rows[g].spd, truth[g] - truth["a"])
    out = [proportion(f"clusters: coverage of group {g}'s rate, people as units", hits[g], runs,
                      NOMINAL, _seeds(seed, runs)) for g in "abc"]
    out += [proportion(f"clusters: coverage of group {g}'s gap to a, groups within households",
                       shared[g], runs, NOMINAL, _seeds(seed, runs)) for g in "bc"]
    out += [proportion(f"clusters: coverage of group {g}'s rate, rows as units (naive)", naive[g],
                       runs, "<= 0.90", _seeds(seed, runs)) for g in "abc"]
    return out


def membership(runs=2000, seed=0, n=4000):
    """Group known as calibrated probabilities from the area; outcome independent of the group
    given the area, so the probability-weighted rate targets the true group rate."""
    hits = {g: 0 for g in "abc"}
    naive = {g: 0 for g in "abc"}
    gap_hits = {g: 0 for g in "bc"}
    ratio_hits = {g: 0 for g in "bc"}
    for r in range(runs):
        rng = np.random.default_rng(seed + r)
        frame, sel, truth, _ = membership_sample(rng, n)
        probs = frame[["p_a", "p_b", "p_c"]].to_numpy()
        design = Design(membership={"race": Membership("race", ("a", "b", "c"),
                                                       ("p_a", "p_b", "p_c"), probs)})
        rows = _rows(group_metrics(frame, sel, sel, attributes=["race"], design=design,
                                   reference={"race": "a"}), "race")
        for g in "bc":
            gap_hits[g] += _covers(rows[g].spd, truth[g] - truth["a"])
            ratio_hits[g] += _covers(rows[g].impact_ratio, truth[g] / truth["a"])
        for j, g in enumerate("abc"):
            hits[g] += _covers(rows[g].selection_rate, truth[g])
            # naive: the probabilities summed as if they were rows
            low, high = wilson_interval((probs[:, j] * sel).sum(), probs[:, j].sum())
            naive[g] += bool(low <= truth[g] <= high)
    out = [proportion(f"membership: coverage of group {g}'s rate", hits[g], runs, NOMINAL,
                      _seeds(seed, runs)) for g in "abc"]
    out += [proportion(f"membership: coverage of group {g}'s gap to a (groups share rows)",
                       gap_hits[g], runs, NOMINAL, _seeds(seed, runs)) for g in "bc"]
    out += [proportion(f"membership: coverage of group {g}'s impact ratio to a (groups share rows)",
                       ratio_hits[g], runs, NOMINAL, _seeds(seed, runs)) for g in "bc"]
    out += [proportion(f"membership: coverage of group {g}'s rate, probabilities as rows (naive)",
                       naive[g], runs, ">= 0", _seeds(seed, runs)) for g in "abc"]
    return out


SIMS = {"weights": weights, "clusters": clusters, "membership": membership}
