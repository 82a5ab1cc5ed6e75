"""Shared fixtures: the invented scenarios, built once into the cache.

The suite runs on two workers (pytest-xdist, ``-n 2`` in pyproject); each test process keeps its
native thread pools (BLAS, OpenMP) at one thread, so the two never oversubscribe two cores.
"""

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")  # read by native libraries when they load (and by children)

import pytest  # noqa: E402


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
