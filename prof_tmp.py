import cProfile, pstats, numpy as np, sys
sys.path.insert(0, "tests/perf")
from test_perf_slices import _frame
from probe.slices import search_slices
n = 1_000_000
frame, outcome = _frame(n)
w = np.random.default_rng(1).lognormal(0, 0.7, n)
cProfile.run("search_slices(frame, outcome, depth=3, sample_weight=w)", "/tmp/prof")
pstats.Stats("/tmp/prof").sort_stats("cumulative").print_stats(25)
