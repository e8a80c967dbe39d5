"""The table's source model, its attenuation and the credibility of thin levels (premiumlab.tabulation).

References: LightGBM's own `Booster.predict(raw_score=True)` for the frequency x severity effect
curves; `numpy.polyfit` (weighted least squares) for the attenuation slope; the Buhlmann-Straub
estimators written out independently in the test from their textbook form (H. Buhlmann and
A. Gisler, *A Course in Credibility Theory and its Applications*, Springer 2005, section 4.8: the
unbiased estimators of the within variance and the between variance; formulas recalled from memory);
`premiumlab.evaluation.holdout.holdout_metrics` through the run's metrics.json for the automatic
choice. Data are invented in each test with seeded generators, or the session's small motor run.
"""

from __future__ import annotations

import json

import lightgbm as lgb
import numpy as np
import pandas as pd
import pytest

import rating_tables
from premiumlab.book.spec import TableOptions
from premiumlab.models.gbm.training import encode_features
from premiumlab.models.trees.parser import Trees
from premiumlab.tabulation.attenuation import attenuation_slope, curve_at_rows, table_partial_dependence
from premiumlab.tabulation.banding import merge_thin_levels
from premiumlab.tabulation.credibility import buhlmann_straub, credibility_weighted
from premiumlab.tabulation.distill import ScoreBooster, distil
from premiumlab.tabulation.effects import FactorValues
from premiumlab.tabulation.source import SOURCES, choose_source
from rating_tables import InteractionFactor

# ---------------------------------------------------------------------------------------------
# frequency x severity: the summed effect curves


def _frequency_and_severity(max_depth: int) -> tuple[lgb.Booster, lgb.Booster, pd.DataFrame, np.ndarray]:
    """A Poisson frequency and a Gamma severity booster on one invented book."""
    rng = np.random.default_rng(7)
    n = 4000
    x = pd.DataFrame(
        {
            "age": rng.normal(45, 12, n).round(0),
            "zone": pd.Categorical(rng.choice(["a", "b", "c", "d"], n)),
            "power": rng.integers(50, 150, n).astype(float),
        }
    )
    exposure = rng.uniform(0.2, 1.0, n)
    eta = -2.0 + 0.015 * (x.age - 45) + 0.3 * (x.zone == "c") + 0.004 * (x.power - 100)
    claims = rng.poisson(exposure * np.exp(eta))
    params = {"num_leaves": 7, "max_depth": max_depth, "min_data_in_leaf": 30, "learning_rate": 0.1}
    params |= {"verbosity": -1, "num_threads": 1, "deterministic": True, "seed": 3}
    frequency = lgb.train(
        {**params, "objective": "poisson"}, lgb.Dataset(x, claims / exposure, weight=exposure), num_boost_round=60
    )
    severity_mean = np.exp(8.0 + 0.2 * (x.zone == "a") + 0.003 * (x.power - 100))
    severity = rng.gamma(2.0, severity_mean / 2.0)
    severity = lgb.train({**params, "objective": "gamma"}, lgb.Dataset(x, severity), num_boost_round=60)
    return frequency, severity, x, exposure


def _distil_two(frequency: lgb.Booster, severity: lgb.Booster, x: pd.DataFrame, exposure: np.ndarray):
    categories = {"zone": list(x.zone.cat.categories)}
    sample = encode_features(x, list(x.columns), categories)[:400]
    codes = {"zone": np.arange(4, dtype=float)}
    boosters = [ScoreBooster(Trees.from_text(b.model_to_string()), sample, codes) for b in (frequency, severity)]
    factors = [
        FactorValues("age", "none", x.age.to_numpy(float)),
        FactorValues("zone", "none", x.zone.cat.codes.to_numpy(np.int64), levels=("a", "b", "c", "d"), ordered=False),
        FactorValues("power", "none", x.power.to_numpy(float)),
    ]
    raw = frequency.predict(x, raw_score=True) + severity.predict(x, raw_score=True)
    amount = np.random.default_rng(1).gamma(0.5, 2 * np.exp(raw) * exposure)
    result = distil(boosters, factors, exposure, np.exp(raw), amount, TableOptions(grid_points=400, max_bands=8))
    return result, factors, raw, sample


