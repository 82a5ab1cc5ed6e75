"""The slice search under a sampling design: weights, clusters and membership probabilities."""

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.weightstats import DescrStatsW

from probe.design import Design, Membership
from probe.encode import encode_columns
from probe.errors import DataError, PlanError
from probe.slices import find_slices, search_slices
from probe.slices.bounds import search_level
from probe.slices.lattice import Lattice
from probe.slices.sample import split_mask
from probe.stats import newcombe_interval
from scenarios._build.predicates import slice_mask


def _data(seed=0, n=6000):
    r = np.random.default_rng(seed)
    X = pd.DataFrame({"a": r.choice(list("xyz"), n), "b": r.choice(list("uv"), n),
                      "c": r.normal(size=n)})
    y = r.random(n) < 0.5
    plant = ((X.a == "x") & (X.b == "u")).to_numpy()
    wrong = r.random(n) < np.where(plant, 0.3, 0.1)
    return X, y, y ^ wrong, r


def test_a_plain_design_gives_the_unweighted_result_exactly():
    X, y, pred, _ = _data()
    ref = find_slices(X, y, pred, depth=2).to_dict()
    assert find_slices(X, y, pred, depth=2, sample_weight=np.ones(len(X))).to_dict() == ref
    assert find_slices(X, y, pred, depth=2, design=Design(weights=np.ones(len(X)))).to_dict() == ref
    # weights of 0 leave rows out: the same as the unweighted run on the other rows
    w = (np.arange(len(X)) % 7 != 0).astype(float)
    keep = w > 0
    ref = find_slices(X[keep].reset_index(drop=True), y[keep], pred[keep], depth=2).to_dict()
    assert find_slices(X, y, pred, depth=2, sample_weight=w).to_dict() == ref
    diff = np.random.default_rng(1).choice([-1.0, 0.0, 1.0], len(X), p=[.1, .8, .1])
    ref = search_slices(X, diff, depth=2).to_dict()
    assert search_slices(X, diff, depth=2, sample_weight=np.ones(len(X))).to_dict() == ref


def test_weighted_rates_equal_statsmodels_weighted_means_on_the_slice_rows():
    X, y, pred, r = _data(2)
    w = r.choice([0.5, 1.0, 3.0], len(X))
    res = find_slices(X, y, pred, depth=2, sample_weight=w, split=False)
    err = (y != pred).astype(float)
    assert res.found
    for s in res.found:
        m = slice_mask(X, [dict(p) for p in s.predicates])
        # the weighted mean of the outcome (statsmodels.stats.weightstats.DescrStatsW.mean)
        inside, rest = DescrStatsW(err[m], weights=w[m]).mean, DescrStatsW(err[~m], weights=w[~m]).mean
        assert s.rate.value == pytest.approx(inside, rel=1e-12)
        assert s.gap.value == pytest.approx(inside - rest, rel=1e-12)
        assert s.weight == pytest.approx(w[m].sum(), rel=1e-12)
        assert s.share == pytest.approx(w[m].sum() / w.sum(), rel=1e-12)
        assert s.rows == m.sum() and s.rate.n_effective is not None
    overall = DescrStatsW(err, weights=w).mean
    assert res.overall.value == pytest.approx(overall, rel=1e-12)


def test_integer_weights_give_the_point_estimates_of_duplicated_rows():
    X, y, pred, r = _data(3, n=3000)
    k = r.integers(1, 4, len(X))
    res = find_slices(X, y, pred, depth=2, sample_weight=k, split=False)
    rep = np.repeat(np.arange(len(X)), k)  # brute force: every row k times
    Xd, err = X.iloc[rep].reset_index(drop=True), (y != pred)[rep].astype(float)
    assert res.found
    for s in res.found:
        m = slice_mask(Xd, [dict(p) for p in s.predicates])
        assert s.rate.value == pytest.approx(err[m].mean(), rel=1e-12)
        assert s.gap.value == pytest.approx(err[m].mean() - err[~m].mean(), rel=1e-12)
        assert s.effect_ratio.value == pytest.approx(err[m].mean() / err[~m].mean(), rel=1e-12)
        assert s.events == pytest.approx(err[m].sum(), rel=1e-12)
        assert s.share == pytest.approx(m.mean(), rel=1e-12)


