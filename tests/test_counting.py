"""The counting engine: brute-force equality, additivity over row partitions, memory by observed cells."""

import tracemalloc

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from probe.counting import CellCounts, cell_keys, count_cells


def _brute(codes, values, weights):
    """A pandas groupby over the same rows: the independent reference."""
    frame = pd.DataFrame({f"c{j}": c for j, c in enumerate(codes)})
    known = (frame >= 0).all(axis=1)
    frame = frame[known]
    w = weights[known.to_numpy()]
    frame["_n"] = w
    for name, v in values.items():
        frame[name] = v[known.to_numpy()] * w
    return frame.groupby(list(frame.columns[: len(codes)]), sort=True).sum()


def _random(seed, n=500, levels=(3, 7, 2)):
    rng = np.random.default_rng(seed)
    codes = [rng.integers(-1, m, size=n) for m in levels]  # -1: missing
    values = {"err": rng.integers(0, 2, size=n).astype(float), "score": rng.random(n)}
    weights = rng.gamma(2.0, 1.0, size=n)
    return codes, values, weights


@pytest.mark.parametrize("seed", range(5))
def test_counts_equal_a_pandas_groupby(seed):
    codes, values, weights = _random(seed)
    got = count_cells(codes, values=values, weights=weights)
    ref = _brute(codes, values, weights)
    assert [tuple(c) for c in got.cells] == list(ref.index)
    np.testing.assert_allclose(got.n, ref["_n"].to_numpy())
    for name in values:
        np.testing.assert_allclose(got.sums[name], ref[name].to_numpy())


@settings(max_examples=60, deadline=None, derandomize=True)
@given(seed=st.integers(0, 10_000), cut=st.floats(0.0, 1.0))
def test_counts_of_two_parts_add_up_to_the_counts_of_all_rows(seed, cut):
    # the property that lets each partition of a large table be counted apart and summed
    codes, values, weights = _random(seed, n=300)
    k = int(cut * 300)
    part = lambda s: count_cells([c[s] for c in codes], values={n: v[s] for n, v in values.items()},  # noqa: E731
                                 weights=weights[s], n_levels=(3, 7, 2))
    merged = part(slice(0, k)).merge(part(slice(k, None)))
    whole = count_cells(codes, values=values, weights=weights, n_levels=(3, 7, 2))
    np.testing.assert_array_equal(merged.cells, whole.cells)
    np.testing.assert_allclose(merged.n, whole.n)
    for name in values:
        np.testing.assert_allclose(merged.sums[name], whole.sums[name])


def test_unweighted_counts_are_row_counts():
    c = count_cells([np.array([2, 0, 2, 2, -1])], values={"x": np.array([1, 0, 1, 0, 1])})
    assert c.cells.ravel().tolist() == [0, 2]
    assert c.n.tolist() == [1.0, 3.0] and c.sums["x"].tolist() == [0.0, 2.0]


def test_memory_follows_observed_cells_not_the_product_of_levels():
    # three 1,000-level columns: 10^9 possible cells, 4,000 observed; a dense table would need 8 GB
    rng = np.random.default_rng(0)
    codes = [rng.integers(0, 1000, size=4000) for _ in range(3)]
    tracemalloc.start()
    c = count_cells(codes, values={"x": np.ones(4000)}, n_levels=(1000, 1000, 1000))
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert len(c) == len({tuple(r) for r in np.column_stack(codes)})
    assert peak < 5 * 2**20, f"peak {peak / 2**20:.1f} MiB"


def test_cell_keys_mark_rows_with_a_missing_code():
    key, cells = cell_keys([np.array([0, 1, -1]), np.array([1, 1, 0])], (2, 2))
    assert key.tolist() == [0, 1, -1] and cells.tolist() == [[0, 1], [1, 1]]


def test_counts_are_read_only():
    c = count_cells([np.array([0, 1])], values={"x": np.array([1.0, 2.0])})
    assert isinstance(c, CellCounts)
    with pytest.raises(ValueError):
        c.n[0] = 5
