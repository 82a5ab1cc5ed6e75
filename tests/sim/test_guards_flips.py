"""Fast guards of the flip-test levels (the simulations of ``sim_flips.py`` with few runs at small
sizes). Each bound is one a correct method meets with high probability; the probabilities are
binomial tails at the target rate (``scipy.stats.binom``), worked out in the comments."""

from sim_flips import transport_chance_proxy, transport_coverage, twins_coverage


def test_transport_flip_rate_interval_covers_the_population_map_rate():
    # 40 runs of 1,200 rows: at the target coverage 0.93, 33 or more covering has probability
    # binom.sf(32, 40, 0.93) = 0.994; the interval measured 0.95 on 300 runs (sim_flips)
    rate, _ = transport_coverage(runs=40, seed=1000, n=1200)
    assert rate.value * 40 >= 33


def test_transport_chance_proxy_gives_few_findings():
    # 40 runs of 1,200 rows: at the target rate 0.05, at most 5 findings has probability
    # binom.cdf(5, 40, 0.05) = 0.986 (measured 0.007 on 300 runs of 3,000 rows)
    (found,) = transport_chance_proxy(runs=40, seed=2000, n=1200)
    assert found.value * 40 <= 5


def test_twins_excess_interval_covers_zero_when_the_group_is_nine_times_the_pool():
    # 20 runs of 1,500 rows: at the target coverage 0.93, 17 or more covering has probability
    # binom.sf(16, 20, 0.93) = 0.953; measured 1.00 on 300 runs of 4,000 rows
    (cover,) = twins_coverage(runs=20, seed=3000, n=1500)
    assert cover.value * 20 >= 17