def test_equal_weights_keep_the_unweighted_intervals():
    # a constant weight c: the linearisation variance is p (1 - p) / n, so the effective counts are
    # the counts and every Wilson / Newcombe interval is the unweighted one (statsmodels-free check
    # against probe's own plain run, whose intervals test_slices.py checks against statsmodels)
    X, y, pred, _ = _data(4)
    plain = find_slices(X, y, pred, depth=2, split=False)
    twice = find_slices(X, y, pred, depth=2, split=False, sample_weight=np.full(len(X), 2.0))
    assert [s.label for s in twice.found][:1] == [s.label for s in plain.found][:1]
    a, b = plain.found[0], twice.found[0]
    for e, f in ((a.rate, b.rate), (a.gap, b.gap), (a.effect_ratio, b.effect_ratio)):
        assert (f.value, f.low, f.high) == pytest.approx((e.value, e.low, e.high), rel=1e-9)
    assert b.rate.n_effective == pytest.approx(a.rows, rel=1e-9)


def test_the_split_keeps_every_cluster_on_one_side():
    r = np.random.default_rng(5)
    cluster = r.integers(0, 400, 5000)
    est = split_mask(5000, None, cluster, 0.5, r)
    for c in np.unique(cluster):
        assert len(np.unique(est[cluster == c])) == 1
    assert 150 < len(np.unique(cluster[est])) < 250
    # end to end: the estimate part's clusters are recorded, and each slice's
    X, y, pred, r = _data(6)
    cl = r.integers(0, 800, len(X))
    res = find_slices(X, y, pred, depth=2, design=Design(weights=r.choice([1.0, 2.0], len(X)),
                                                         cluster=cl))
    assert res.settings["units"] == "clusters"
    assert 300 < res.settings["clusters_estimated"] < 500
    assert res.found and all(0 < s.clusters <= res.settings["clusters_estimated"]
                             for s in res.found)
    assert "clusters" in res.found[0].to_dict() and "weight" in res.found[0].to_dict()


@pytest.mark.parametrize("kwargs, message", [
    (dict(sample_weight=np.ones(10), design=Design()), "not both"),
    (dict(sample_weight=np.ones(9)), "has 9 values"),
    (dict(sample_weight=-np.ones(10)), "10 negative values"),
    (dict(sample_weight=np.r_[np.nan, np.ones(9)]), "1 missing or infinite"),
    (dict(sample_weight=np.zeros(10)), "zero on every row"),
    (dict(design="weights"), "must be a probe.Design"),
    (dict(design=Design(cluster=np.arange(9))), "clusters have 9 values"),
])
def test_bad_weights_and_designs_are_refused_in_one_line(kwargs, message):
    X = pd.DataFrame({"a": list("xyxyxyxyxy")})
    with pytest.raises((DataError, PlanError), match=message) as err:
        find_slices(X, np.ones(10, bool), np.ones(10, bool), **kwargs)
    assert "\n" not in str(err.value)


def test_a_planted_slice_is_found_under_weights():
    # the weights over-represent the rows outside the planted slice; it is still the top slice
    X, y, pred, r = _data(7, n=8000)
    plant = ((X.a == "x") & (X.b == "u")).to_numpy()
    w = np.where(plant, 0.5, 1.0) * r.choice([1.0, 4.0], len(X))
    res = find_slices(X, y, pred, depth=2, sample_weight=w)
    assert res.found[0].label == "a = x and b = u" and res.found[0].q_value < 0.05


