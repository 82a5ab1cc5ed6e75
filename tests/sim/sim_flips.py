"""Flip-test simulations: the transport interval's coverage of the flip rate under the population
map, transport findings for a chance proxy, the twins excess interval's coverage when the source
group is 9 times the pool.

``python tests/sim/run.py flips [NAME ...] --runs N --seed S``

Planted truths (all closed forms, ``scipy.stats.norm``):

- transport: ``p`` ~ N(0, 1) in the source group, N(``SHIFT``, 1) in the target group, so the
  population quantile map is ``p + SHIFT``; the model approves ``p + u/2 >= CUT`` with ``u`` ~
  N(0, 1) in both groups and never reads the group. Under the population map the source group's flip rate is
  ``P(CUT - SHIFT <= s < CUT)`` with ``s`` ~ N(0, 1.25).
- chance proxy: the same with ``SHIFT = 0`` (``p`` is not associated with the group but is moved as
  if it were): the true flip rate is 0, and a finding (the excess over the placebo with its interval
  above 0) is a false one.
- twins: both groups draw their features from one distribution and the model never reads the group,
  so the expected excess over own-group twins is exactly 0.
"""

from __future__ import annotations

import numpy as np
from generators import mixed_frame, shifted_proxy_frame
from harness import proportion
from scipy import stats
from scipy.special import expit

from probe.flips import flip_test

SHIFT, CUT = 0.5, 0.3


class ProxyModel:
    """Approves ``p + u/2 >= CUT``; reads ``p`` and ``u`` only (never the group)."""

    feature_names = ("p", "u")

    def scores(self, frame):
        return expit(8.0 * (frame["p"].to_numpy() + 0.5 * frame["u"].to_numpy() - CUT))


class RegionModel(ProxyModel):
    """Also reads the categorical ``region`` of :func:`mixed_frame` (never the group)."""

    feature_names = ("p", "u", "region")

    def scores(self, frame):
        bump = 0.4 * (frame["region"].to_numpy() == "r0")
        return expit(8.0 * (frame["p"].to_numpy() + 0.5 * frame["u"].to_numpy() + bump - CUT))


class TwinModel:
    """A group-blind score on four columns of :func:`mixed_frame`."""

    feature_names = ("age", "income", "score", "channel")

    def scores(self, frame):
        z = ((frame["age"].to_numpy() - 42) / 12 + 2 * (np.log(frame["income"].to_numpy()) - 10)
             + np.nan_to_num(frame["score"].to_numpy() - 0.5, nan=0.0)
             + 0.5 * (frame["channel"].to_numpy() == "c0"))
        return expit(2 * z)


def true_transport_rate(shift=SHIFT) -> float:
    sd = np.sqrt(1.25)
    return float(stats.norm.cdf(CUT / sd) - stats.norm.cdf((CUT - shift) / sd))


def transport_coverage(runs=300, seed=0, *, n=3000):
    """Coverage of the truth by the flip-rate interval and by the excess interval (the placebo's
    population value is 0, so the excess estimates the same flip rate)."""
    truth = true_transport_rate()
    rate_hits = excess_hits = 0
    for s in range(seed, seed + runs):
        rng = np.random.default_rng(s)
        X = shifted_proxy_frame(rng, n, 0.6, SHIFT)
        (row,) = flip_test(ProxyModel(), X, "group", mode="transport", reference="dst",
                           proxies=["p"], rng=s).rows
        rate_hits += row.flip_rate.low <= truth <= row.flip_rate.high
        excess_hits += row.excess.low <= truth <= row.excess.high
    seeds = f"{seed}-{seed + runs - 1}"
    return [proportion(f"transport flip-rate interval covers the population-map rate ({n} rows)",
                       rate_hits, runs, ">= 0.93", seeds),
            proportion(f"transport excess interval covers the population-map rate ({n} rows)",
                       excess_hits, runs, ">= 0.93", seeds)]


def transport_chance_proxy(runs=300, seed=0, *, n=3000, categorical=False):
    """Runs with a finding (excess over the placebo, interval above 0) when the moved proxy (``p``;
    with ``categorical``, also the 6-level ``region``) is not associated with the group."""
    hits = 0
    model, proxies = (RegionModel(), ["p", "region"]) if categorical else (ProxyModel(), ["p"])
    for s in range(seed, seed + runs):
        rng = np.random.default_rng(s)
        X = shifted_proxy_frame(rng, n, 0.6, 0.0)
        (row,) = flip_test(model, X, "group", mode="transport", reference="dst",
                           proxies=proxies, rng=s).rows
        hits += row.judged_at(0.95).low > 0
    what = "numeric and categorical chance proxies" if categorical else "chance proxy"
    return [proportion(f"transport, {what}, blind model: runs with a finding ({n} rows)",
                       hits, runs, "<= 0.05", f"{seed}-{seed + runs - 1}")]


def transport_chance_categorical(runs=300, seed=0, *, n=3000):
    return transport_chance_proxy(runs, seed, n=n, categorical=True)


def twins_coverage(runs=300, seed=0, *, n=4000, source_share=0.9):
    """Coverage of the true 0 by the twins excess interval, the source group ``source_share`` of the
    rows (0.9: 9 times the other group, which sizes both pools)."""
    hits = 0
    for s in range(seed, seed + runs):
        rng = np.random.default_rng(s)
        X = mixed_frame(rng, n, 8)
        X["group"] = np.where(rng.random(n) < source_share, "src", "dst")
        (row,) = flip_test(TwinModel(), X, "group", mode="twins", reference="dst", rng=s).rows
        hits += row.excess.low <= 0 <= row.excess.high
    ratio = source_share / (1 - source_share)
    return [proportion(f"twins excess interval covers 0, source group {ratio:g}x the pool "
                       f"({n} rows)", hits, runs, ">= 0.93", f"{seed}-{seed + runs - 1}")]


SIMS = {"transport_coverage": transport_coverage,
        "transport_chance_proxy": transport_chance_proxy,
        "transport_chance_categorical": transport_chance_categorical,
        "twins_coverage": twins_coverage}
