"""Shared fixtures: the invented scenarios, built once into the cache."""

import pytest


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
