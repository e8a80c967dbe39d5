"""The credibility penalty of the GLM baselines, unseen levels and the model's warnings.

References: scikit-learn's PoissonRegressor, GammaRegressor and TweedieRegressor (log link, solver
"newton-cholesky") for the ridge fit at a fixed penalty. scikit-learn minimises
sum(s d(y, mu)) / (2 sum s) + alpha ||beta||^2 / 2 over the coefficients other than the intercept,
s the sample weights; times 2 sum(s) that is premiumlab's D(beta) + sum_j r_j beta_j^2 with
r_j = alpha sum(s) for every non-intercept column. The credibility choice of the penalty is
checked against its defining equation (the EM fixed point of the module docstring of
`premiumlab.models.glm.credibility`). Books are invented; the property book is the shipped
scenario (simulator data).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.linear_model import GammaRegressor, PoissonRegressor, TweedieRegressor

import premiumlab
import premiumlab.models.glm.fit as glm
from premiumlab._core.errors import InputError
from premiumlab.book.levels import categorise
from premiumlab.models.glm.credibility import MIN_LEVELS, credibility_rule, penalty_groups
from premiumlab.models.glm.engines import (
    GAMMA,
    POISSON,
    Family,
    OneHotDesign,
    aggregate_cells,
    choose_columns,
    column_major,
    fit_on_cells,
    fit_on_rows,
)
from premiumlab.models.glm.fit import GlmInputs, fit_frequency, fit_pure_premium, fit_severity

ROOT = Path(__file__).resolve().parents[1]
SIZES = {"zone": 12, "cover": 3, "band": 5}


def invented_inputs(n_rows: int = 6_000, seed: int = 5) -> GlmInputs:
    """Three factors (12, 3 and 5 levels, skewed shares so that some zones are thin), Poisson counts,
    Gamma amounts."""
    rng = np.random.default_rng(seed)
    factors, log_frequency = {}, np.full(n_rows, np.log(0.12))
    for name, size in SIZES.items():
        shares = np.geomspace(1.0, 0.01, size) if name == "zone" else np.full(size, 1.0)
        codes = rng.choice(size, n_rows, p=shares / shares.sum())
        factors[name] = pd.Categorical.from_codes(codes, [f"{name}{k}" for k in range(size)])
        log_frequency += rng.normal(0.0, 0.3, size)[codes]
    exposure = rng.uniform(0.2, 1.0, n_rows)
    count = rng.poisson(exposure * np.exp(log_frequency)).astype(float)
    amount = np.where(count > 0, rng.gamma(2.0 * np.maximum(count, 1.0), 900.0), 0.0)
    frame = pd.DataFrame(factors)
    return GlmInputs(frame, {name: frame[name].cat.categories[0] for name in frame}, exposure, count, amount)


def one_hot(inputs: GlmInputs, rows: np.ndarray) -> np.ndarray:
    """Treatment dummies without the intercept, in premiumlab's term order (base: first level)."""
    columns = []
    for name in inputs.factors:
        codes = inputs.factors[name].cat.codes.to_numpy()[rows]
        columns += [(codes == k).astype(float) for k in range(1, len(inputs.factors[name].cat.categories))]
    return np.column_stack(columns)


def design_of(inputs: GlmInputs, rows: np.ndarray) -> OneHotDesign:
    names = tuple(inputs.factors.columns)
    levels = tuple(tuple(inputs.factors[name].cat.categories) for name in names)
    codes = column_major([inputs.factors[name].cat.codes.to_numpy()[rows] for name in names], int(rows.sum()))
    return OneHotDesign(names, levels, tuple(0 for _ in names), codes)


@pytest.fixture(scope="module")
def inputs() -> GlmInputs:
    return invented_inputs()


CASES = {
    "poisson": (POISSON, PoissonRegressor),
    "gamma": (GAMMA, GammaRegressor),
    "tweedie": (Family("tweedie", 1.5), lambda **kw: TweedieRegressor(power=1.5, link="log", **kw)),
}


@pytest.mark.parametrize("engine", ["cells", "rows"])
@pytest.mark.parametrize("family_name", list(CASES))
def test_ridge_at_a_fixed_penalty_equals_scikit_learn(inputs, family_name, engine):
    """Both engines at ridge r = alpha sum(s) on every level column equal scikit-learn's regressor
    at alpha (intercept unpenalised) to 1e-6 in every coefficient."""
    family, regressor = CASES[family_name]
    if family_name == "gamma":
        rows = inputs.claim_count > 0
        numerator, weight = inputs.claim_amount[rows], inputs.claim_count[rows]
    elif family_name == "poisson":
        rows = np.ones(len(inputs.exposure), dtype=bool)
        numerator, weight = inputs.claim_count, inputs.exposure
    else:
        rows = np.ones(len(inputs.exposure), dtype=bool)
        numerator, weight = inputs.claim_amount, inputs.exposure
    alpha = 0.002
    reference = regressor(alpha=alpha, solver="newton-cholesky", tol=1e-12, max_iter=1000)
    reference.fit(one_hot(inputs, rows), numerator / weight, sample_weight=weight)
    expected = np.concatenate([[reference.intercept_], reference.coef_])

    design = design_of(inputs, rows)
    cells = aggregate_cells(design, numerator, weight)
    kept = choose_columns(cells.design, cells.row_count).kept
    ridge = np.full(len(kept), alpha * weight.sum())
    ridge[0] = 0.0
    if engine == "cells":
        fit = fit_on_cells(cells, kept, family, ridge=ridge)
    else:
        fit = fit_on_rows(design, numerator, weight, kept, family, ridge=ridge)
    assert fit.converged
    np.testing.assert_allclose(fit.beta, expected, rtol=0, atol=1e-6)


