"""Shared fixtures: the invented scenarios, built once into the cache.

The suite runs on two workers (pytest-xdist, ``-n 2`` in pyproject); each test process keeps its
native thread pools (BLAS, OpenMP) at one thread, so the two never oversubscribe two cores.
"""

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")  # read by native libraries when they load (and by children)

import signal  # noqa: E402

import pytest  # noqa: E402

# A shell without job control starts a background command (`cmd &`) with SIGINT ignored, and
# children inherit that; the tests that interrupt a run (in this process or in a child) need the
# usual disposition, which the run's own code rightly leaves alone when its caller chose to ignore.
if signal.getsignal(signal.SIGINT) is signal.SIG_IGN:
    signal.signal(signal.SIGINT, signal.default_int_handler)


@pytest.fixture(scope="session")
def built():
    """``built(name)`` builds (or reuses) a scenario in the default cache and returns it."""
    from probe.scenarios import build_scenario

    cache = {}

    def get(name):
        if name not in cache:
            cache[name] = build_scenario(name)
        return cache[name]

    return get


@pytest.fixture(scope="session")
def slice_mask():
    """The scenarios' predicate evaluator (``scenarios/_build/predicates.py``)."""
    from probe.scenarios import scenario_module

    return scenario_module("_build.predicates").slice_mask
