"""Fast guard of the verdict's error rate (the full figure: ``python tests/sim/run.py policy``)."""

from sim_policy import at_the_bound


def test_a_model_at_every_bound_rarely_fails_the_policy():
    # 30 runs at 6,000 rows; a correct method fails in at most 5 % of runs, so 6 or more failures
    # happen with probability <= P(Binomial(30, 0.05) >= 6) = 0.0033
    overall = at_the_bound(runs=30, seed=1000, n=6000)[0]
    assert overall.value * overall.runs <= 5
