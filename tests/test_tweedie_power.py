"""The Tweedie density used to choose the power, and recovery of a known power.

Reference for the density: an independent compound Poisson-Gamma sum with scipy.stats,
f(y) = sum_n poisson.pmf(n, lam) gamma.pdf(y, n alpha, scale), lam = w mu^(2-p) / (phi (2-p)),
alpha = (2-p)/(p-1), scale = phi (p-1) mu^(p-1) / w, and P(Y = 0) = exp(-lam).
Second reference: statsmodels' ``Tweedie(eql=False).loglike_obs`` (Dunn and Smyth's series).
Recovery: an invented book drawn from that compound distribution with power 1.6. The search: the
chosen power against the fixed grid it replaced (1.1 .. 1.9 by 0.1, then steps of 0.02 from the best
grid point while the likelihood rises), each grid power's likelihood computed row by row with
statsmodels' density at the dispersion maximising it (scipy's bounded Brent search).
"""

from __future__ import annotations

import time

import numpy as np
import pandas as pd
import pytest
import scipy.optimize
import scipy.special
import scipy.stats
import statsmodels.api as sm

from premiumlab.models.glm.fit import GlmInputs, fit_pure_premium
from premiumlab.models.glm.tweedie import INTERVAL_DROP, INTERVAL_TOLERANCE, TweedieBook, tweedie_loglik_obs

TRUE_POWER = 1.6
TRUE_DISPERSION = 2.0


def compound_poisson_gamma_logpdf(y: float, mu: float, power: float, dispersion: float, weight: float) -> float:
    lam = weight * mu ** (2 - power) / (dispersion * (2 - power))
    if y == 0:
        return -lam
    alpha = (2 - power) / (power - 1)
    scale = dispersion * (power - 1) * mu ** (power - 1) / weight
    n = np.arange(1, 3_001)
    terms = scipy.stats.poisson.logpmf(n, lam) + scipy.stats.gamma.logpdf(y, n * alpha, scale=scale)
    assert terms[-1] < terms.max() - 50, "series truncated too early"
    return float(scipy.special.logsumexp(terms))


@pytest.mark.parametrize("power", [1.1, 1.35, 1.6, 1.9])
@pytest.mark.parametrize("mu, dispersion, weight", [(0.4, 0.8, 1.0), (3.0, 2.5, 0.3), (150.0, 40.0, 2.0)])
def test_density_equals_compound_poisson_gamma_sum(power, mu, dispersion, weight):
    """log f to 1e-10 absolute, zeros included (log P(Y=0) = -lam)."""
    ys = np.array([0.0, 1e-3, 0.05, 0.7, 2.0, 9.0, 60.0, 400.0])
    ours = tweedie_loglik_obs(ys, np.full(len(ys), mu), power, dispersion, np.full(len(ys), weight))
    expected = [compound_poisson_gamma_logpdf(y, mu, power, dispersion, weight) for y in ys]
    np.testing.assert_allclose(ours, expected, rtol=0, atol=1e-10)


def tweedie_book(n_rows: int = 20_000, seed: int = 16) -> GlmInputs:
    """Invented book: three factors, compound Poisson-Gamma amounts with power 1.6, dispersion 2."""
    rng = np.random.default_rng(seed)
    sizes = {"zone": 5, "construction": 3, "sum_insured_band": 4}
    factors, log_mu = {}, np.full(n_rows, np.log(0.8))
    for name, size in sizes.items():
        codes = rng.integers(0, size, n_rows)
        factors[name] = pd.Categorical.from_codes(codes, [f"{name}_{k}" for k in range(size)])
        log_mu += np.linspace(-0.4, 0.4, size)[codes]
    mu, exposure = np.exp(log_mu), rng.uniform(0.5, 1.5, n_rows)
    p, phi = TRUE_POWER, TRUE_DISPERSION
    count = rng.poisson(exposure * mu ** (2 - p) / (phi * (2 - p))).astype(float)
    scale = phi * (p - 1) * mu ** (p - 1) / exposure
    rate = np.where(count > 0, rng.gamma(np.maximum(count, 1) * (2 - p) / (p - 1), scale), 0.0)
    frame = pd.DataFrame(factors)
    return GlmInputs(frame, {name: frame[name].cat.categories[0] for name in frame}, exposure, count, rate * exposure)


def statsmodels_loglik(y, mu, power, dispersion, weight):
    family = sm.families.Tweedie(var_power=power, eql=False)
    return family.loglike_obs(y, mu, var_weights=weight, scale=dispersion)


@pytest.mark.parametrize("power", [1.1, 1.35, 1.6, 1.9])
def test_density_equals_statsmodels(power):
    """log f to 1e-10 absolute against statsmodels, on rates with and without a loss."""
    rng = np.random.default_rng(3)
    y = np.where(rng.random(400) < 0.3, rng.gamma(1.5, 40.0, 400), 0.0)
    mu, weight = rng.uniform(0.5, 60.0, 400), rng.uniform(0.1, 3.0, 400)
    ours = tweedie_loglik_obs(y, mu, power, 7.5, weight)
    np.testing.assert_allclose(ours, statsmodels_loglik(y, mu, power, 7.5, weight), rtol=0, atol=1e-10)


