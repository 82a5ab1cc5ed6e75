import cProfile, pstats, numpy as np, sys
sys.path.insert(0, "tests/perf")
from test_perf_slices import _frame
from probe.slices import search_slices
n = 1_000_000
frame, outcome = _frame(n)
w = np.random.default_rng(1).lognormal(0, 0.7, n)
for kw in ({}, {"sample_weight": w}):
    cProfile.run("search_slices(frame, outcome, depth=3, **kw)", "/tmp/prof")
    st = pstats.Stats("/tmp/prof"); st.sort_stats("cumulative").print_stats("search.py:.*run|lattice.py.*run|estimate.py.*estimate|listing.py.*listed|encode_columns|_encoding|sample_rows|_take|carry|overall|split_mask|_search_iv|design_iv")
