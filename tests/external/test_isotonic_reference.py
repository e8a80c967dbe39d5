"""The isotonic step of distillation against scikit-learn.

Reference: scikit-learn's `sklearn.isotonic.IsotonicRegression` with `sample_weight` (a general-
purpose reference library), on invented random curves with ties and both directions.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.isotonic import IsotonicRegression

from premiumlab.tabulation.segment import isotonic


@pytest.mark.parametrize("seed", range(40))
@pytest.mark.parametrize("increasing", [True, False])
def test_isotonic_equals_sklearn_with_weights(seed: int, increasing: bool) -> None:
    """Weighted pool-adjacent-violators equals sklearn's fit, point by point, to 1e-12 (absolute)."""
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 120))
    y = rng.normal(size=n) + (0.02 if increasing else -0.02) * np.arange(n)
    if seed % 3 == 0:
        y = np.round(y, 1)  # ties in the curve values
    w = rng.uniform(0.01, 5.0, n)
    ours = isotonic(y, w, increasing=increasing)
    reference = IsotonicRegression(increasing=increasing).fit_transform(np.arange(n, dtype=float), y, sample_weight=w)
    np.testing.assert_allclose(ours, reference, rtol=0, atol=1e-12)


def test_isotonic_on_a_hand_example() -> None:
    """Values 1, 3, 2, 4 with weights 1, 1, 3, 1: the violators 3 and 2 pool to
    (3*1 + 2*3) / 4 = 2.25, so the fit is 1, 2.25, 2.25, 4 (hand arithmetic; sklearn agrees to 1e-12)."""
    y, w = np.array([1.0, 3.0, 2.0, 4.0]), np.array([1.0, 1.0, 3.0, 1.0])
    np.testing.assert_allclose(isotonic(y, w), [1.0, 2.25, 2.25, 4.0], atol=1e-12)
    np.testing.assert_allclose(
        IsotonicRegression().fit_transform(np.arange(4.0), y, sample_weight=w), [1.0, 2.25, 2.25, 4.0], atol=1e-12
    )