def test_credibility_penalty_is_the_em_fixed_point(inputs):
    """Poisson (phi = 1): for each penalised factor, 1 / lambda_f = tau_f^2 = (||beta_f||^2 +
    tr S_ff) / J_f with S the returned (X'WX + Lambda)^-1, to 1e-4 relative; factors with fewer
    than MIN_LEVELS estimated levels are not penalised."""
    rows = np.ones(len(inputs.exposure), dtype=bool)
    result = fit_frequency(inputs)
    assert result.penalty == "credibility" and result.converged
    assert set(result.credibility) == {name for name, size in SIZES.items() if size - 1 >= MIN_LEVELS}
    design = design_of(inputs, rows)
    cells = aggregate_cells(design, inputs.claim_count, inputs.exposure)
    kept = choose_columns(cells.design, cells.row_count).kept
    groups = penalty_groups(design, kept)
    fit = fit_on_cells(cells, kept, POISSON, choose_ridge=credibility_rule(groups))
    estimates = {row["term"]: row["estimate"] for row in result.coefficients}
    np.testing.assert_allclose(fit.beta, list(estimates.values()), atol=1e-9)
    for name, positions in zip(groups.names, groups.positions):
        penalty = fit.ridge[positions[0]]
        tau2 = (np.sum(fit.beta[positions] ** 2) + np.trace(fit.unit_covariance[np.ix_(positions, positions)])) / len(
            positions
        )
        assert 1.0 / penalty == pytest.approx(tau2, rel=1e-4)
        assert result.credibility[name]["penalty"] == pytest.approx(penalty, rel=1e-12)
        assert result.credibility[name]["tau"] == pytest.approx(np.sqrt(1.0 / penalty), rel=1e-12)
        assert result.credibility[name]["levels"] == len(positions)
    assert result.effective_parameters < len(kept)


def test_thin_level_without_claims_sits_near_the_base_and_is_reported(inputs):
    """A zone whose rows have no claims: unpenalised, it runs to zero (no convergence, no standard
    error); penalised, it stays finite where its score equation puts it (-expected claims =
    lambda beta: pulled down by its exposure only) and both fits warn of the separation."""
    count = inputs.claim_count.copy()
    amount = inputs.claim_amount.copy()
    thin = inputs.factors["zone"].to_numpy() == "zone11"
    count[thin], amount[thin] = 0.0, 0.0
    changed = GlmInputs(inputs.factors, inputs.base_levels, inputs.exposure, count, amount)
    free = fit_frequency(changed, penalty="none")
    held = fit_frequency(changed)
    assert free.relativities["zone"]["zone11"] < 1e-6
    assert not free.converged
    assert np.isnan(next(row for row in free.coefficients if row["term"] == "zone[zone11]")["std_error"])
    assert 0.3 < held.relativities["zone"]["zone11"] < 1.0
    assert held.converged
    # its penalised score equation: 0 claims - expected claims = lambda beta (to 1e-8 relative)
    expected_claims = float(np.sum(inputs.exposure[thin] * held.predict(inputs.factors)[thin]))
    penalty = held.credibility["zone"]["penalty"]
    assert penalty * np.log(held.relativities["zone"]["zone11"]) == pytest.approx(-expected_claims, rel=1e-8)
    for result, kinds in ((free, {"non_convergence", "separation"}), (held, {"separation"})):
        assert {w["kind"] for w in result.warnings} == kinds
        separation = next(w for w in result.warnings if w["kind"] == "separation")
        assert (separation["model"], separation["factor"], separation["level"]) == ("glm_frequency", "zone", "zone11")
    json.dumps(free.to_json_dict(), allow_nan=False)
    premium = fit_pure_premium(changed, power=1.5)
    assert [(w["kind"], w["level"]) for w in premium.warnings] == [("separation", "zone11")]
    assert "without losses" in premium.warnings[0]["message"]


def test_unseen_level_takes_the_base_and_is_counted(inputs):
    """A level not fitted (unseen, or missing) is priced at relativity 1, and its rows are found."""
    result = fit_severity(inputs)
    frame = inputs.factors.head(6).astype(str)
    frame.loc[1, "zone"], frame.loc[4, "zone"], frame.loc[2, "band"] = "zone99", None, ""
    at_base = frame.copy()
    at_base.loc[[1, 4], "zone"], at_base.loc[2, "band"] = "zone0", "band0"
    np.testing.assert_allclose(result.predict(frame), result.predict(at_base), rtol=1e-14)
    unseen = result.unseen_rows(frame)
    assert sorted(unseen) == ["band", "zone"]
    assert np.flatnonzero(unseen["zone"]).tolist() == [1, 4]
    assert np.flatnonzero(unseen["band"]).tolist() == [2]