def test_freq_sev_curve_is_the_sum_of_the_two_boosters_partial_dependence() -> None:
    """Each factor's curve of the product equals, up to a constant, the mean over the sample of
    LightGBM's raw score of the frequency booster plus that of the severity booster
    (`Booster.predict(raw_score=True)`) with the factor set to each curve point: max absolute
    difference <= 1e-10."""
    frequency, severity, x, exposure = _frequency_and_severity(max_depth=3)
    result, _, _, sample = _distil_two(frequency, severity, x, exposure)
    for j, name in enumerate(x.columns):
        curve = result.curves[name]
        grid = curve.points.astype(float)  # numeric: grid values; zone: level index = the booster's code
        brute = []
        for value in grid:
            stacked = sample.copy()
            stacked[:, j] = value
            brute.append(
                np.mean(frequency.predict(stacked, raw_score=True) + severity.predict(stacked, raw_score=True))
            )
        difference = (curve.effect - curve.effect.mean()) - (np.array(brute) - np.mean(brute))
        assert np.abs(difference).max() <= 1e-10, name


def test_additive_freq_sev_is_reproduced_by_its_summed_curves() -> None:
    """With boosters of depth 1 (additive in the log score) the sum over factors of the summed curves
    at each row reproduces log(frequency x severity) from LightGBM's `predict(raw_score=True)` up to
    one constant: max absolute difference <= 1e-9 on every row of the book, so the product's
    prediction is reproduced to a relative 1e-9."""
    frequency, severity, x, exposure = _frequency_and_severity(max_depth=1)
    result, factors, raw, _ = _distil_two(frequency, severity, x, exposure)
    total = sum(curve_at_rows(result.curves[f.name], f.values) for f in factors)
    gap = raw - total
    assert np.abs(gap - gap.mean()).max() <= 1e-9


# ---------------------------------------------------------------------------------------------
# attenuation


def test_attenuation_equals_numpy_polyfit_with_weights() -> None:
    """The weighted least-squares slope equals numpy.polyfit(x, y, 1, w=sqrt(weight))'s slope (polyfit
    weights multiply the unsquared residuals) to 1e-12, on an invented case built with slope 0.6."""
    rng = np.random.default_rng(5)
    x = rng.normal(0, 0.3, 500)
    weight = rng.uniform(0.1, 2.0, 500)
    y = 0.2 + 0.6 * x + rng.normal(0, 0.05, 500)
    slope = attenuation_slope(y, x, weight)
    assert slope == pytest.approx(np.polyfit(x, y, 1, w=np.sqrt(weight))[0], abs=1e-12)
    assert slope == pytest.approx(0.6, abs=0.02)
    assert attenuation_slope(y, np.full(500, 0.3), weight) is None


def test_table_partial_dependence_averages_the_two_way_cells_over_the_partner() -> None:
    """Hand arithmetic: main log relativities (0, 0.2) of factor a, a two-way table on (a, b) whose
    cell (1, 1) is log 1.5; b's exposure 3 in cell 0 and 1 in cell 1. At a = 1 the table's effect is
    0.2 + 1/4 log 1.5."""
    cells = {"a": np.array([0, 1, 1, 0]), "b": np.array([0, 0, 1, 0])}
    exposure = np.array([1.0, 1.0, 1.0, 1.0])
    two_way = {("a", "b"): np.log(np.array([[1.0, 1.0], [1.0, 1.5]]))}
    effect = table_partial_dependence("a", np.array([0.0, 0.2]), two_way, cells, exposure)
    np.testing.assert_allclose(effect, [0.0, 0.2 + 0.25 * np.log(1.5), 0.2 + 0.25 * np.log(1.5), 0.0], atol=1e-15)


# ---------------------------------------------------------------------------------------------
# credibility of thin levels


