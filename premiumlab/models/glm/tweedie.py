"""Tweedie power by profile likelihood, with the true compound Poisson-Gamma density.

For 1 < p < 2 the response Y (a rate, with weight w) is a compound Poisson-Gamma variable:
N ~ Poisson(lam), lam = w mu^(2-p) / (phi (2-p)); Y | N = n ~ Gamma(n alpha, scale phi (p-1) mu^(p-1) / w),
alpha = (2-p)/(p-1); P(Y = 0) = exp(-lam). Its log density (Dunn and Smyth's series, the one
statsmodels' ``Tweedie(eql=False)`` evaluates) is

    log f(y; mu, phi / w, p) = (w / phi) (y mu^(1-p) / (1-p) - mu^(2-p) / (2-p)) + [y > 0] a(y, phi / w, p)
    a(y, s, p) = log Phi(-k, 0, x) - log y,  k = (2-p)/(1-p),  x = ((p-1) s / y)^k / ((2-p) s)

with Phi the Wright Bessel function (``scipy.special.log_wright_bessel``). The first term is linear
in (w y, w) at a given mean, so over the rows of one cell (one mean) it sums to
(N mu^(1-p)/(1-p) - W mu^(2-p)/(2-p)) / phi with N, W the cell's sums of w y and w; the second does
not depend on the mean and is zero for rows without a loss. The profile therefore needs the cells'
sums and the rows with a loss only. Over phi, log x of every row moves by the same (k-1) d log phi, so
while the dispersion is searched at one power the rows' sum of log Phi is read from one cubic spline
of log Phi in log x (SERIES_KNOTS exact values across the rows' range; relative error of the sum of
order 1e-12 on the demo's book, tested to 1e-9). The extended quasi-likelihood is infinite at zero losses and is
not used.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import scipy.interpolate
import scipy.optimize
import scipy.special
import scipy.stats

POWER_BOUNDS = (1.1, 1.9)
POWER_TOLERANCE = 0.005
INTERVAL_TOLERANCE = 0.001
INTERVAL_LEVEL = 0.95
INTERVAL_DROP = float(scipy.stats.chi2.ppf(INTERVAL_LEVEL, 1) / 2.0)  # 1.92: the profile likelihood interval
LOG_DISPERSION_HALF_WIDTH = 3.0
LOG_DISPERSION_TOLERANCE = 1e-4
MAX_BRACKET_SHIFTS = 5
SERIES_KNOTS = 4096


def loss_term(y: np.ndarray, scale: np.ndarray, power: float) -> np.ndarray:
    """a(y, s, p) = log Phi(-k, 0, x) - log y of the module docstring, for y > 0.

    Parameters
    ----------
    y : np.ndarray
        Observed rates, > 0.
    scale : np.ndarray
        phi / w of each row.
    power : float
        Variance power p, 1 < p < 2.

    Returns
    -------
    np.ndarray
        The mean-free part of log f per row.
    """
    k = (2.0 - power) / (1.0 - power)
    x = ((power - 1.0) * scale / y) ** k / ((2.0 - power) * scale)
    return scipy.special.log_wright_bessel(-k, 0.0, x) - np.log(y)


def tweedie_loglik_obs(
    y: np.ndarray, mu: np.ndarray, power: float, dispersion: float, weights: np.ndarray | float = 1.0
) -> np.ndarray:
    """log f(y; mu, phi / w, p) per observation (natural log), 1 < p < 2.

    f is the compound Poisson-Gamma density of the module docstring: log P(Y = 0) = -lam with
    lam = w mu^(2-p) / (phi (2-p)), and `loss_term` added for y > 0.

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
    y, mu = np.broadcast_arrays(np.asarray(y, dtype=float), np.asarray(mu, dtype=float))
    scale = np.broadcast_to(dispersion / np.asarray(weights, dtype=float), y.shape)
    out = (y * mu ** (1.0 - power) / (1.0 - power) - mu ** (2.0 - power) / (2.0 - power)) / scale
    loss = y > 0
    out[loss] += loss_term(y[loss], scale[loss], power)
    return out


