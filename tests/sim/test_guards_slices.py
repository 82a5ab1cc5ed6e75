"""Fast guards of the slice search's level and power (the simulations of ``sim_slices.py`` with few
runs at small sizes). Each bound is one a correct method meets with high probability; the
probability is in the comment beside it (binomial tails at the target rate)."""

import sim_slices


def test_null_search_with_a_split_holds_its_level():
    figures = sim_slices.SIMS["null_split_2000"](runs=24, seed=500)
    for f in figures:
        # at a true rate of 5 %, P(6 or more alarms in 24) = 0.007 per metric (measured rate: see
        # the module's default run, well below 5 %)
        assert f.value * f.runs <= 5, f.row()


def test_null_search_without_a_split_holds_its_level():
    figures = sim_slices.SIMS["null_nosplit_2000"](runs=12, seed=700)
    for f in figures:
        # at a true rate of 5 %, P(4 or more alarms in 12) = 0.002 per metric
        assert f.value * f.runs <= 3, f.row()


def test_a_planted_slice_is_found():
    (f,) = sim_slices.SIMS["planted_10pt_2way"](runs=16, seed=900)
    # at a true power of 0.9, P(11 or fewer found in 16) = 0.017; the default run measures more
    assert f.value * f.runs >= 12, f.row()


def test_the_comparison_localises_a_worse_slice_and_stays_quiet_on_null_data():
    found, null = sim_slices.SIMS["compare"](runs=4, seed=300)
    # binomial tails (scipy.stats.binom): at power 0.9, P(2 or fewer found in 4) = 0.052; at a
    # level of 0.05, P(2 or more alarms in 4) = 0.014; the default run measures more
    assert found.value * found.runs >= 3, found.row()
    assert null.value * null.runs <= 1, null.row()


def test_the_exact_paired_test_holds_its_level_on_rare_discordance():
    for f in sim_slices.SIMS["ternary_level"](runs=500, seed=11):
        if f.what.startswith("exact"):  # the test the search uses on {-1, 0, 1} (Welch is not)
            # 100 draws: at a level of 5 %, P(13 or more) = 0.002
            assert f.value * f.runs <= 12, f.row()


def test_the_weighted_score_test_holds_its_level_and_the_naive_one_does_not_with_clusters():
    weights_1, weights_5, clusters, naive = sim_slices.SIMS["weighted_level"](runs=300, seed=21)
    for f in (weights_1, weights_5, clusters):
        # at a level of 5 %, P(25 or more of 300) = 0.009 (scipy.stats.binom.sf(24, 300, 0.05));
        # the default run (4,000 runs) measures 4.1 %, 4.2 % and 4.9 % (MC s.e. 0.3 points)
        assert f.value * f.runs <= 24, f.row()
    # rows as units ignore the intra-cluster correlation: 14.7 % in the default run; at a true
    # 13 %, P(20 or fewer of 300) = 0.0003
    assert naive.value * naive.runs >= 21, naive.row()


def test_the_weighted_search_holds_its_level_on_null_data():
    figures = sim_slices.SIMS["weighted_null"](runs=20, seed=900)
    for f in figures:
        # at a true rate of 5 %, P(5 or more alarms in 20) = 0.003 per metric (the normal
        # reference this replaced raised 6-17 %)
        assert f.value * f.runs <= 4, f.row()