def _textbook_buhlmann_straub(x: np.ndarray, w: np.ndarray, group: np.ndarray) -> tuple[np.ndarray, float]:
    """Z_i and k = v / a written out level by level from the textbook estimators (module docstring)."""
    levels = np.unique(group)
    m_i = np.array([w[group == i].sum() for i in levels])
    xbar_i = np.array([np.sum(w[group == i] * x[group == i]) / m_i[k] for k, i in enumerate(levels)])
    m = m_i.sum()
    xbar = np.sum(m_i * xbar_i) / m
    sse = sum(np.sum(w[group == i] * (x[group == i] - xbar_i[k]) ** 2) for k, i in enumerate(levels))
    v = sse / sum((group == i).sum() - 1 for i in levels)
    a = (np.sum(m_i * (xbar_i - xbar) ** 2) - (len(levels) - 1) * v) / (m - np.sum(m_i**2) / m)
    return m_i / (m_i + v / a), v / a


def test_credibility_pulls_a_thin_level_to_the_mean_and_out_of_the_extreme_group() -> None:
    """Invented book of eight levels of a model effect (log relativities), one thin (3 rows) with the
    most extreme effect; pure premium per row = Poisson claims x Gamma amounts / exposure. The
    Buhlmann-Straub Z equal the textbook estimators computed level by level (1e-12); the
    credibility-weighted effect is Z e + (1 - Z) ebar (hand arithmetic); and the thin level, in the
    lowest group before, lands in neither extreme group once its effect is weighted."""
    rng = np.random.default_rng(11)
    sizes, relativity = [300] * 7 + [3], np.array([0.6, 0.75, 0.9, 1.0, 1.1, 1.25, 1.4, 0.2])
    group = np.repeat(np.arange(8), sizes)
    w = rng.uniform(0.5, 1.0, group.size)
    x = rng.poisson(0.3 * w * relativity[group]) * rng.gamma(2.0, 500.0, group.size) / w
    fit = buhlmann_straub(x, w, group, 8)
    z_book, k = _textbook_buhlmann_straub(x, w, group)
    np.testing.assert_allclose(fit.credibility, z_book, rtol=1e-12)
    assert fit.k == pytest.approx(k, rel=1e-12)
    assert fit.credibility[7] < 0.05 < 0.5 < fit.credibility[:7].min()
    effect = np.log(relativity)
    weighted = credibility_weighted(effect, fit.weight, fit.credibility)
    ebar = np.average(effect, weights=fit.weight)
    np.testing.assert_allclose(weighted, fit.credibility * effect + (1 - fit.credibility) * ebar, rtol=1e-12)
    min_weight = 0.02 * fit.weight.sum()
    before = merge_thin_levels(effect, fit.weight, min_weight)
    assert before[7] == before[0] == 0
    after = merge_thin_levels(weighted, fit.weight, min_weight)
    assert after[7] not in (after[0], after[6])


def test_a_thin_two_way_cell_keeps_little_of_its_interaction() -> None:
    """Two-way cells weighted towards 1: each cell's relativity r becomes r^Z with Z the
    Buhlmann-Straub credibility of the cell's pure premium (`buhlmann_straub` on the rows grouped by
    cell, 1e-12); base row and column stay exactly 1; the thin cell (3 rows) keeps less than a tenth
    of its log relativity, the thick one more than half."""
    from premiumlab.tabulation.refit import Refit, credible_two_way

    rng = np.random.default_rng(2)
    a = np.repeat([0, 0, 1, 1], [500, 500, 500, 3])
    b = np.repeat([0, 1, 0, 1], [500, 500, 500, 3])
    w = rng.uniform(0.5, 1.0, a.size)
    amount = rng.poisson(0.3 * w * np.where(a + b == 2, 2.0, 1.0)) * rng.gamma(2.0, 500.0, a.size)
    fit = Refit({}, {("a", "b"): np.array([[1.0, 1.3], [0.8, 2.0]])}, {"a": 0, "b": 0}, [], 1, 0.0)
    shrunk = credible_two_way(fit, {"a": a, "b": b}, w, amount)
    z = buhlmann_straub(amount / w, w, a * 2 + b, 4).credibility.reshape(2, 2)
    matrix = shrunk.two_way[("a", "b")]
    np.testing.assert_allclose(matrix, np.array([[1.0, 1.3], [0.8, 2.0]]) ** z, rtol=1e-12)
    assert matrix[0, 0] == 1.0 and shrunk.two_way_credibility[("a", "b")] is not None
    assert np.log(matrix[1, 1]) < 0.1 * np.log(2.0) and np.log(matrix[0, 1]) > 0.5 * np.log(1.3)