@dataclass(frozen=True)
class TweedieBook:
    """What the Tweedie log-likelihood of a GLM's rows needs when rows of one cell share a mean:
    per cell the sums of w y, w, w y^2 and the rows; the rate and weight of every row with a loss."""

    cell_numerator: np.ndarray  # sum of w y (money)
    cell_weight: np.ndarray  # sum of w (exposure units)
    cell_numerator_squared: np.ndarray  # sum of w y^2
    n_rows: int
    loss_rate: np.ndarray  # y of the rows with y > 0
    loss_weight: np.ndarray  # w of those rows

    def loglik(self, mu: np.ndarray, power: float, dispersion: float) -> float:
        """sum over rows of log f(y; mu, phi / w, p) (the module docstring's sum by cell).

        Parameters
        ----------
        mu : np.ndarray
            Mean of each cell, > 0, in the units of y.
        power : float
            Variance power p, 1 < p < 2.
        dispersion : float
            phi > 0.

        Returns
        -------
        float
            The rows' log-likelihood.
        """
        return self._mean_part(mu, power) / dispersion + self._loss_part(power, dispersion)

    def _mean_part(self, mu: np.ndarray, power: float) -> float:
        """phi x the first term, summed: sum over cells of N mu^(1-p)/(1-p) - W mu^(2-p)/(2-p)."""
        return float(
            np.sum(
                self.cell_numerator * mu ** (1.0 - power) / (1.0 - power)
                - self.cell_weight * mu ** (2.0 - power) / (2.0 - power)
            )
        )

    def _loss_part(self, power: float, dispersion: float) -> float:
        return float(np.sum(loss_term(self.loss_rate, dispersion / self.loss_weight, power)))

    def ml_dispersion(self, mu: np.ndarray, power: float) -> tuple[float, float]:
        """(phi, log-likelihood) maximising the log-likelihood over phi at fixed cell means.

        Bounded Brent search on log phi (to 1e-4, a log-likelihood error of order 1e-8 per row) within
        e^+-3 of the Pearson estimate sum w (y-mu)^2/mu^p / n, the bracket moved while the maximum
        lies on its edge. The series of the rows with a loss is read from `LossSeries` (the module
        docstring), built once per bracket.

        Parameters
        ----------
        mu : np.ndarray
            Fitted mean of each cell, > 0.
        power : float
            Variance power p, 1 < p < 2.

        Returns
        -------
        tuple[float, float]
            The maximum-likelihood dispersion phi and the log-likelihood there.
        """
        mean_part = self._mean_part(mu, power)

        def negative_loglik(log_phi: float, series: LossSeries) -> float:
            return -(mean_part / np.exp(log_phi) + series(log_phi))

        pearson = self.cell_numerator_squared - 2.0 * mu * self.cell_numerator + mu**2 * self.cell_weight
        centre = float(np.log(np.sum(pearson / mu**power) / self.n_rows))
        for _ in range(MAX_BRACKET_SHIFTS):
            low, high = centre - LOG_DISPERSION_HALF_WIDTH, centre + LOG_DISPERSION_HALF_WIDTH
            found = scipy.optimize.minimize_scalar(
                negative_loglik,
                bounds=(low, high),
                args=(LossSeries.build(self.loss_rate, self.loss_weight, power, (low, high)),),
                method="bounded",
                options={"xatol": LOG_DISPERSION_TOLERANCE},
            )
            centre = float(found.x)
            if low + 10 * LOG_DISPERSION_TOLERANCE < centre < high - 10 * LOG_DISPERSION_TOLERANCE:
                break
        return float(np.exp(centre)), -float(found.fun)


