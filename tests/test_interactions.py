"""Friedman's H statistic: brute-force partial dependence against a closed form, recovery of an
invented product interaction from a boosted model, and zero for an additive (stump) model."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from premiumlab._core.errors import InputError
from premiumlab.book.gbm_options import GbmOptions
from premiumlab.models.gbm.fit import fit_target
from premiumlab.models.gbm.training import GbmInputs
from premiumlab.models.trees.interactions import h_statistics, top_factors_by_gain


def test_h_matches_closed_form_for_a_product_plus_additive_terms():
    """For f = x1 * x2 + x3 + g(region) (Friedman and Popescu, 2008, section 8.1, worked by hand):
    on the sample, the centred PD residual of (x1, x2) is (x1 - m1)(x2 - m2) - c with m the sample
    means and c their sample covariance (ddof 0), so H_12 = sqrt(sum of its squares); every pair
    with x3 or region has H = 0. Agreement to 1e-9 relative; h2 in [0, 1]."""
    rng = np.random.default_rng(4)
    frame = pd.DataFrame(
        {
            "x1": rng.normal(1.0, 1.0, 400),
            "x2": rng.uniform(0.0, 2.0, 400),
            "x3": rng.normal(0.0, 1.0, 400),
            "region": pd.Categorical(rng.choice(["Dunmore", "Elsby"], 400)),
        }
    )

    def score(features: pd.DataFrame) -> np.ndarray:
        return (
            features["x1"] * features["x2"] + features["x3"] + np.where(features["region"] == "Elsby", 0.5, 0.0)
        ).to_numpy()

    results = h_statistics(score, frame, ["x1", "x2", "x3", "region"], seed=9, sample_size=120)
    sample = frame.iloc[np.sort(np.random.default_rng(9).choice(400, 120, replace=False))]
    d1, d2 = sample["x1"] - sample["x1"].mean(), sample["x2"] - sample["x2"].mean()
    expected = np.sqrt(np.sum((d1 * d2 - np.mean(d1 * d2)) ** 2))
    assert results[0]["pair"] == ["x1", "x2"]
    assert results[0]["h_unnormalised"] == pytest.approx(expected, rel=1e-9)
    assert 0 < results[0]["h2"] <= 1
    assert all(r["h_unnormalised"] < 1e-9 for r in results[1:])
    assert len(results) == 6


@pytest.fixture(scope="module")
def interaction_book() -> tuple[pd.DataFrame, GbmInputs]:
    """Fictional book: log frequency = 0.6 * driver_age_std * vehicle_power_std (the product
    interaction) + additive terms in town_density, bonus and region."""
    rng = np.random.default_rng(21)
    rows = 8000
    age, power = rng.normal(0.0, 1.0, rows), rng.normal(0.0, 1.0, rows)
    density, bonus = rng.uniform(0.0, 1.0, rows), rng.integers(0, 6, rows).astype(float)
    region = pd.Categorical(rng.choice(["Halden", "Irwell", "Jarrow"], rows))
    log_mu = np.log(0.3) + 0.6 * age * power + 0.5 * density + 0.1 * bonus + np.where(region == "Irwell", 0.3, 0.0)
    exposure = rng.uniform(0.5, 1.0, rows)
    count = rng.poisson(np.exp(log_mu) * exposure)
    features = pd.DataFrame(
        {"driver_age_std": age, "vehicle_power_std": power, "town_density": density, "bonus": bonus, "region": region}
    )
    return features, GbmInputs(features, {}, exposure, count, None, np.arange(rows))


def _model(inputs: GbmInputs, leaves: int):
    options = GbmOptions(
        folds=3,
        max_settings=2,
        max_rounds=200,
        early_stopping_rounds=20,
        num_threads=1,
        grid=(
            {"num_leaves": leaves, "min_data_in_leaf": 50, "learning_rate": 0.1},
            {"num_leaves": leaves, "min_data_in_leaf": 100, "learning_rate": 0.1},
        ),
    )
    return fit_target(inputs, "frequency", options)


def test_invented_product_interaction_ranks_first(interaction_book):
    """A boosted frequency model on the invented book ranks the product pair first by unnormalised
    H, at least three times the second pair; both factors are among the top factors by gain."""
    features, inputs = interaction_book
    model = _model(inputs, leaves=15)
    factors = top_factors_by_gain(model.booster)
    assert {"driver_age_std", "vehicle_power_std"} <= set(factors[:3])
    results = h_statistics(model.predict_raw, features, factors, seed=3, sample_size=200)
    assert results[0]["pair"] in (["driver_age_std", "vehicle_power_std"], ["vehicle_power_std", "driver_age_std"])
    assert results[0]["h_unnormalised"] >= 3 * results[1]["h_unnormalised"]
    assert results[0]["h2"] > 0.3


def test_additive_stump_model_has_no_interaction(interaction_book):
    """A model of stumps (2 leaves per tree) is additive in the log score, so every pair has
    unnormalised H below 1e-6, however the data interact."""
    features, inputs = interaction_book
    model = _model(inputs, leaves=2)
    factors = top_factors_by_gain(model.booster)
    assert len(factors) >= 4
    results = h_statistics(model.predict_raw, features, factors, seed=3, sample_size=150)
    assert len(results) == len(factors) * (len(factors) - 1) // 2
    assert max(r["h_unnormalised"] for r in results) < 1e-6


def test_seeded_and_checked(interaction_book):
    """The same seed gives the same figures; a missing factor is named."""
    features, _ = interaction_book

    def score(frame: pd.DataFrame) -> np.ndarray:
        return (frame["driver_age_std"] * frame["town_density"]).to_numpy()

    first = h_statistics(score, features, ["driver_age_std", "town_density", "bonus"], seed=1, sample_size=50)
    again = h_statistics(score, features, ["driver_age_std", "town_density", "bonus"], seed=1, sample_size=50)
    assert first == again
    with pytest.raises(InputError, match=r"no column 'mileage'"):
        h_statistics(score, features, ["driver_age_std", "mileage"], seed=1)
