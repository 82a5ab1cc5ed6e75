import time, numpy as np, sys
sys.path.insert(0, "tests/perf")
from test_perf_slices import _frame
import time
def _best_of(k, fn):
    b=1e9
    for _ in range(k):
        t=time.process_time(); out=fn(); b=min(b,time.process_time()-t)
    return b, out
from probe.encode import encode_columns
from probe.slices.lattice import Lattice
from probe.slices.bounds import search_level
from probe.threads import limited
n = 1_000_000
frame, outcome = _frame(n)
w = np.random.default_rng(1).lognormal(0, 0.7, n)
enc = encode_columns(frame)
rows = np.random.default_rng(0).random(n) < 0.5
codes = [c.codes[rows] for c in enc.columns]; levels=[c.n_levels for c in enc.columns]
y = outcome[rows].astype(np.uint8); ws = w[rows]
level = search_level(0.95, levels, 3)
with limited():
  for i in range(2):
    for kw in ({}, {"weights": ws}):
        t, out = _best_of(4, lambda: Lattice(codes, levels, y, True, depth=3, min_rows=2500, pool=100, confidence_level=0.95, score_level=level, max_share=0.5, **kw).run())
        print(bool(kw), round(t,3), out[1], out[2])
