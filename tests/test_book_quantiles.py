"""Band edges found in passes over chunks equal `bands.quantile_edges` on the whole column.

Reference: numpy's weighted inverted-CDF quantile, through `quantile_edges` (whose own check against
`numpy.quantile(..., weights=, method="inverted_cdf")` is in tests/test_data.py). Invented columns:
heavy ties, continuous values with negatives and -0.0, a value that dominates the weight, integer
weights (exact sums, so ties of the cumulative share with k / n_bands are met exactly).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from premiumlab.book.bands import quantile_edges
from premiumlab.book.quantiles import _sortable_keys, book_quantile_edges


def _chunked(values: np.ndarray, weights: np.ndarray, size: int):
    return lambda: ((values[i : i + size], weights[i : i + size]) for i in range(0, len(values), size))


def _columns(kind: str, rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
    if kind == "ties":
        return rng.integers(17, 95, n).astype(float), rng.uniform(0.05, 1.0, n)
    if kind == "continuous":
        values = rng.normal(0.0, 1e4, n)
        values[:50] = -0.0
        return values, rng.uniform(0.05, 1.0, n)
    if kind == "dominant":
        values = np.where(rng.uniform(size=n) < 0.7, 40.0, rng.lognormal(3.0, 1.0, n))
        return values, rng.uniform(0.05, 1.0, n)
    return rng.integers(0, 12, n).astype(float), rng.integers(1, 4, n).astype(float)  # integer weights


@pytest.mark.parametrize("kind", ["ties", "continuous", "dominant", "integer-weights"])
@pytest.mark.parametrize("n_bands", [2, 3, 8, 20])
def test_passes_give_the_edges_of_the_whole_column(kind, n_bands):
    rng = np.random.default_rng(n_bands * 31 + len(kind))
    values, weights = _columns(kind, rng, 30_011)
    expected = quantile_edges(values, weights, n_bands)
    assert expected.size >= 1
    for size in (30_011, 4_096, 997):
        np.testing.assert_array_equal(book_quantile_edges(_chunked(values, weights, size), n_bands), expected)


def test_sortable_keys_sort_as_the_values():
    values = np.array([-np.inf, -1e300, -2.5, -1e-300, -0.0, 0.0, 1e-300, 3.0, 1e300, np.inf])
    keys = _sortable_keys(values)
    assert (np.diff(keys.astype(object)) >= 0).all() and keys[4] == keys[5]
    rng = np.random.default_rng(1)
    sample = rng.normal(0, 1e6, 10_000)
    np.testing.assert_array_equal(np.argsort(_sortable_keys(sample), kind="stable"), np.argsort(sample, kind="stable"))


def test_a_single_value_and_zero_weights():
    values = np.full(100, 7.0)
    assert book_quantile_edges(_chunked(values, np.ones(100), 30), 4).size == 0
    with pytest.raises(ValueError, match="weights sum to zero"):
        book_quantile_edges(_chunked(values, np.zeros(100), 30), 4)


def test_a_share_that_reaches_the_quantile_exactly_is_not_moved_by_summation_order():
    """Values 2, 1, 3 with weights 0.2, 0.3, 0.1: the weight at or below 1 is exactly half (0.3 of
    0.6), so the median edge is the next value, 2. In floating point 0.3 / (0.3 + 0.2 + 0.1) is
    0.49999999999999994 and the chunked sums differ in the last bit; before `SHARE_TOLERANCE` the
    two functions gave 2 and 3."""
    values, weights = np.array([2.0, 1.0, 3.0]), np.array([0.2, 0.3, 0.1])
    np.testing.assert_array_equal(quantile_edges(values, weights, 2), [2.0])
    for size in (1, 2, 3):
        np.testing.assert_array_equal(book_quantile_edges(_chunked(values, weights, size), 2), [2.0])


# derandomize: a fixed example set, so that CI is repeatable.
@settings(max_examples=300, deadline=None, derandomize=True)
@given(data=st.data(), n_bands=st.integers(2, 12), size=st.integers(1, 40))
def test_random_columns_give_the_same_edges_in_passes(data, n_bands, size):
    """Property (hypothesis): any finite values (few distinct ones, so ties are common) and positive
    weights, read in chunks of any size, give `quantile_edges`' edges."""
    n = data.draw(st.integers(1, 200))
    pool = data.draw(st.lists(st.floats(-1e12, 1e12, allow_nan=False), min_size=1, max_size=30))
    values = np.array(data.draw(st.lists(st.sampled_from(pool), min_size=n, max_size=n)))
    weights = np.array(
        data.draw(st.lists(st.one_of(st.integers(1, 5).map(float), st.floats(1e-3, 1e3)), min_size=n, max_size=n))
    )
    np.testing.assert_array_equal(
        book_quantile_edges(_chunked(values, weights, size), n_bands), quantile_edges(values, weights, n_bands)
    )