def test_the_book_sums_equal_the_rows_sum():
    """TweedieBook.loglik from cell sums and the rows with a loss equals the sum of the row
    densities (statsmodels) to 1e-10 relative; the dispersion search's likelihood (the series read
    from a spline) equals it to 1e-9 relative at the maximum it finds."""
    rng = np.random.default_rng(4)
    n, n_cells = 5_000, 40
    cell = rng.integers(0, n_cells, n)
    weight = rng.uniform(0.2, 1.5, n)
    numerator = np.where(rng.random(n) < 0.1, rng.gamma(2.0, 300.0, n), 0.0)
    cell_mu = rng.uniform(20.0, 80.0, n_cells)
    loss = numerator > 0
    book = TweedieBook(
        cell_numerator=np.bincount(cell, numerator, n_cells),
        cell_weight=np.bincount(cell, weight, n_cells),
        cell_numerator_squared=np.bincount(cell, numerator**2 / weight, n_cells),
        n_rows=n,
        loss_rate=numerator[loss] / weight[loss],
        loss_weight=weight[loss],
    )
    for power, dispersion in ((1.2, 50.0), (1.55, 120.0), (1.85, 400.0)):
        rows = statsmodels_loglik(numerator / weight, cell_mu[cell], power, dispersion, weight).sum()
        assert book.loglik(cell_mu, power, dispersion) == pytest.approx(rows, rel=1e-10)
    phi, best = book.ml_dispersion(cell_mu, 1.5)  # the series read from its spline: to 1e-9
    assert best == pytest.approx(book.loglik(cell_mu, 1.5, phi), rel=1e-9)
    for nearby in (phi * 0.999, phi * 1.001):
        assert book.loglik(cell_mu, 1.5, nearby) < best


def test_auto_power_recovers_the_simulated_power():
    """auto picks 1.6 +- 0.1, inside its interval, whose ends are where the profile falls 1.92
    (chi2(1, 0.95) / 2) below its maximum; the ML dispersion there is 2.0 +- 10 %; under 20 s on 20,000 rows."""
    inputs = tweedie_book()
    started = time.perf_counter()
    result = fit_pure_premium(inputs, power="auto")
    elapsed = time.perf_counter() - started
    assert result.power == pytest.approx(TRUE_POWER, abs=0.1)
    best = max(result.power_profile, key=lambda entry: entry["loglik"])
    assert best["power"] == result.power
    assert best["dispersion"] == pytest.approx(TRUE_DISPERSION, rel=0.1)
    powers = [entry["power"] for entry in result.power_profile]
    assert powers == sorted(powers) and all(1.1 <= power <= 1.9 for power in powers)
    low, high = result.power_interval  # narrow on 20,000 rows (1.600..1.613); 1.6 is just outside it
    assert low < result.power < high and high - low < 0.05
    level = best["loglik"] - INTERVAL_DROP
    for entry in result.power_profile:  # the ends to INTERVAL_TOLERANCE
        if low + INTERVAL_TOLERANCE < entry["power"] < high - INTERVAL_TOLERANCE:
            assert entry["loglik"] >= level
        elif not low - INTERVAL_TOLERANCE <= entry["power"] <= high + INTERVAL_TOLERANCE:
            assert entry["loglik"] < level
    assert any("profile likelihood interval" in note for note in result.notes)
    assert elapsed < 20.0


def old_grid_power(inputs: GlmInputs) -> float:
    """The argmax of the fixed grid the search replaced, row by row with statsmodels' density."""
    y = inputs.claim_amount / inputs.exposure

    def loglik(power: float) -> float:
        mu = fit_pure_premium(inputs, power=power).predict(inputs.factors)
        found = scipy.optimize.minimize_scalar(
            lambda log_phi: -statsmodels_loglik(y, mu, power, np.exp(log_phi), inputs.exposure).sum(),
            bounds=(-5.0, 5.0),
            method="bounded",
            options={"xatol": 1e-4},
        )
        return -found.fun

    grid = {round(1.0 + step / 10.0, 10): 0.0 for step in range(1, 10)}
    grid = {power: loglik(power) for power in grid}
    best = max(grid, key=grid.get)
    for direction in (-1, 1):
        power = best
        while 1.1 < round(power + direction * 0.02, 10) < 1.9:
            step = round(power + direction * 0.02, 10)
            grid.setdefault(step, loglik(step))
            if grid[step] <= grid[power]:
                break
            power = step
    return max(grid, key=grid.get)


def test_the_search_finds_the_old_grids_power():
    """On a small book the bounded Brent search lands within the old grid's resolution (0.02) of its
    argmax."""
    inputs = tweedie_book(6_000, seed=9)
    assert fit_pure_premium(inputs, power="auto").power == pytest.approx(old_grid_power(inputs), abs=0.02)
