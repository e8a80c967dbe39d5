"""Tweedie deviances of the model families: unit deviance, weighted mean deviance and D^2.

Power 0 is the normal family, 1 Poisson (frequency), 2 Gamma (severity), 1 < p < 2 compound
Poisson-Gamma (pure premium). Used to score fitted models (boosted-model cross-validation, holdout
metrics). Pure numpy functions without I/O; inputs are validated here (`premiumlab._core.validators`):
bad input raises `InputError` naming the argument and the first offending row.
"""

from __future__ import annotations

import numpy as np
from scipy.special import xlogy

from premiumlab._core.errors import InputError
from premiumlab._core.validators import (
    ABOVE_ZERO,
    AT_LEAST_ZERO,
    ArrayLike,
    checked_array,
    checked_arrays,
    checked_weights,
)


def _check_power(power: float) -> None:
    numeric = isinstance(power, (int, float, np.number)) and not isinstance(power, bool)
    if not numeric or not np.isfinite(power) or power < 0 or 0 < power < 1:
        raise InputError(
            f"power: {power!r} is not a Tweedie power with a deviance here; use 0, 1, 1 < p < 2, 2 or p > 2"
        )


def _check_deviance_domain(y: np.ndarray, power: float, **predictions: np.ndarray) -> None:
    """Normal: any y, mu; Poisson and compound Poisson: y >= 0, mu > 0; Gamma and beyond: y, mu > 0."""
    if power == 0:
        return
    family = f"Tweedie power {power}"
    for name, mu in predictions.items():
        checked_array(name, mu, ABOVE_ZERO.because(family))
    checked_array("y", y, (AT_LEAST_ZERO if power < 2 else ABOVE_ZERO).because(family))


def checked_deviance_inputs(
    y: ArrayLike, weight: ArrayLike, power: float, **predictions: ArrayLike
) -> list[np.ndarray]:
    """[y, weight, *predictions] as float arrays, validated for the Tweedie deviance of `power`:
    finite, of one length, weights >= 0 with a positive total, y and predictions in the family's
    domain (see `unit_deviance`).

    Parameters
    ----------
    y : array-like of float
        Observed rates, one per row (e.g. claims per exposure unit, money per claim).
    weight : array-like of float
        Row weights w >= 0 (exposure units or claims), with sum(w) > 0.
    power : float
        Tweedie variance power: 0, 1, 1 < p < 2, 2 or p > 2.
    **predictions : array-like of float
        Predicted means mu, one array per model, named as they appear in messages.

    Returns
    -------
    list[np.ndarray]
        The float64 arrays [y, weight, *predictions], in that order.

    Raises
    ------
    InputError
        A power without a deviance here, arrays of different lengths, a non-finite value, a negative
        weight or a zero total weight, or y or a prediction outside the family's domain.
    """
    _check_power(power)
    arrays = checked_arrays(y=y, weight=weight, **predictions)
    checked_weights("weight", arrays[1])
    _check_deviance_domain(arrays[0], power, **dict(zip(predictions, arrays[2:])))
    return arrays


def unit_deviance_unchecked(y: np.ndarray, mu: np.ndarray, power: float) -> np.ndarray:
    """The formula of `unit_deviance` on arrays already validated (`checked_deviance_inputs`).

    Parameters
    ----------
    y : np.ndarray
        Observed rates, float64, in the family's domain.
    mu : np.ndarray
        Predicted means, float64, same length as `y`.
    power : float
        Tweedie variance power, already checked.

    Returns
    -------
    np.ndarray
        d(y, mu) per row, float64, >= 0 (the formulas of `unit_deviance`).
    """
    if power == 0:
        return (y - mu) ** 2
    if power == 1:
        return 2 * (xlogy(y, y / mu) - y + mu)
    if power == 2:
        return 2 * (np.log(mu / y) + y / mu - 1)
    return 2 * (
        np.power(y, 2 - power) / ((1 - power) * (2 - power))
        - y * np.power(mu, 1 - power) / (1 - power)
        + np.power(mu, 2 - power) / (2 - power)
    )


