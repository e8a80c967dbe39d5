"""Distillation of a boosted model into bands and a banded multiplicative refit.

1. Effect curves (`premiumlab.tabulation.effects`): partial dependence of the boosted model's raw
   (log) score on each factor over an exposure-weighted sample of policies, computed exactly from
   the trees, on an exposure-quantile grid (numeric) or the levels (categorical).
2. Banding (`premiumlab.tabulation.banding`): isotonic where a direction is promised, optimal
   segmentation of ordered factors, thin-level merging of unordered categoricals.
3. Refit (`premiumlab.tabulation.refit`): Poisson quasi-likelihood GLM on the banded cells with the
   two-way tables of the spec, bands of a promised factor pooled until every promise holds.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from premiumlab._core.errors import InputError
from premiumlab.book.spec import TableOptions
from premiumlab.models.trees.parser import Trees
from premiumlab.tabulation.banding import Banding, categorical_banding, numeric_banding
from premiumlab.tabulation.effects import Curve, FactorValues, effect_curve
from premiumlab.tabulation.refit import PooledRefit, pooled_refit


@dataclass
class Distillation:
    """Effect curves, the bandings they gave, and the pooled refit."""

    curves: dict[str, Curve]
    initial: dict[str, Banding]
    pooled: PooledRefit


def distil(
    model_text: str,
    sample: np.ndarray,
    factors: list[FactorValues],
    exposure: np.ndarray,
    response: np.ndarray,
    options: TableOptions,
) -> Distillation:
    """Curves -> bands -> pooled refit.

    Parameters
    ----------
    model_text : str
        The boosted model in LightGBM's text format.
    sample : np.ndarray
        The encoded sample matrix (columns in the model's feature order).
    factors : list[FactorValues]
        The spec's factors on the training rows.
    exposure, response : np.ndarray
        Exposure and boosted pure premium per exposure unit of the training rows.
    options : TableOptions
        The spec's [table] section: grid_points, max_bands, min_band_exposure (share of training
        exposure per band), interactions (two-way tables) and relativity_decimals (for the
        monotone check after rounding).

    Returns
    -------
    Distillation
        The curves, the bandings before pooling and the pooled refit.
    """
    trees = Trees.from_text(model_text)
    curves, bandings = {}, {}
    for factor in factors:
        if factor.name not in trees.feature_names:
            raise InputError(
                f"boosted model: factor '{factor.name}' is not one of its features ({', '.join(trees.feature_names)})"
            )
        curve = effect_curve(
            trees, sample, trees.feature_names.index(factor.name), factor, exposure, options.grid_points
        )
        curves[factor.name] = curve
        if factor.levels is None:
            bandings[factor.name] = numeric_banding(
                curve, factor.monotone, options.max_bands, options.min_band_exposure
            )
        else:
            bandings[factor.name] = categorical_banding(
                curve,
                factor.levels,
                factor.monotone,
                factor.ordered,
                options.max_bands,
                options.min_band_exposure,
                factor.base_level,
            )
    pooled = pooled_refit(
        bandings,
        {f.name: f.values for f in factors},
        list(options.interactions),
        exposure,
        response,
        options.relativity_decimals,
    )
    return Distillation(curves, bandings, pooled)
