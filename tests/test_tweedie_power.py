"""The Tweedie density used to choose the power, and recovery of a known power.

Reference for the density: an independent compound Poisson-Gamma sum with scipy.stats,
f(y) = sum_n poisson.pmf(n, lam) gamma.pdf(y, n alpha, scale), lam = w mu^(2-p) / (phi (2-p)),
alpha = (2-p)/(p-1), scale = phi (p-1) mu^(p-1) / w, and P(Y = 0) = exp(-lam).
Recovery: an invented book drawn from that compound distribution with power 1.6.
"""

from __future__ import annotations

import time

import numpy as np
import pandas as pd
import pytest
import scipy.special
import scipy.stats

from premiumlab.models.glm.fit import GlmInputs, fit_pure_premium
from premiumlab.models.glm.tweedie import ml_dispersion, tweedie_loglik_obs

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


def test_auto_power_recovers_the_simulated_power():
    """auto picks 1.6 +- 0.1; the ML dispersion there is 2.0 +- 10 %; under 20 s on 20,000 rows."""
    inputs = tweedie_book()
    started = time.perf_counter()
    result = fit_pure_premium(inputs, power="auto")
    elapsed = time.perf_counter() - started
    assert result.power == pytest.approx(TRUE_POWER, abs=0.1)
    best = max(result.power_profile, key=lambda entry: entry["loglik"])
    assert best["power"] == result.power
    assert best["dispersion"] == pytest.approx(TRUE_DISPERSION, rel=0.1)
    powers = [entry["power"] for entry in result.power_profile]
    assert powers == sorted(powers) and powers[0] == 1.1 and powers[-1] == 1.9
    assert all(1.1 <= power <= 1.9 for power in powers)
    assert elapsed < 20.0


def test_ml_dispersion_is_a_maximum():
    """The returned dispersion beats 0.1 % either side, and its log-likelihood is the density's sum."""
    rng = np.random.default_rng(5)
    mu, weight = rng.uniform(0.5, 2.0, 3_000), rng.uniform(0.5, 1.5, 3_000)
    inputs = tweedie_book(3_000, seed=5)
    y = inputs.claim_amount / inputs.exposure
    phi, loglik = ml_dispersion(y, mu, 1.5, weight)
    assert loglik == pytest.approx(np.sum(tweedie_loglik_obs(y, mu, 1.5, phi, weight)), rel=1e-12)
    for nearby in (phi * 0.999, phi * 1.001):
        assert np.sum(tweedie_loglik_obs(y, mu, 1.5, nearby, weight)) < loglik