def unit_deviance(y: ArrayLike, mu: ArrayLike, power: float) -> np.ndarray:
    """Tweedie unit deviance d(y, mu) per row, >= 0 and 0 only where y = mu.

    power 0: (y - mu)^2; 1 (Poisson): 2 (y log(y/mu) - y + mu); 2 (Gamma): 2 (log(mu/y) + y/mu - 1);
    1 < p < 2 and p > 2: 2 (y^(2-p)/((1-p)(2-p)) - y mu^(1-p)/(1-p) + mu^(2-p)/(2-p)).
    Domain: any y and mu for power 0; y >= 0 and mu > 0 for powers below 2; y, mu > 0 from 2 on.

    Parameters
    ----------
    y : array-like of float
        Observed rates, one per row.
    mu : array-like of float
        Predicted means, one per row.
    power : float
        Tweedie variance power: 0, 1, 1 < p < 2, 2 or p > 2.

    Returns
    -------
    np.ndarray
        d(y, mu) per row, float64.

    Raises
    ------
    InputError
        A power without a deviance here, arrays of different lengths, a non-finite value, or y or
        mu outside the domain.
    """
    _check_power(power)
    y_arr, mu_arr = checked_arrays(y=y, mu=mu)
    _check_deviance_domain(y_arr, power, mu=mu_arr)
    return unit_deviance_unchecked(y_arr, mu_arr, power)


def mean_deviance(y: ArrayLike, mu: ArrayLike, weight: ArrayLike, power: float) -> float:
    """Weighted mean unit deviance: sum(w * d(y, mu)) / sum(w).

    Frequency: y = count/exposure, w = exposure, power 1; severity: y = amount/count, w = count,
    power 2; pure premium: y = amount/exposure, w = exposure, Tweedie power p.

    Parameters
    ----------
    y : array-like of float
        Observed rates, one per row.
    mu : array-like of float
        Predicted means, one per row.
    weight : array-like of float
        Row weights w >= 0 (exposure units or claims), with sum(w) > 0.
    power : float
        Tweedie variance power: 0, 1, 1 < p < 2, 2 or p > 2.

    Returns
    -------
    float
        sum(w d(y, mu)) / sum(w), >= 0; deviance per unit of weight.

    Raises
    ------
    InputError
        As `checked_deviance_inputs`.
    """
    y_arr, w_arr, mu_arr = checked_deviance_inputs(y, weight, power, mu=mu)
    return float(np.sum(w_arr * unit_deviance_unchecked(y_arr, mu_arr, power)) / np.sum(w_arr))


def d2(y: ArrayLike, mu: ArrayLike, weight: ArrayLike, power: float) -> float:
    """Share of deviance explained: 1 - D(y, mu) / D(y, ybar), ybar = sum(w y) / sum(w) (unitless).

    D(y, m) = sum(w d(y, m)) is the weighted total deviance and ybar the intercept-only model.

    Parameters
    ----------
    y : array-like of float
        Observed rates, one per row.
    mu : array-like of float
        Predicted means, one per row.
    weight : array-like of float
        Row weights w >= 0 (exposure units or claims), with sum(w) > 0.
    power : float
        Tweedie variance power: 0, 1, 1 < p < 2, 2 or p > 2.

    Returns
    -------
    float
        D^2, at most 1 (1: a perfect fit; 0: no better than ybar; negative: worse than ybar).

    Raises
    ------
    InputError
        As `checked_deviance_inputs`, or every weighted row equal to ybar (null deviance 0).
    """
    y_arr, w_arr, mu_arr = checked_deviance_inputs(y, weight, power, mu=mu)
    y_mean = np.full_like(y_arr, np.sum(w_arr * y_arr) / np.sum(w_arr))
    null = np.sum(w_arr * unit_deviance_unchecked(y_arr, y_mean, power))
    if null <= 0:
        raise InputError("y: every weighted row equals the mean, so D^2 is undefined (null deviance 0)")
    return float(1 - np.sum(w_arr * unit_deviance_unchecked(y_arr, mu_arr, power)) / null)
