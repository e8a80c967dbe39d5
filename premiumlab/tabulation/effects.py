"""Effect curves of a boosted model: the policy sample, the exposure-quantile grid, and the curves.

- Sample (`exposure_sample`): policies drawn with probability proportional to exposure, so a plain
  mean over the sample is an exposure-weighted mean.
- Grid (`quantile_grid`, `cell_exposure`): at most `points` exposure-weighted quantiles of the
  training values, q_k = the smallest value whose cumulative exposure share exceeds k / points,
  k = 0 .. points-1. Grid point g_i stands for the cell [g_i, g_{i+1}) (the first from -inf, the
  last to inf); its weight is the training exposure in that cell. On a large book the quantiles
  are taken from a uniform sample of the training rows (`grid_sample`), the cells' exposure
  still from every row.
- Curve (`effect_curve`): the exact partial dependence of the raw (log) score on one factor over
  the sample (`premiumlab.models.trees.partial_dependence`), known up to an additive constant.
  A factor whose training rows hold missing values has its effect at the missing value beside the
  curve (numeric: the partial dependence with the factor NaN, which the trees route their default
  way; categorical: at the model's code of the missing level), outside the grid and the level order.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from premiumlab.models.trees.parser import Trees
from premiumlab.models.trees.partial_dependence import partial_dependence
from rating_tables import MISSING_LABEL


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


def grid_sample(rows: int, size: int, seed: int) -> np.ndarray | None:
    """The training rows whose values a numeric factor's grid quantiles are taken from: None (every
    row) when there are at most `size`, else a mask of `size` rows drawn uniformly without
    replacement with numpy's generator seeded by `seed`.

    Parameters
    ----------
    rows : int
        Training rows.
    size : int
        Most rows to take them from (`[table] grid_rows`).
    seed : int
        Seed of the draw.

    Returns
    -------
    np.ndarray or None
        Boolean mask over the training rows, or None for all of them.
    """
    if rows <= size:
        return None
    mask = np.zeros(rows, dtype=bool)
    mask[np.random.default_rng(seed).choice(rows, size=size, replace=False)] = True
    return mask


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

    points: grid values (numeric) or indices into `labels` (categorical), never the missing value;
    effect: log score up to a constant (the same constant as `missing_effect`); weight: training
    exposure (> 0) of each point's cell or level. missing_effect and missing_weight: the effect at
    the missing value and the training exposure of the rows without a value (None and 0 when the
    training rows have none).
    """

    factor: str
    points: np.ndarray
    effect: np.ndarray
    weight: np.ndarray
    labels: tuple[str, ...] = ()
    missing_effect: float | None = None
    missing_weight: float = 0.0


@dataclass(frozen=True)
class FactorValues:
    """One factor on the training rows: numeric values (NaN where missing), or indices into
    `levels` (categorical; `MISSING_LABEL`, when the training rows hold missing values, is the last
    level).

    model_codes: the boosted model's encoding of each level (categorical; NaN for a missing level
    that the model reads as a missing number); ordered: bands follow the level order (numeric
    factors always); base_level: the spec's base level, if any.
    """

    name: str
    monotone: str
    values: np.ndarray
    levels: tuple[str, ...] | None = None
    model_codes: np.ndarray | None = None
    ordered: bool = True
    base_level: str | None = None


def effect_curve(
    trees: Trees,
    sample: np.ndarray,
    feature: int,
    factor: FactorValues,
    exposure: np.ndarray,
    grid_points: int,
    grid_rows: np.ndarray | None = None,
) -> Curve:
    """The factor's partial dependence on the log score over its grid (numeric) or its levels with
    training exposure (categorical), with the exposure each point stands for, and at the missing
    value when the training rows hold one.

    PD(v) = mean over the sample of the raw score with the factor set to v, computed exactly from
    the trees; v = NaN (numeric) or the missing level's code (categorical) gives the missing effect.

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
        Most grid points of a numeric factor (`quantile_grid`, on the values present).
    grid_rows : np.ndarray or None
        Mask of the training rows the numeric grid's quantiles are taken from (`grid_sample`);
        None: every row. The cells' exposure is always summed over every row.

    Returns
    -------
    Curve
        The points (grid values, or indices of the levels with exposure, the missing level apart),
        their effect on the log score (up to a constant), the training exposure each stands for,
        and the effect and exposure of the missing value (None and 0 without one).
    """
    if factor.levels is None:
        missing = np.isnan(factor.values)
        values, weights = factor.values[~missing], exposure[~missing]
        quantiled = ~missing if grid_rows is None else grid_rows & ~missing
        grid = quantile_grid(factor.values[quantiled], exposure[quantiled], grid_points)
        at = np.append(grid, np.nan) if missing.any() else grid
        effect = partial_dependence(trees, sample, feature, at)
        return Curve(
            factor.name,
            grid,
            effect[: grid.size],
            cell_exposure(grid, values, weights),
            missing_effect=float(effect[-1]) if missing.any() else None,
            missing_weight=float(exposure[missing].sum()),
        )
    weight = np.bincount(factor.values, weights=exposure, minlength=len(factor.levels))
    has_missing = factor.levels[-1] == MISSING_LABEL
    ordinary = len(factor.levels) - int(has_missing)
    present = np.flatnonzero(weight[:ordinary] > 0)
    assert factor.model_codes is not None, "a categorical factor carries the boosted model's code of each level"
    at = np.append(present, ordinary) if has_missing else present
    effect = partial_dependence(trees, sample, feature, factor.model_codes[at].astype(float))
    return Curve(
        factor.name,
        present,
        effect[: present.size],
        weight[present],
        factor.levels,
        missing_effect=float(effect[-1]) if has_missing else None,
        missing_weight=float(weight[ordinary]) if has_missing else 0.0,
    )
