"""Run a topic's simulations and print their figures: ``python tests/sim/run.py TOPIC [NAME ...]
[--runs N] [--seed S]`` (the topics are the ``sim_<topic>.py`` files beside this one)."""

from __future__ import annotations

import argparse
import importlib
import os
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent


def main(argv=None) -> int:
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, "1")
    sys.path[:0] = [str(HERE), str(HERE.parent.parent)]  # the harness, and this checkout's probe
    from harness import table

    topics = sorted(p.stem[4:] for p in HERE.glob("sim_*.py"))
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("topic", choices=topics)
    ap.add_argument("names", nargs="*", help="simulations to run (default: all of the topic's)")
    ap.add_argument("--runs", type=int, default=None, help="seeded runs per figure")
    ap.add_argument("--seed", type=int, default=0, help="first seed")
    args = ap.parse_args(argv)
    module = importlib.import_module(f"sim_{args.topic}")
    names = args.names or list(module.SIMS)
    figures = []
    for name in names:
        t0 = time.perf_counter()
        kw = {"seed": args.seed}
        if args.runs is not None:
            kw["runs"] = args.runs
        out = module.SIMS[name](**kw)
        figures.extend(out)
        print(f"{name}: {time.perf_counter() - t0:.0f} s", file=sys.stderr)
    print(table(figures))
    return 0 if all(f.met for f in figures) else 1


if __name__ == "__main__":
    sys.exit(main())
