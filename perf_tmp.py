import time, numpy as np, sys
sys.path.insert(0, "tests/perf")
from test_perf_slices import _frame
from probe.slices import search_slices
from probe.threads import limited
n = 1_000_000
frame, outcome = _frame(n)
w = np.random.default_rng(1).lognormal(0, 0.7, n)
def best(fn, k=5):
    b = np.inf
    for _ in range(k):
        t = time.process_time(); fn(); b = min(b, time.process_time() - t)
    return b
with limited():
    for i in range(2):
        p = best(lambda: search_slices(frame, outcome, depth=3))
        q = best(lambda: search_slices(frame, outcome, depth=3, sample_weight=w))
        print("cpu plain", round(p, 2), "weighted", round(q, 2), "ratio", round(q / p, 2))
