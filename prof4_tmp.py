import cProfile, pstats, numpy as np, sys, time
sys.path.insert(0, "tests/perf")
from test_perf_slices import _frame
from probe.slices import search_slices
n = 1_000_000
frame, outcome = _frame(n)
w = np.random.default_rng(1).lognormal(0, 0.7, n)
pr = cProfile.Profile(time.process_time)
pr.runcall(lambda: search_slices(frame, outcome, depth=3, sample_weight=w))
st = pstats.Stats(pr); st.sort_stats("tottime").print_stats(22)
pr = cProfile.Profile(time.process_time)
pr.runcall(lambda: search_slices(frame, outcome, depth=3))
st = pstats.Stats(pr); st.sort_stats("tottime").print_stats(12)