@dataclass(frozen=True)
class LossSeries:
    """The rows' sum of `loss_term` at one power as a function of log phi, read from a cubic spline
    of log Phi(-k, 0, x) in log x: log x_i = offset_i + (k-1) log phi (module docstring)."""

    offsets: np.ndarray  # log x of each row with a loss at phi = 1
    slope: float  # k - 1
    log_rate_sum: float  # sum of log y over those rows
    spline: scipy.interpolate.CubicSpline

    @classmethod
    def build(
        cls, rate: np.ndarray, weight: np.ndarray, power: float, log_phi_range: tuple[float, float]
    ) -> LossSeries:
        """The spline over the log x the rows reach while log phi stays in `log_phi_range`.

        Parameters
        ----------
        rate : np.ndarray
            y of the rows with a loss, > 0.
        weight : np.ndarray
            w of those rows, > 0.
        power : float
            Variance power p, 1 < p < 2.
        log_phi_range : tuple[float, float]
            The range of log phi the series will be read at.

        Returns
        -------
        LossSeries
            The rows' offsets and the spline on SERIES_KNOTS equally spaced knots in log x.
        """
        k = (2.0 - power) / (1.0 - power)
        offsets = k * np.log(power - 1.0) - np.log(2.0 - power) + (1.0 - k) * np.log(weight) - k * np.log(rate)
        shifts = sorted((k - 1.0) * end for end in log_phi_range)
        knots = np.linspace(offsets.min() + shifts[0], offsets.max() + shifts[1], SERIES_KNOTS)
        spline = scipy.interpolate.CubicSpline(knots, scipy.special.log_wright_bessel(-k, 0.0, np.exp(knots)))
        return cls(offsets, k - 1.0, float(np.sum(np.log(rate))), spline)

    def __call__(self, log_phi: float) -> float:
        """sum of loss_term over the rows at phi = exp(log_phi) (within the range it was built on)."""
        return float(np.sum(self.spline(self.offsets + self.slope * log_phi))) - self.log_rate_sum


@dataclass(frozen=True)
class PowerProfile:
    """The chosen power, its profile likelihood interval, and every power tried."""

    power: float
    interval: tuple[float, float]
    points: list[dict[str, float]]  # {power, loglik, dispersion}, ascending in power

    @property
    def interval_at_bounds(self) -> list[float]:
        """The searched range's bounds that the interval reaches (the likelihood may stay high beyond)."""
        return [bound for bound, end in zip(POWER_BOUNDS, self.interval) if end == bound]


def profile_power(mean_at: Callable[[float], np.ndarray], book: TweedieBook) -> PowerProfile:
    """Best power by profile likelihood and its 95 % profile likelihood interval.

    The profile log-likelihood at p is l(p) = max over phi of sum_i log f(y_i; mu_i(p), phi / w_i, p)
    (`TweedieBook.ml_dispersion`). Its maximum over POWER_BOUNDS (1.1 .. 1.9) is found by bounded
    Brent search (``scipy.optimize.minimize_scalar``, to POWER_TOLERANCE = 0.005 in p); the interval
    is {p : l(p) >= max l - chi2(1, 0.95) / 2}, each end found by ``scipy.optimize.brentq`` (to
    INTERVAL_TOLERANCE = 0.001) between the best power and the nearest power tried whose likelihood is below
    that level, or the bound of the range when none is (the end is then that bound).

    Parameters
    ----------
    mean_at : callable
        p -> fitted mean of each cell of `book` (same units as y) of the GLM refitted at power p.
    book : TweedieBook
        The rows' sufficient statistics.

    Returns
    -------
    PowerProfile
        The power with the largest profile log-likelihood among those tried, the interval, and every
        power tried with its log-likelihood and dispersion.
    """
    profile: dict[float, dict[str, float]] = {}

    def loglik(power: float) -> float:
        power = float(power)
        if power not in profile:
            dispersion, value = book.ml_dispersion(mean_at(power), power)
            profile[power] = {"power": power, "loglik": value, "dispersion": dispersion}
        return profile[power]["loglik"]

    scipy.optimize.minimize_scalar(
        lambda power: -loglik(power), bounds=POWER_BOUNDS, method="bounded", options={"xatol": POWER_TOLERANCE}
    )
    best = max(profile, key=lambda power: profile[power]["loglik"])
    level = profile[best]["loglik"] - INTERVAL_DROP
    ends = []
    for bound in POWER_BOUNDS:
        beyond = [
            power for power in profile if (power - best) * (bound - best) > 0 and profile[power]["loglik"] < level
        ]
        outer = min(beyond, key=lambda power: abs(power - best)) if beyond else bound
        if outer == bound and loglik(bound) >= level:
            ends.append(bound)
            continue
        low, high = sorted((best, outer))
        ends.append(
            float(scipy.optimize.brentq(lambda power: loglik(power) - level, low, high, xtol=INTERVAL_TOLERANCE))
        )
    return PowerProfile(best, (min(ends), max(ends)), [profile[power] for power in sorted(profile)])
