"""Whole-factor Wald tests of a GLM: is a factor needed at all, all its levels at once?

A GLM JSON records, per factor, the estimates of its non-base levels and their covariance
(`factor_covariance`, docs/run-directory.md); the test needs nothing else, so the report runs it
without refitting the book.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg
import scipy.stats

from premiumlab._core.errors import InputError
from premiumlab._core.validators import checked_array


@dataclass(frozen=True)
class WaldTest:
    """A Wald chi-square test that a group of coefficients is zero.

    chi_square = b' V^-1 b; df = the number of coefficients; p_value = P(chi2(df) > chi_square).
    """

    chi_square: float
    df: int
    p_value: float


def factor_wald_test(estimates: np.ndarray | list, covariance: np.ndarray | list) -> WaldTest:
    """The Wald test that every coefficient of a factor (its non-base levels, log scale) is zero.

    Parameters
    ----------
    estimates : array-like
        The factor's k coefficients b (log relativities against the base level).
    covariance : array-like
        Their k x k covariance V, scaled by the dispersion (the same scale as the standard errors).

    Returns
    -------
    WaldTest
        chi_square = b' V^-1 b, df = k and the upper-tail chi-square p-value; the statistic
        statsmodels' `GLMResults.wald_test_terms` reports (chi-square form) for the factor's term.

    Raises
    ------
    InputError
        Estimates or covariance not finite, of mismatched shapes, or a covariance that is not
        positive definite.
    """
    b = checked_array("estimates", estimates)
    v = np.asarray(covariance, dtype=float)
    if v.shape != (len(b), len(b)) or not np.all(np.isfinite(v)):
        raise InputError(f"covariance: expected a finite {len(b)} x {len(b)} matrix, got shape {v.shape}")
    try:
        factor = scipy.linalg.cho_factor(v)
    except np.linalg.LinAlgError:
        raise InputError("covariance: not positive definite; the factor's Wald test is not defined") from None
    chi_square = float(b @ scipy.linalg.cho_solve(factor, b))
    return WaldTest(chi_square, len(b), float(scipy.stats.chi2.sf(chi_square, len(b))))