# ---------------------------------------------------------------------------------------------
# the source, on the session's small motor run


def _fidelity(table) -> dict:
    return json.loads((table / "fidelity.json").read_text())


def test_auto_takes_the_lowest_holdout_deviance_of_metrics_json(demo_run) -> None:
    """`tabulate` without --model distils the candidate with the lowest holdout mean deviance of the
    pure premium; its figures are those of the run's metrics.json (written by `fit` with
    `holdout_metrics`), to 1e-12."""
    fid = _fidelity(demo_run["table"])
    metrics = json.loads((demo_run["run"] / "metrics.json").read_text())["pure_premium"]["models"]
    columns = SOURCES
    source = fid["source"]
    assert set(source["candidates"]) == set(columns)
    for name, scores in source["candidates"].items():
        assert scores["mean_deviance"] == pytest.approx(metrics[columns[name]]["mean_deviance"], rel=1e-12)
        assert scores["gini"] == pytest.approx(metrics[columns[name]]["gini"], rel=1e-12)
    best = min(source["candidates"], key=lambda n: source["candidates"][n]["mean_deviance"])
    assert source["model"] == source["best"] == best and source["requested"] == "auto"
    assert fid["provenance"]["model"] == columns[best]
    assert all(d["kind"] != "weak_source" for d in fid["diagnostics"])
    mains = {f.name for f in rating_tables.load(demo_run["table"]).factors if not isinstance(f, InteractionFactor)}
    assert set(fid["attenuation"]["factors"]) == mains
    table_levels = pd.read_csv(demo_run["table"] / "factors" / "region.csv", dtype=str)["level"]
    assert set(fid["groups"]["region"]) == set(table_levels)


def test_a_requested_source_that_is_not_the_best_is_flagged(demo_run) -> None:
    """`--model glm` (the session's GLM table) names its source, and warns `weak_source` when the GLM
    is not the best candidate; a GLM source has no lift over the GLM to keep (no ratio, and no
    `retention_undefined` warning: nothing is unreliable). The spec's two-way table
    (driver_age x vehicle_power) is in the GLM table, with its base row and column at 1."""
    fid = _fidelity(demo_run["glm_table"])
    kinds = [d["kind"] for d in fid["diagnostics"]]
    assert fid["source"]["model"] == "glm" and fid["source"]["requested"] == "glm"
    assert ("weak_source" in kinds) == (fid["source"]["best"] != "glm")
    assert "retention_undefined" not in kinds
    assert fid["fidelity"]["retention"]["source_lift_over_glm_kept"] is None
    table = rating_tables.load(demo_run["glm_table"])
    (pair,) = [f for f in table.factors if isinstance(f, rating_tables.InteractionFactor)]
    assert tuple(pair.of) == ("driver_age", "vehicle_power")
    assert np.ptp(np.log(pair.relativity)) > 0 and "two_way" in fid["distillation"]


def test_offset_refit_equals_a_poisson_glm_with_offset_in_statsmodels() -> None:
    """The GLM table's two-way fit (`_glm_two_way`): `refit` with response y / mu and weight
    exposure x mu is the Poisson quasi-likelihood GLM of y with offset log(mu) and weights exposure.
    Reference: statsmodels GLM (Poisson, offset, var_weights), the same design; 1e-8 on the
    relativities."""
    import statsmodels.api as sm

    from premiumlab.tabulation.refit import refit

    rng = np.random.default_rng(5)
    n = 4000
    a, b = rng.integers(0, 3, n), rng.integers(0, 2, n)
    exposure = rng.uniform(0.2, 1.0, n)
    mu = np.exp(rng.normal(0.0, 0.3, n)) * 0.1
    y = rng.poisson(exposure * mu * np.where((a == 2) & (b == 1), 1.8, 1.0) * (1 + 0.2 * a)) / exposure
    fit = refit({"a": a, "b": b}, {"a": 3, "b": 2}, {"a": 0, "b": 0}, [("a", "b")], exposure * mu, y / mu)
    design = np.column_stack([np.ones(n), a == 1, a == 2, b == 1, (a == 1) & (b == 1), (a == 2) & (b == 1)])
    reference = sm.GLM(y, design.astype(float), family=sm.families.Poisson(), offset=np.log(mu), var_weights=exposure)
    params = reference.fit(tol=1e-12).params
    np.testing.assert_allclose(fit.relativities["a"], np.exp([0.0, params[1], params[2]]), rtol=1e-8)
    np.testing.assert_allclose(fit.relativities["b"], np.exp([0.0, params[3]]), rtol=1e-8)
    np.testing.assert_allclose(
        fit.two_way[("a", "b")], np.exp([[0.0, 0.0], [0.0, params[4]], [0.0, params[5]]]), rtol=1e-8
    )


