"""Effect curves of a large book with their grid quantiles taken from a sample of the rows.

Reference: the same curve with the quantiles of every training row (`effect_curve` without
`grid_rows`). The partial dependence is computed exactly from the trees at each grid point and
each cell's exposure is summed over every row either way; only where the grid points fall moves.
Read as step functions over the book (each row takes the effect of its cell), the two curves must
agree within 0.01 on the log score, exposure-weighted mean absolute difference (about 1 % on a
relativity; a tolerance chosen here), and the cells' exposure must add up to the book's. The grids have 100 points (the
`[table] grid_points` default; measured gaps 0 for the driver's age, whose 68 values are all grid
points either way, and 0.003 for the score). The model is LightGBM fitted to an invented book
(40,000 rows; the sample 4,000).
"""

from __future__ import annotations

import numpy as np

from premiumlab.models.gbm.fit import fit_target
from premiumlab.models.trees.parser import Trees
from premiumlab.tabulation.effects import FactorValues, effect_curve, exposure_sample, grid_sample

from _builders import OPTIONS, invented_book

TOLERANCE = 0.01


def _step_effect(curve, values: np.ndarray) -> np.ndarray:
    """Each row's effect: that of the grid cell its value falls in."""
    return curve.effect[np.maximum(np.searchsorted(curve.points, values, side="right") - 1, 0)]


def test_grid_sample_is_seeded_and_leaves_a_small_book_whole():
    assert grid_sample(5000, 5000, seed=3) is None
    mask = grid_sample(50_000, 4000, seed=3)
    assert mask is not None and mask.sum() == 4000
    np.testing.assert_array_equal(mask, grid_sample(50_000, 4000, seed=3))


def test_curves_on_a_grid_sample_are_within_tolerance_of_the_whole_book_curves():
    features, inputs = invented_book(30_000, seed=11)
    model = fit_target(inputs, "frequency", OPTIONS)
    trees = Trees.from_text(model.model_text())
    sample = model.encode(features.iloc[exposure_sample(inputs.exposure, 2000, seed=4)])
    rows = grid_sample(len(features), 4000, seed=4)
    assert rows is not None
    for name in ("driver_age", "score"):
        factor = FactorValues(name, "none", features[name].to_numpy(dtype=float))
        feature = trees.feature_names.index(name)
        whole = effect_curve(trees, sample, feature, factor, inputs.exposure, 100)
        sampled = effect_curve(trees, sample, feature, factor, inputs.exposure, 100, rows)
        np.testing.assert_allclose(sampled.weight.sum(), whole.weight.sum(), rtol=1e-12)  # every row's exposure
        values = factor.values
        gap = np.average(np.abs(_step_effect(sampled, values) - _step_effect(whole, values)), weights=inputs.exposure)
        assert gap < TOLERANCE, (name, gap)
