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
REFINE_HALF_WIDTH = 0.08
LOG_DISPERSION_HALF_WIDTH = 10.0


def tweedie_loglik_obs(
    y: np.ndarray, mu: np.ndarray, power: float, dispersion: float, weights: np.ndarray | float = 1.0
) -> np.ndarray:
    """log f(y; mu, phi / w, p) per observation (natural log), 1 < p < 2."""
    family = sm.families.Tweedie(var_power=power, eql=False)
    return family.loglike_obs(np.asarray(y, dtype=float), np.asarray(mu, dtype=float),
                              var_weights=weights, scale=dispersion)


def ml_dispersion(
    y: np.ndarray, mu: np.ndarray, power: float, weights: np.ndarray | float = 1.0
) -> tuple[float, float]:
    """(phi, log-likelihood) maximising the Tweedie log-likelihood over phi at fixed means.

    Bounded Brent search on log phi within e^+-10 of the Pearson estimate sum w (y-mu)^2/mu^p / n.
    """
    pearson = float(np.mean(weights * (y - mu) ** 2 / mu**power))

    def negative_loglik(log_phi: float) -> float:
        return -float(np.sum(tweedie_loglik_obs(y, mu, power, float(np.exp(log_phi)), weights)))

    centre = np.log(pearson)
    found = scipy.optimize.minimize_scalar(
        negative_loglik,
        bounds=(centre - LOG_DISPERSION_HALF_WIDTH, centre + LOG_DISPERSION_HALF_WIDTH),
        method="bounded",
        options={"xatol": 1e-9},
    )
    return float(np.exp(found.x)), -float(found.fun)


def profile_power(
    mean_at: Callable[[float], np.ndarray], y: np.ndarray, weights: np.ndarray
) -> tuple[float, list[dict[str, float]]]:
    """Best power and the profile [{power, loglik, dispersion}] in ascending power.

    ``mean_at(p)`` returns the fitted row means of the GLM at power p. Grid 1.1..1.9 by 0.1, then
    by 0.02 within 0.08 of the best grid point (kept inside [1.1, 1.9]).
    """
    profile: dict[float, dict[str, float]] = {}

    def evaluate(power: float) -> None:
        if power not in profile:
            dispersion, loglik = ml_dispersion(y, mean_at(power), power, weights)
            profile[power] = {"power": power, "loglik": loglik, "dispersion": dispersion}

    for power in POWER_GRID:
        evaluate(power)
    coarse_best = max(profile.values(), key=lambda entry: entry["loglik"])["power"]
    steps = int(round(REFINE_HALF_WIDTH / REFINE_STEP))
    for k in range(-steps, steps + 1):
        power = round(coarse_best + k * REFINE_STEP, 10)
        if POWER_GRID[0] <= power <= POWER_GRID[-1]:
            evaluate(power)
    best = max(profile.values(), key=lambda entry: entry["loglik"])["power"]
    return best, [profile[power] for power in sorted(profile)]
