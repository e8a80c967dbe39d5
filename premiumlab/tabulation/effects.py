"""Effect curves of a boosted model: the policy sample, the exposure-quantile grid, and the curves.

- Sample (`exposure_sample`): policies drawn with probability proportional to exposure, so a plain
  mean over the sample is an exposure-weighted mean.
- Grid (`quantile_grid`, `cell_exposure`): at most `points` exposure-weighted quantiles of the
  training values, q_k = the smallest value whose cumulative exposure share exceeds k / points,
  k = 0 .. points-1. Grid point g_i stands for the cell [g_i, g_{i+1}) (the first from -inf, the
  last to inf); its weight is the training exposure in that cell.
- Curve (`effect_curve`): the exact partial dependence of the raw (log) score on one factor over
  the sample (`premiumlab.models.trees.partial_dependence`), known up to an additive constant.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from premiumlab.models.trees.parser import Trees
from premiumlab.models.trees.partial_dependence import partial_dependence


def exposure_sample(exposure: np.ndarray, size: int, seed: int) -> np.ndarray:
    """Row indices drawn with replacement with probability exposure / sum(exposure), seeded.

    Parameters
    ----------
    exposure : np.ndarray
        Exposure of each row (>= 0, positive total), in the book's exposure unit.
    size : int
        Number of draws (policies in the sample).
    seed : int
        Seed of numpy's default generator; the same seed gives the same sample.

    Returns
    -------
    np.ndarray
        `size` row indices into `exposure`, repeats allowed.
    """
    p = np.asarray(exposure, dtype=float)
    return np.random.default_rng(seed).choice(p.size, size=size, replace=True, p=p / p.sum())


def quantile_grid(values: np.ndarray, weights: np.ndarray, points: int) -> np.ndarray:
    """Distinct exposure-weighted quantiles q_k, k = 0 .. points-1: the smallest value whose cumulative
    weight share exceeds k / points (q_0 is the minimum).

    Parameters
    ----------
    values : np.ndarray
        The factor's value on each training row.
    weights : np.ndarray
        Exposure of each row (>= 0, positive total).
    points : int
        Most grid points wanted.

    Returns
    -------
    np.ndarray
        The distinct quantiles, ascending (float64); fewer than `points` where quantiles coincide.
    """
    order = np.argsort(values, kind="stable")
    v, w = np.asarray(values, dtype=float)[order], np.asarray(weights, dtype=float)[order]
    share = np.cumsum(w) / w.sum()
    idx = np.searchsorted(share, np.arange(points) / points, side="right")
    return np.unique(v[np.minimum(idx, v.size - 1)])


def cell_exposure(grid: np.ndarray, values: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Weight of each grid cell [g_i, g_{i+1}) (first cell from -inf, last to inf).

    Parameters
    ----------
    grid : np.ndarray
        Grid points g_0 < g_1 < ... (`quantile_grid`).
    values : np.ndarray
        The factor's value on each row.
    weights : np.ndarray
        Exposure of each row.

    Returns
    -------
    np.ndarray
        Sum of `weights` of the rows in each cell, one per grid point, in the unit of `weights`.
    """
    cell = np.maximum(np.searchsorted(grid, values, side="right") - 1, 0)
    return np.bincount(cell, weights=weights, minlength=grid.size)


@dataclass(frozen=True)
class Curve:
    """A factor's effect on the log score at ordered points, with the exposure each point stands for.

    points: grid values (numeric) or indices into `labels` (categorical); effect: log score up to a
    constant; weight: training exposure (> 0) of each point's cell or level.
    """

    factor: str
    points: np.ndarray
    effect: np.ndarray
    weight: np.ndarray
    labels: tuple[str, ...] = ()


@dataclass(frozen=True)
class FactorValues:
    """One factor on the training rows: numeric values, or indices into `levels` (categorical).

    model_codes: the boosted model's encoding of each level (categorical); ordered: bands follow
    the level order (numeric factors always); base_level: the spec's base level, if any.
    """

    name: str
    monotone: str
    values: np.ndarray
    levels: tuple[str, ...] | None = None
    model_codes: np.ndarray | None = None
    ordered: bool = True
    base_level: str | None = None


def effect_curve(
    trees: Trees, sample: np.ndarray, feature: int, factor: FactorValues, exposure: np.ndarray, grid_points: int
) -> Curve:
    """The factor's partial dependence on the log score over its grid (numeric) or its levels with
    training exposure (categorical), with the exposure each point stands for.

    PD(v) = mean over the sample of the raw score with the factor set to v, computed exactly from
    the trees.

    Parameters
    ----------
    trees : Trees
        The boosted model's trees (`premiumlab.models.trees.parser`).
    sample : np.ndarray
        The encoded exposure-weighted sample of policies (`exposure_sample`), columns in the model's
        feature order.
    feature : int
        The factor's column in `sample` (its index among the model's features).
    factor : FactorValues
        The factor on the training rows: numeric values, or level indices with the model's codes.
    exposure : np.ndarray
        Exposure of each training row, in the book's exposure unit.
    grid_points : int
        Most grid points of a numeric factor (`quantile_grid`).

    Returns
    -------
    Curve
        The points (grid values, or indices of the levels with exposure), their effect on the log
        score (up to a constant) and the training exposure each stands for.
    """
    if factor.levels is None:
        grid = quantile_grid(factor.values, exposure, grid_points)
        return Curve(
            factor.name,
            grid,
            partial_dependence(trees, sample, feature, grid),
            cell_exposure(grid, factor.values, exposure),
        )
    weight = np.bincount(factor.values, weights=exposure, minlength=len(factor.levels))
    present = np.flatnonzero(weight > 0)
    assert factor.model_codes is not None, "a categorical factor carries the boosted model's code of each level"
    effect = partial_dependence(trees, sample, feature, factor.model_codes[present].astype(float))
    return Curve(factor.name, present, effect, weight[present], factor.levels)