def thin_territories(book: pd.DataFrame, limit: int = 50) -> list[str]:
    """Territories of the training rows with fewer than `limit` policies there."""
    train = book.loc[~book["holdout"]]
    policies = train.groupby("territory")["policy_id"].nunique()
    return sorted(policies[policies < limit].index)


@pytest.fixture(scope="module")
def property_run(tmp_path_factory):
    """The property scenario at 50,000 policies as simulated (alarm missing on about 5 % of the
    policies: its own level), fitted with the GLMs only."""
    base = tmp_path_factory.mktemp("property")
    premiumlab.simulate(ROOT / "scenarios" / "property.toml", out=base / "book.parquet", policies=50_000)
    premiumlab.fit(
        base / "book.parquet", spec=ROOT / "scenarios" / "property_spec.toml", out=base / "run", models="glm"
    )
    return base / "run", pd.read_parquet(base / "book.parquet")


@pytest.mark.parametrize("target", ["frequency", "severity", "pure_premium"])
def test_property_glms_converge_hold_thin_territories_and_beat_the_null_model(property_run, target):
    """Converged; every territory with fewer than 50 training policies within [0.3, 3]; holdout
    mean deviance finite and below the null model's (D^2 > 0)."""
    run, book = property_run
    model = json.loads((run / "models" / f"glm_{target}.json").read_text())
    predictions = pd.read_parquet(run / "predictions.parquet", columns=["holdout"])
    book = book.assign(holdout=predictions["holdout"].to_numpy())
    assert model["converged"] and model["penalty"] == "credibility"
    assert not [w for w in model["warnings"] if w["kind"] == "non_convergence"]
    thin = thin_territories(book)
    assert len(thin) > 100
    relativities = np.array([model["relativities"]["territory"][t] for t in thin])
    assert relativities.min() >= 0.3 and relativities.max() <= 3.0, (relativities.min(), relativities.max())
    metrics = json.loads((run / "metrics.json").read_text())
    entry = metrics[target]["models"][f"glm_{target}"]
    assert np.isfinite(entry["mean_deviance"]) and entry["d2"] > 0.0


def test_property_unseen_territories_are_priced_at_the_base_and_counted(property_run):
    """Holdout rows whose territory has no training row do not stop the fit: the GLMs price them at
    the base territory (exp(Intercept) x the other relativities), and the run counts them once, in
    run.json's book diagnostic, not again in each GLM's warnings."""
    run, book = property_run
    predictions = pd.read_parquet(run / "predictions.parquet")
    holdout = predictions["holdout"].to_numpy()
    seen = set(book.loc[~holdout, "territory"])
    unseen = holdout & ~book["territory"].isin(seen).to_numpy()
    assert unseen.sum() > 0, "the scenario at this size has holdout-only territories"
    frequency = glm.GlmResult.from_json_dict(json.loads((run / "models" / "glm_frequency.json").read_text()))
    levels = premiumlab.open_run(run).levels
    typed = book.assign(alarm=book["alarm"].fillna(""))  # the typed book holds "" for a missing category
    factors = categorise(typed, levels)  # an unseen territory is missing here
    unseen_rows = frequency.unseen_rows(factors)
    assert sorted(unseen_rows) == ["territory"] and np.array_equal(unseen_rows["territory"], unseen)
    np.testing.assert_allclose(frequency.predict(factors), predictions["glm_frequency"], rtol=1e-12)
    found = [d for d in json.loads((run / "run.json").read_text())["diagnostics"] if d["kind"] == "unseen_levels"]
    assert [(d["model"], d["factor"]) for d in found] == [("book", "territory")]
    assert f"on {int(unseen.sum())} rows" in found[0]["message"]


def test_a_failed_unpenalised_profile_names_the_model_and_the_cure(inputs, monkeypatch):
    """A numerical failure while profiling the Tweedie power (a mean that ran to zero) reaches the
    user as one input error naming the model, and for an unpenalised fit with a level without
    losses, the credibility penalty (the profile is replaced by one that fails as scipy does)."""

    def failing(*_args, **_kwargs):
        raise ValueError("Optimization bounds must be finite scalars.")

    monkeypatch.setattr(glm, "profile_power", failing)
    amount = inputs.claim_amount.copy()
    count = inputs.claim_count.copy()
    thin = inputs.factors["zone"].to_numpy() == "zone11"
    count[thin], amount[thin] = 0.0, 0.0
    changed = GlmInputs(inputs.factors, inputs.base_levels, inputs.exposure, count, amount)
    with pytest.raises(
        InputError, match=r"the pure premium GLM could not be fitted \(Optimization bounds.*credibility"
    ):
        fit_pure_premium(changed, penalty="none")
