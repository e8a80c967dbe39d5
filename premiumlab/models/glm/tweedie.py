"""Tweedie power by profile likelihood on the rows, with the true compound Poisson-Gamma density.

For 1 < p < 2 the response Y (a rate, with weight w) is a compound Poisson-Gamma variable:
N ~ Poisson(lam), lam = w mu^(2-p) / (phi (2-p)); Y | N = n ~ Gamma(n alpha, scale phi (p-1) mu^(p-1) / w),
alpha = (2-p)/(p-1); P(Y = 0) = exp(-lam). The density is statsmodels' ``Tweedie(eql=False)``
(series in the Wright Bessel function, evaluated only on positive responses; zeros in closed form).
The extended quasi-likelihood is infinite at zero losses and is not used.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import scipy.optimize
import statsmodels.api as sm

POWER_GRID = tuple(round(1.0 + step / 10.0, 10) for step in range(1, 10))  # 1.1 .. 1.9
REFINE_STEP = 0.02
LOG_DISPERSION_HALF_WIDTH = 3.0
LOG_DISPERSION_TOLERANCE = 1e-4
MAX_BRACKET_SHIFTS = 5


def tweedie_loglik_obs(
    y: np.ndarray, mu: np.ndarray, power: float, dispersion: float, weights: np.ndarray | float = 1.0
) -> np.ndarray:
    """log f(y; mu, phi / w, p) per observation (natural log), 1 < p < 2.

    f is the compound Poisson-Gamma density of the module docstring: P(Y = 0) = exp(-lam) with
    lam = w mu^(2-p) / (phi (2-p)), and a series for y > 0.

    Parameters
    ----------
    y : np.ndarray
        Observed rates, >= 0 (e.g. money per exposure unit).
    mu : np.ndarray
        Means, > 0, in the units of `y`.
    power : float
        Variance power p, 1 < p < 2.
    dispersion : float
        phi > 0.
    weights : np.ndarray or float
        Weights w > 0 (e.g. exposure units); the variance of a row is phi mu^p / w.

    Returns
    -------
    np.ndarray
        log f per observation.
    """
    family = sm.families.Tweedie(var_power=power, eql=False)
    return family.loglike_obs(
        np.asarray(y, dtype=float), np.asarray(mu, dtype=float), var_weights=weights, scale=dispersion
    )


def ml_dispersion(
    y: np.ndarray, mu: np.ndarray, power: float, weights: np.ndarray | float = 1.0
) -> tuple[float, float]:
    """(phi, log-likelihood) maximising the Tweedie log-likelihood over phi at fixed means.

    Bounded Brent search on log phi (to 1e-4, a log-likelihood error of order 1e-8 per row) within
    e^+-3 of the Pearson estimate sum w (y-mu)^2/mu^p / n, the bracket moved while the maximum
    lies on its edge.

    Parameters
    ----------
    y : np.ndarray
        Observed rates, >= 0.
    mu : np.ndarray
        Fitted means, > 0.
    power : float
        Variance power p, 1 < p < 2.
    weights : np.ndarray or float
        Weights w > 0 (e.g. exposure units).

    Returns
    -------
    tuple[float, float]
        The maximum-likelihood dispersion phi and the log-likelihood sum(log f) there.
    """

    def negative_loglik(log_phi: float) -> float:
        return -float(np.sum(tweedie_loglik_obs(y, mu, power, float(np.exp(log_phi)), weights)))

    centre = float(np.log(np.mean(weights * (y - mu) ** 2 / mu**power)))
    for _ in range(MAX_BRACKET_SHIFTS):
        low, high = centre - LOG_DISPERSION_HALF_WIDTH, centre + LOG_DISPERSION_HALF_WIDTH
        found = scipy.optimize.minimize_scalar(
            negative_loglik, bounds=(low, high), method="bounded", options={"xatol": LOG_DISPERSION_TOLERANCE}
        )
        centre = float(found.x)
        if low + 10 * LOG_DISPERSION_TOLERANCE < centre < high - 10 * LOG_DISPERSION_TOLERANCE:
            break
    return float(np.exp(centre)), -float(found.fun)


def profile_power(
    mean_at: Callable[[float], np.ndarray], y: np.ndarray, weights: np.ndarray
) -> tuple[float, list[dict[str, float]]]:
    """Best power and the profile [{power, loglik, dispersion}] in ascending power.

    ``mean_at(p)`` returns the fitted row means of the GLM at power p. Grid 1.1..1.9 by 0.1, then
    steps of 0.02 from the best grid point in each direction while the likelihood rises (the
    grid points either side bound a unimodal profile's maximum).

    The profile log-likelihood at p is max over phi of sum_i log f(y_i; mu_i(p), phi / w_i, p)
    (`ml_dispersion`).

    Parameters
    ----------
    mean_at : callable
        p -> fitted row means (same units as `y`) of the GLM refitted at variance power p.
    y : np.ndarray
        Observed rates, >= 0 (money per exposure unit).
    weights : np.ndarray
        Weights w > 0 (exposure units).

    Returns
    -------
    tuple[float, list[dict[str, float]]]
        The power with the largest profile log-likelihood, and every power tried with its
        log-likelihood and dispersion, ascending in power.
    """
    profile: dict[float, dict[str, float]] = {}

    def loglik(power: float) -> float:
        if power not in profile:
            dispersion, value = ml_dispersion(y, mean_at(power), power, weights)
            profile[power] = {"power": power, "loglik": value, "dispersion": dispersion}
        return profile[power]["loglik"]

    coarse_best = max(POWER_GRID, key=loglik)
    for direction in (-1, 1):
        power = coarse_best
        while True:
            step = round(power + direction * REFINE_STEP, 10)
            if step in POWER_GRID or not POWER_GRID[0] < step < POWER_GRID[-1] or loglik(step) <= loglik(power):
                break
            power = step
    best = max(profile, key=lambda power: profile[power]["loglik"])
    return best, [profile[power] for power in sorted(profile)]
