"""Optimal segmentation (premiumlab.segment) against brute force over every segmentation.

Reference: exhaustive enumeration of all contiguous segmentations of small curves (n <= 10 points,
at most 4 segments), computed independently here with plain loops; invented random curves.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from premiumlab._core.errors import InputError
from premiumlab.tabulation.segment import optimal_segmentation


def _direct_cost(y: np.ndarray, w: np.ndarray, starts: list[int]) -> float:
    """Sum of w (y - segment mean)^2, segment by segment, with no prefix sums."""
    bounds = [*list(starts), len(y)]
    total = 0.0
    for a, b in zip(bounds[:-1], bounds[1:]):
        mean = np.sum(w[a:b] * y[a:b]) / np.sum(w[a:b])
        total += float(np.sum(w[a:b] * (y[a:b] - mean) ** 2))
    return total


def _brute_force(y: np.ndarray, w: np.ndarray, max_segments: int, min_share: float) -> float:
    n = len(y)
    best = np.inf
    for cuts in range(max_segments):
        for inner in itertools.combinations(range(1, n), cuts):
            starts = [0, *inner]
            bounds = [*starts, n]
            if any(w[a:b].sum() < min_share * w.sum() - 1e-15 for a, b in zip(bounds[:-1], bounds[1:])):
                continue
            best = min(best, _direct_cost(y, w, starts))
    return best


@pytest.mark.parametrize("seed", range(60))
def test_segmentation_equals_brute_force(seed: int) -> None:
    """DP optimum equals the exhaustive optimum to 1e-10 (absolute, costs of order 1); the returned
    segmentation is valid (<= max segments, each >= the minimum share) and its directly computed cost
    equals the reported cost to 1e-10."""
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 11))
    max_segments = int(rng.integers(1, 5))
    min_share = float(rng.choice([0.0, 0.05, 0.15, 0.3]))
    y = np.cumsum(rng.normal(size=n)) if seed % 2 else rng.normal(size=n)
    w = rng.uniform(0.1, 2.0, n)
    seg = optimal_segmentation(y, w, max_segments, min_share)
    assert 1 <= seg.count <= max_segments
    bounds = [*list(seg.starts), n]
    assert bounds[0] == 0 and all(a < b for a, b in zip(bounds[:-1], bounds[1:]))
    for a, b in zip(bounds[:-1], bounds[1:]):
        assert w[a:b].sum() >= min_share * w.sum() - 1e-12
    assert seg.cost == pytest.approx(_direct_cost(y, w, list(seg.starts)), abs=1e-10)
    assert seg.cost == pytest.approx(_brute_force(y, w, max_segments, min_share), abs=1e-10)


def test_step_curve_is_recovered_exactly() -> None:
    """A curve that is a three-step function is cut at its steps with zero cost (abs 1e-12), and
    with max 8 segments still uses 3 (fewest segments win ties)."""
    y = np.array([0.0, 0.0, 0.0, 0.5, 0.5, 1.2, 1.2, 1.2, 1.2])
    seg = optimal_segmentation(y, np.ones(9), max_segments=8, min_share=0.0)
    assert seg.starts.tolist() == [0, 3, 5]
    assert seg.cost == pytest.approx(0.0, abs=1e-12)
    assert seg.labels(9).tolist() == [0, 0, 0, 1, 1, 2, 2, 2, 2]


def test_minimum_share_forces_pooling_of_a_thin_end() -> None:
    """A jump at the last point carrying 5 % of the weight cannot be its own band when each band must
    hold 10 %: the best valid cut is checked against brute force (abs 1e-12)."""
    y = np.array([0.0, 0.1, 0.2, 0.3, 2.0])
    w = np.array([0.3, 0.3, 0.2, 0.15, 0.05])
    seg = optimal_segmentation(y, w, max_segments=2, min_share=0.10)
    assert seg.starts.tolist() != [0, 4]
    assert seg.cost == pytest.approx(_brute_force(y, w, 2, 0.10), abs=1e-12)


def test_bad_curve_is_refused_with_the_point() -> None:
    with pytest.raises(InputError, match="point 2"):
        optimal_segmentation(np.array([0.0, 1.0, np.nan]), np.ones(3), 2)
    with pytest.raises(InputError, match=r"curve weights: 1 value\(s\) not > 0, first at point 1 \(value 0.0\)"):
        optimal_segmentation(np.zeros(3), np.array([1.0, 0.0, 1.0]), 2)