def test_a_planted_group_known_only_by_probability_is_found():
    r = np.random.default_rng(8)
    n = 8000
    X = pd.DataFrame({"a": r.choice(list("xyz"), n), "c": r.normal(size=n)})
    in_b = r.random(n) < 0.3
    p_b = np.clip(np.where(in_b, 0.85, 0.1) + r.normal(0, 0.05, n), 0, 1)
    m = Membership("race", ("a", "b"), ("p_a", "p_b"), np.column_stack([1 - p_b, p_b]))
    y = r.random(n) < 0.5
    pred = y ^ (r.random(n) < np.where(in_b, 0.3, 0.1))
    res = find_slices(X, y, pred, depth=2, design=Design(membership={"race": m}))
    top = res.found[0]
    assert top.label == "race = b" and top.predicates[0] == {"column": "race", "op": "==",
                                                           "value": "b"}
    assert top.q_value < 0.05 and top.rate.n_effective is not None
    # the point estimate is the probability-weighted rate (brute force over the estimate part is
    # not reachable from outside; without a split the rows are all of them)
    res = find_slices(X, y, pred, depth=1, design=Design(membership={"race": m}), split=False)
    s = next(s for s in res.found if s.label == "race = b")
    err = (y != pred).astype(float)
    assert s.rate.value == pytest.approx(np.sum(p_b * err) / np.sum(p_b), rel=1e-12)
    assert s.weight == pytest.approx(p_b.sum(), rel=1e-12)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_the_weighted_bound_prunes_exactly_and_the_score_uses_effective_counts(seed):
    r = np.random.default_rng(seed)
    n = 4000
    X = pd.DataFrame({"a": r.choice(list("pqrs"), n, p=[0.4, 0.3, 0.2, 0.1]),
                      "b": r.choice(list("uv"), n), "c": r.normal(size=n),
                      "d": r.integers(0, 50, n), "e": r.choice(["k", "l", None], n)})
    # a low-risk half (b = v) whose refinements the bound can rule out
    risk = np.where(X.b == "v", 0.02, 0.15 + 0.25 * (X.a == "r") * (X.c > 0.5))
    err = (r.random(n) < risk).astype(np.uint8)
    w = r.choice([0.8, 1.0, 1.25], n)  # the bound allows for the lightest row: a narrow range prunes
    enc = encode_columns(X)
    codes, levels = [c.codes for c in enc.columns], [c.n_levels for c in enc.columns]
    level = search_level(0.95, levels, 3)
    runs = [Lattice(codes, levels, err, True, depth=3, min_rows=30, pool=8, confidence_level=0.95,
                    score_level=level, max_share=0.5, prune=prune, weights=w).run()
            for prune in (False, True)]
    full, pruned = runs[0][0], runs[1][0]
    assert [c.score for c in pruned] == pytest.approx([c.score for c in full], rel=1e-12)
    # the bound did prune (less than without weights: it allows for the lightest row)
    assert runs[1][2] < 0.97 * runs[0][2]
    # the top score is Newcombe's lower limit on the weighted rates, each over its rows divided
    # by the table's Kish design effect (the search ranks on it; brute force here)
    top = full[0]
    mask = np.ones(len(X), dtype=bool)
    for c, lv in zip(top.cols, top.levels):
        mask &= codes[c] == lv
    deff = n * (w * w).sum() / w.sum() ** 2
    p_in, p_out = (np.average(err[m], weights=w[m]) for m in (mask, ~mask))
    n_in, n_out = mask.sum() / deff, (~mask).sum() / deff
    low, _ = newcombe_interval(p_in * n_in, n_in, p_out * n_out, n_out, confidence_level=level)
    assert top.score == pytest.approx(float(low), rel=1e-9)


def test_the_weighted_bootstrap_resamples_units():
    X, y, pred, r = _data(10, n=3000)
    cl = r.integers(0, 300, len(X))
    res = find_slices(X, y, pred, depth=2, interval="bootstrap",
                      design=Design(weights=r.choice([1.0, 2.0], len(X)), cluster=cl))
    s = res.found[0]
    assert s.rate.method == "bootstrap-percentile" and s.rate.low < s.rate.value < s.rate.high
    assert s.rate_at(0.5).high - s.rate_at(0.5).low < s.rate.high - s.rate.low


def test_the_command_line_passes_the_design_to_the_slice_search(tmp_path):
    import io
    import json

    from rich.console import Console

    from probe.cli import main

    X, y, pred, r = _data(11, n=4000)
    w = r.choice([1.0, 3.0], len(X))
    path = tmp_path / "h.csv"
    X.assign(y=y.astype(int), score=np.where(pred, 0.9, 0.1), w=w).to_csv(path, index=False)
    out = tmp_path / "r.json"
    console = Console(file=io.StringIO(), width=120, color_system=None)
    code = main(["slices", "--model", "column:score", "--data", str(path), "--label", "y",
                 "--weights", "w", "--depth", "2", "--json", str(out), "--quiet"], console=console)
    assert code == 0
    top = json.loads(out.read_text())["slices"]["found"][0]
    assert top["label"] == "a = x and b = u"
    assert top["rate"]["n_effective"] > 0 and top["weight"] > top["rows"]
