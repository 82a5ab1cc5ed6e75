import cProfile, pstats, numpy as np, sys
exec(open("perf2_tmp.py").read().split("with limited")[0])
for kw in ({}, {"weights": ws}):
    cProfile.run("Lattice(codes, levels, y, True, depth=3, min_rows=2500, pool=100, confidence_level=0.95, score_level=level, max_share=0.5, **kw).run()", "/tmp/prof2")
    pstats.Stats("/tmp/prof2").sort_stats("tottime").print_stats(14)
