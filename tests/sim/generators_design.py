"""Seeded generators of holdouts that are not simple random samples, each with its exact truth.

- :func:`stratified_sample`: a stratified sample with an oversampled stratum and noisy
  non-response adjustments (Kish design effect above 2); the groups' population rates are known.
- :func:`clustered_sample`: people seen 1 to 10 times, a binary outcome with a given intra-cluster
  correlation (beta-binomial); groups are per cluster (a household shares its group).
- :func:`membership_sample`: a group known only as probabilities from a calibrated model of an area
  column; the outcome depends on the area and, optionally, on the true group beyond it.

Nothing here knows about probe.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

__all__ = ["clustered_sample", "kish_deff", "membership_sample", "stratified_sample"]


def kish_deff(w) -> float:
    """Kish's design effect of unequal weights, ``n sum(w^2) / sum(w)^2``."""
    w = np.asarray(w, dtype=float)
    return float(len(w) * (w * w).sum() / w.sum() ** 2)


def stratified_sample(rng, n, *, pop_shares=(0.95, 0.05), sample_shares=(0.5, 0.5),
                      group_shares=((0.6, 0.3, 0.1), (0.3, 0.3, 0.4)),
                      rates=((0.50, 0.40, 0.35), (0.25, 0.20, 0.15)), noise=0.5):
    """A stratified sample of ``n`` rows: stratum ``h`` (population share ``pop_shares[h]``) gets
    ``sample_shares[h]`` of the rows; within it, group ``g`` has share ``group_shares[h][g]`` and
    selection rate ``rates[h][g]``. Weights are the inverse sampling fractions times lognormal
    non-response factors (sigma ``noise``, mean 1).

    Returns
    -------
    frame : DataFrame with ``stratum``, ``group``, ``age`` (a mixed-type extra column)
    selected : ndarray of bool
    weights : ndarray
    truth : dict group -> population selection rate
    """
    pop, samp = np.asarray(pop_shares), np.asarray(sample_shares)
    sizes = np.round(samp * n).astype(int)
    sizes[-1] = n - sizes[:-1].sum()
    strata, groups, sel, w = [], [], [], []
    for h, m in enumerate(sizes):
        gs = np.asarray(group_shares[h])
        g = rng.choice(len(gs), size=m, p=gs / gs.sum())
        strata.append(np.full(m, h))
        groups.append(g)
        sel.append(rng.random(m) < np.asarray(rates[h])[g])
        factor = rng.lognormal(-noise * noise / 2, noise, m)
        w.append(pop[h] / (m / n) * factor)
    g = np.concatenate(groups)
    frame = pd.DataFrame({"stratum": np.concatenate(strata).astype(str),
                          "group": np.array(["a", "b", "c"], dtype=object)[g],
                          "age": rng.normal(40, 10, n).round()})
    truth = {}
    for j, name in enumerate("abc"):
        mass = sum(pop[h] * group_shares[h][j] for h in range(len(pop)))
        truth[name] = sum(pop[h] * group_shares[h][j] * rates[h][j] for h in range(len(pop))) / mass
    return frame, np.concatenate(sel), np.concatenate(w), truth


def clustered_sample(rng, n_clusters, *, sizes=(1, 10), icc=0.3, group_shares=(0.6, 0.3, 0.1),
                     rates=(0.5, 0.4, 0.3), shared=False):
    """People (clusters) of ``sizes[0] .. sizes[1]`` rows each, uniform; each person's selection
    probability is Beta with mean ``rates[group]`` and intra-cluster correlation ``icc``
    (``a + b = 1 / icc - 1``), so the rows' outcomes correlate at ``icc`` within a person.
    ``shared``: a household rather than a person: the group is drawn per row, so the groups share
    clusters, and the household's Beta draw (mean 0.5) is shifted by ``rates[group] - 0.5`` per row.

    Returns frame (``person``, ``group``), selected, truth (group -> population rate)."""
    size = rng.integers(sizes[0], sizes[1] + 1, n_clusters)
    gs = np.asarray(group_shares)
    person = np.repeat(np.arange(n_clusters), size)
    total = 1.0 / icc - 1.0
    if shared:
        g = rng.choice(len(gs), size=len(person), p=gs / gs.sum())
        base = rng.beta(0.5 * total, 0.5 * total, n_clusters)
        p = np.clip(base[person] + np.asarray(rates)[g] - 0.5, 0, 1)
        sel = rng.random(len(person)) < p
        frame = pd.DataFrame({"person": person, "group": np.array(["a", "b", "c"], dtype=object)[g]})
        # the clip moves a rate: the truth is the mean of clipped Beta draws (by quadrature)
        q = (np.arange(20000) + 0.5) / 20000
        draws = stats.beta.ppf(q, 0.5 * total, 0.5 * total)
        truth = {k: float(np.clip(draws + r - 0.5, 0, 1).mean()) for k, r in zip("abc", rates)}
        return frame, sel, truth
    g = rng.choice(len(gs), size=n_clusters, p=gs / gs.sum())
    mean = np.asarray(rates)[g]
    p = rng.beta(mean * total, (1 - mean) * total)
    sel = rng.random(len(person)) < p[person]
    frame = pd.DataFrame({"person": person, "group": np.array(["a", "b", "c"], dtype=object)[g][person]})
    return frame, sel, dict(zip("abc", rates))


def membership_sample(rng, n, *, areas=30, concentration=1.0, area_effect=0.15, group_effect=0.0,
                      base=0.4):
    """Rows in ``areas`` areas; each area has group probabilities ``pi(area)`` (Dirichlet, the
    calibrated membership model: the true group is drawn from exactly these); the selection rate
    is ``base + area_effect * u(area) + group_effect * [group == "b"]`` (``u`` in [-1, 1]).

    With ``group_effect = 0`` the outcome is independent of the group given the area, and the
    probability-weighted rate estimates the true group rate; otherwise it is biased toward no gap.

    Returns frame (``area``, ``p_a``, ``p_b``, ``p_c``, ``true_group``), selected, truth (group ->
    population rate by the true groups), and ``weighted_limit`` (group -> what the
    probability-weighted rate converges to), both exact from the generator's parameters."""
    pi = rng.dirichlet(np.full(3, concentration), size=areas)
    u = rng.uniform(-1, 1, areas)
    area_p = np.full(areas, 1.0 / areas)
    area = rng.choice(areas, size=n, p=area_p)
    cum = pi[area].cumsum(axis=1)
    true = (rng.random(n)[:, None] > cum).sum(axis=1)
    rate = base + area_effect * u[area] + group_effect * (true == 1)
    sel = rng.random(n) < rate
    frame = pd.DataFrame({"area": area.astype(str), "p_a": pi[area, 0], "p_b": pi[area, 1],
                          "p_c": pi[area, 2],
                          "true_group": np.array(["a", "b", "c"], dtype=object)[true]})
    truth, limit = {}, {}
    for j, name in enumerate("abc"):
        r_true = base + area_effect * u + group_effect * (j == 1)  # rate of group j in each area
        truth[name] = float((area_p * pi[:, j] * r_true).sum() / (area_p * pi[:, j]).sum())
        # E[pi_j y] / E[pi_j]: y's rate in an area mixes the groups by pi
        r_area = base + area_effect * u + group_effect * pi[:, 1]
        limit[name] = float((area_p * pi[:, j] * r_area).sum() / (area_p * pi[:, j]).sum())
    return frame, sel, truth, limit