def test_choose_source_breaks_ties_in_candidate_order_and_refuses_unknown_models() -> None:
    """Equal deviances go to the first candidate (gbm, gbm_freq_sev, glm); a requested model without
    predictions and an unknown name are refused."""
    from premiumlab._core.errors import InputError

    scores = {"glm": {"mean_deviance": 1.0, "gini": 0.3}, "gbm_freq_sev": {"mean_deviance": 1.0, "gini": 0.2}}
    assert choose_source(scores, "auto", "holdout", 1.5, "p").model == "gbm_freq_sev"
    with pytest.raises(InputError, match="no column 'gbm_pure_premium'"):
        choose_source(scores, "gbm", "holdout", 1.5, "p")
    with pytest.raises(InputError, match="unknown model 'tree'"):
        choose_source(scores, "tree", "holdout", 1.5, "p")


def test_groups_csv_lists_the_levels_of_pooled_factors_only() -> None:
    """groups.csv rows: every level (the missing level apart) of a factor with a group of two levels
    or more, ordered by group; a factor whose levels each have their own group is left out."""
    from premiumlab.tabulation.from_run import pooled_groups

    groups = {
        "territory": {"T1": 1, "T2": 0, "T3": 1, "(missing)": 2},
        "region": {"North": 0, "South": 1},
    }
    rows = pooled_groups(groups)
    assert rows.to_dict("list") == {
        "factor": ["territory"] * 3,
        "level": ["T2", "T1", "T3"],
        "group": [0, 1, 1],
    }
    assert pooled_groups({"region": groups["region"]}).empty


def test_level_effects_from_another_model_replace_the_boosted_ones() -> None:
    """`distil(level_effects=)`: the zone's curve becomes the given log relativities g (up to one
    constant, 1e-12), no credibility is applied to it, and the refit's response moves by g - e, so
    that the table's zone relativities follow exp(g) and the other factors keep the boosted effect.
    Boosters of depth 1 (additive log score), so the refit is near exact: 0.02 on the log scale
    against exp(g - g_base) for the zone and against the table without level_effects for age."""
    frequency, severity, x, exposure = _frequency_and_severity(max_depth=1)
    plain, factors, raw, sample = _distil_two(frequency, severity, x, exposure)
    categories = {"zone": list(x.zone.cat.categories)}
    codes = {"zone": np.arange(4, dtype=float)}
    boosters = [ScoreBooster(Trees.from_text(b.model_to_string()), sample, codes) for b in (frequency, severity)]
    g = np.log([1.5, 0.7, 1.0, 1.2])
    amount = np.random.default_rng(1).gamma(0.5, 2 * np.exp(raw) * exposure)
    options = TableOptions(grid_points=400, max_bands=8)
    moved = distil(boosters, factors, exposure, np.exp(raw), amount, options, {"zone": g})
    assert categories["zone"] == ["a", "b", "c", "d"]
    curve = moved.curves["zone"]
    difference = curve.effect - g[curve.points.astype(int)]
    np.testing.assert_allclose(difference, difference[0], atol=1e-12)
    assert "zone" not in moved.credibility and "zone" in plain.credibility
    band = moved.pooled.bandings["zone"].band_of_level
    assert len(set(band)) == 4  # every zone its own band
    zone = np.log(moved.pooled.fit.relativities["zone"])[band]
    np.testing.assert_allclose(zone - zone.mean(), g - g.mean(), atol=0.02)
    np.testing.assert_allclose(
        np.log(moved.pooled.fit.relativities["age"]), np.log(plain.pooled.fit.relativities["age"]), atol=0.02
    )
