"""One-dimensional curve numerics for distillation: weighted isotonic regression and optimal
segmentation of a curve into contiguous bands.

Both work on a curve given at ordered points (grid values or ordered levels) with a positive
weight per point (the exposure the point stands for). They are pure functions with no I/O; loops
run over the points of the curve (at most a few hundred), never over policies.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from premiumlab._core.errors import InputError
from premiumlab._core.validators import ABOVE_ZERO, checked_array

#: Costs within this share of the curve's total sum of squares count as equal (fewer bands win).
COST_TIE_TOLERANCE = 1e-12


def _curve(values: np.ndarray, weights: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    y = checked_array("curve", values, unit="point")
    return y, checked_array("curve weights", weights, ABOVE_ZERO, y.size, unit="point")


def isotonic(values: np.ndarray, weights: np.ndarray, increasing: bool = True) -> np.ndarray:
    """Weighted least-squares fit that is monotone in point order (pool adjacent violators).

    Minimises sum_i w_i (y_i - f_i)^2 subject to f_1 <= ... <= f_n (or >= when decreasing);
    each pooled block takes its weighted mean sum(w y) / sum(w).

    Parameters
    ----------
    values : np.ndarray
        The curve y_i at its ordered points (finite).
    weights : np.ndarray
        Weight w_i of each point (> 0), e.g. the exposure it stands for.
    increasing : bool
        Fit a non-decreasing curve (True) or a non-increasing one (False).

    Returns
    -------
    np.ndarray
        The fitted f_i at each point, in the unit of `values`.

    Raises
    ------
    InputError
        When `values` or `weights` is not finite, a weight is not > 0, or their lengths differ.
    """
    y, w = _curve(values, weights)
    sign = 1.0 if increasing else -1.0
    means: list[float] = []
    totals: list[float] = []
    sizes: list[int] = []
    for value, weight in zip(sign * y, w):
        means.append(float(value))
        totals.append(float(weight))
        sizes.append(1)
        while len(means) > 1 and means[-2] > means[-1]:
            weight_sum = totals[-2] + totals[-1]
            means[-2] = (means[-2] * totals[-2] + means[-1] * totals[-1]) / weight_sum
            totals[-2] = weight_sum
            sizes[-2] += sizes[-1]
            del means[-1], totals[-1], sizes[-1]
    return sign * np.repeat(means, sizes)


@dataclass(frozen=True)
class Segmentation:
    """Contiguous segments of a curve: segment k holds points starts[k] .. starts[k+1]-1.

    cost: sum over points of w_i (y_i - mean of its segment)^2, in squared curve units x weight.
    """

    starts: np.ndarray
    cost: float

    @property
    def count(self) -> int:
        return len(self.starts)

    def labels(self, points: int) -> np.ndarray:
        """Segment index (0 .. count-1) of each of the `points` points."""
        return np.searchsorted(self.starts, np.arange(points), side="right") - 1


def _segment_cost_matrix(values: np.ndarray, weights: np.ndarray, min_weight: float) -> np.ndarray:
    """C[i, j] = within-segment weighted squared error of points i .. j-1 (i < j), +inf where the
    segment is empty or its weight falls below `min_weight`. Shape (n+1, n+1)."""
    y, w = _curve(values, weights)
    y = y - np.sum(w * y) / np.sum(w)  # centring keeps the prefix-sum differences accurate
    s0 = np.concatenate([[0.0], np.cumsum(w)])
    s1 = np.concatenate([[0.0], np.cumsum(w * y)])
    s2 = np.concatenate([[0.0], np.cumsum(w * y * y)])
    w_seg = s0[None, :] - s0[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        cost = (s2[None, :] - s2[:, None]) - (s1[None, :] - s1[:, None]) ** 2 / w_seg
    cost = np.maximum(cost, 0.0)
    upper = np.triu(np.ones_like(cost, dtype=bool), k=1)
    feasible = upper & (w_seg >= min_weight * (1.0 - 1e-12))
    return np.where(feasible, cost, np.inf)


def optimal_segmentation(
    values: np.ndarray, weights: np.ndarray, max_segments: int, min_share: float = 0.0
) -> Segmentation:
    """Exact dynamic programme: the contiguous segmentation into at most `max_segments` segments,
    each holding at least `min_share` of the total weight, that minimises the weighted squared error
    of the curve around the segment means.

    best[k][j] = min_i best[k-1][i] + C[i, j] over the first j points in k segments, O(K n^2).
    Among segment counts whose cost ties within COST_TIE_TOLERANCE of the total sum of squares the
    fewest segments win; among equal costs for one count each segment starts as early as it can.

    Parameters
    ----------
    values : np.ndarray
        The curve y_i at its ordered points (finite).
    weights : np.ndarray
        Weight w_i of each point (> 0), e.g. the exposure it stands for.
    max_segments : int
        Most segments K (>= 1; at most one per point).
    min_share : float
        Least share of the total weight per segment, in [0, 1].

    Returns
    -------
    Segmentation
        The first point of each segment (ascending, starting at 0) and the cost
        sum_i w_i (y_i - mean of its segment)^2.

    Raises
    ------
    InputError
        When `values` or `weights` is not finite, a weight is not > 0, their lengths differ,
        `max_segments` < 1 or `min_share` lies outside [0, 1].
    """
    y, w = _curve(values, weights)
    if max_segments < 1:
        raise InputError(f"max_segments: {max_segments} must be >= 1")
    if not 0.0 <= min_share <= 1.0:
        raise InputError(f"min_share: {min_share} must be between 0 and 1")
    n = y.size
    cost = _segment_cost_matrix(y, w, min_share * w.sum())
    segments = min(max_segments, n)
    best = np.full((segments + 1, n + 1), np.inf)
    best[0, 0] = 0.0
    arg = np.zeros((segments + 1, n + 1), dtype=np.int64)
    for k in range(1, segments + 1):
        total = best[k - 1][:, None] + cost
        arg[k] = np.argmin(total, axis=0)
        best[k] = total[arg[k], np.arange(n + 1)]
    finals = best[1:, n]
    tolerance = COST_TIE_TOLERANCE * max(float(cost[0, n]), 1e-300)  # one segment: the total sum of squares
    k_best = int(np.flatnonzero(finals <= finals.min() + tolerance)[0]) + 1
    starts = []
    j = n
    for k in range(k_best, 0, -1):
        i = int(arg[k, j])
        starts.append(i)
        j = i
    return Segmentation(starts=np.array(starts[::-1], dtype=np.int64), cost=float(finals[k_best - 1]))
