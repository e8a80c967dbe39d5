"""Distillation numerics (premiumlab.tabulation) against outside references.

References: LightGBM's own `Booster.predict` (brute-force partial dependence on stacked copies of
the sample), statsmodels' GLM (Poisson family, log link, `var_weights`) for the banded refit, and
hand arithmetic written out in the tests. Data are invented in each test with seeded generators.
"""

from __future__ import annotations

import lightgbm as lgb
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from premiumlab.models.gbm.training import encode_features
from premiumlab.models.trees.parser import Trees
from premiumlab.models.trees.partial_dependence import partial_dependence
from premiumlab.tabulation.banding import Banding, categorical_banding, merge_thin_levels, numeric_banding
from premiumlab.tabulation.effects import Curve, cell_exposure, exposure_sample, quantile_grid
from premiumlab.tabulation.refit import effect_grid, pooled_refit, refit, worst_reversal


def _booster(method: str | None, seed: int = 0) -> tuple[lgb.Booster, pd.DataFrame, dict]:
    """A Poisson booster on invented data: a numeric, a count, a native categorical, a promised code."""
    rng = np.random.default_rng(seed)
    n = 6000
    x = pd.DataFrame(
        {
            "age": rng.normal(40, 12, n).round(1),
            "cars": rng.integers(0, 12, n).astype(float),
            "zone": pd.Categorical(rng.choice(["p", "q", "r", "s", "t"], n)),
            "bonus": rng.integers(0, 4, n).astype(float),
        }
    )
    eta = -1.5 + 0.02 * (x.age - 40) + 0.08 * x.cars * (x.zone == "q") + 0.2 * x.bonus
    y = rng.poisson(np.exp(eta))
    params = {
        "objective": "poisson",
        "num_leaves": 15,
        "min_data_in_leaf": 20,
        "verbosity": -1,
        "num_threads": 1,
        "deterministic": True,
        "seed": 1,
        "max_cat_to_onehot": 2,
    }
    if method is not None:
        params |= {"monotone_constraints": [0, 0, 0, 1], "monotone_constraints_method": method}
    booster = lgb.train(params, lgb.Dataset(x, y), num_boost_round=80)
    return booster, x, {"zone": list(x.zone.cat.categories)}


@pytest.mark.parametrize("method", [None, "basic", "advanced"])
def test_partial_dependence_equals_lightgbm_predict(method: str | None) -> None:
    """Tree-walk partial dependence equals the mean of LightGBM's raw predictions over the sample
    with the factor set to each grid value, after removing the mean over the grid (the curve is
    defined up to a constant): max absolute difference <= 1e-10 for every factor."""
    booster, x, categories = _booster(method)
    sample = encode_features(x, list(x.columns), categories)[:300]
    trees = Trees.from_text(booster.model_to_string())
    grids = {0: np.linspace(10, 75, 23), 1: np.arange(12.0), 2: np.arange(5.0), 3: np.arange(4.0)}
    for j, grid in grids.items():
        ours = partial_dependence(trees, sample, j, grid)
        stacked = np.repeat(sample[None], grid.size, axis=0)
        stacked[:, :, j] = grid[:, None]
        brute = booster.predict(stacked.reshape(-1, sample.shape[1]), raw_score=True).reshape(grid.size, -1)
        brute = brute.mean(axis=1)
        np.testing.assert_allclose(ours - ours.mean(), brute - brute.mean(), rtol=0, atol=1e-10)


def test_exposure_sample_is_seeded_and_proportional() -> None:
    """Same seed, same rows; a row with 3x the exposure is drawn about 3x as often (ratio of counts
    within 3 % on 200,000 draws, sampling error ~0.6 %)."""
    exposure = np.array([1.0, 3.0])
    a = exposure_sample(exposure, 200_000, seed=5)
    assert np.array_equal(a, exposure_sample(exposure, 200_000, seed=5))
    counts = np.bincount(a, minlength=2)
    assert counts[1] / counts[0] == pytest.approx(3.0, rel=0.03)


def test_quantile_grid_and_cells_on_a_hand_example() -> None:
    """Values 1..5 with exposures 1, 1, 2, 4, 2 (shares .1 .1 .2 .4 .2, cumulative .1 .2 .4 .8 1):
    at k/5 = 0, .2, .4, .6, .8 the first value whose cumulative share exceeds k/5 is 1, 3, 4, 4, 5,
    so the grid is 1, 3, 4, 5 and its cells [1,3), [3,4), [4,5), [5,inf) hold 2, 2, 4, 2."""
    values = np.array([1.0, 2.0, 3.0, 4.0, 5.0])
    exposure = np.array([1.0, 1.0, 2.0, 4.0, 2.0])
    grid = quantile_grid(values, exposure, 5)
    assert grid.tolist() == [1.0, 3.0, 4.0, 5.0]
    assert cell_exposure(grid, values, exposure).tolist() == [2.0, 2.0, 4.0, 2.0]


def test_numeric_bands_start_at_the_first_grid_value_of_each_band() -> None:
    """A two-step curve on grid 10, 20, ..., 80 (steps after 30 and 60) with max 3 bands gives edges
    at the upper grid values 40 and 70: bands (-inf, 40), [40, 70), [70, inf)."""
    grid = np.arange(10.0, 90.0, 10.0)
    effect = np.array([0, 0, 0, 1, 1, 1, 2, 2], dtype=float)
    banding = numeric_banding(Curve("x", grid, effect, np.ones(8)), "none", max_bands=3, min_share=0.0)
    assert banding.edges.tolist() == [40.0, 70.0]
    assert banding.codes(np.array([-5.0, 39.9, 40.0, 69.0, 70.0, 1e9])).tolist() == [0, 0, 1, 1, 2, 2]


def test_promised_curve_is_made_monotone_before_banding() -> None:
    """A curve 0, 0.5, 0.3, 1.0 promised increasing: isotonic pools 0.5 and 0.3 to 0.4, so with
    4 bands allowed the second and third points share a band (3 bands, edges at 2 and 4)."""
    curve = Curve("x", np.array([1.0, 2.0, 3.0, 4.0]), np.array([0.0, 0.5, 0.3, 1.0]), np.ones(4))
    assert numeric_banding(curve, "increasing", 4, 0.0).edges.tolist() == [2.0, 4.0]
    assert numeric_banding(curve, "none", 4, 0.0).edges.tolist() == [2.0, 3.0, 4.0]


def test_unordered_levels_ordered_by_effect_and_thin_levels_merged() -> None:
    """Hand example: levels A..E with effects .3, -.2, .1, .5, .12 and exposure shares .30, .30, .01,
    .30, .09, minimum share 5 %. Effect order B, C, E, A, D; only C (1 %) is thin; its neighbours are
    B (distance .30) and E (distance .02), so C joins E. Groups in effect order: {B}, {C, E}, {A}, {D}."""
    effect = np.array([0.3, -0.2, 0.1, 0.5, 0.12])
    weight = np.array([0.30, 0.30, 0.01, 0.30, 0.09])
    assert merge_thin_levels(effect, weight, 0.05).tolist() == [2, 0, 1, 3, 1]
    banding = categorical_banding(
        Curve("k", np.arange(5), effect, weight),
        ("A", "B", "C", "D", "E"),
        "none",
        ordered=False,
        max_bands=8,
        min_share=0.05,
    )
    assert banding.labels() == ["B", "C+E", "A", "D"]


def test_thin_merging_cascades_until_no_group_is_thin() -> None:
    """Shares .02, .02, .96 with a 5 % minimum (effects 0, 1, 2): the thinnest first (level 0, tie
    broken by effect order) joins its only neighbour, level 1; the pair (4 %) is still thin and joins
    level 2, leaving one group."""
    groups = merge_thin_levels(np.array([0.0, 1.0, 2.0]), np.array([0.02, 0.02, 0.96]), 0.05)
    assert groups.tolist() == [0, 0, 0]


def test_ordered_levels_without_exposure_take_the_previous_band() -> None:
    """Levels L1..L4 where L3 has no training exposure (absent from the curve): with one band per
    level allowed, L3 joins L2's band."""
    curve = Curve("b", np.array([0, 1, 3]), np.array([0.0, 0.4, 0.9]), np.ones(3))
    banding = categorical_banding(
        curve, ("L1", "L2", "L3", "L4"), "increasing", ordered=True, max_bands=8, min_share=0.0
    )
    assert banding.band_of_level.tolist() == [0, 1, 1, 2]


def _statsmodels_relativities(
    x_codes: dict, sizes: dict, bases: dict, pairs: list, w: np.ndarray, y: np.ndarray
) -> np.ndarray:
    """exp(coefficients) of statsmodels' Poisson GLM on the rows, treatment coding as in the refit."""
    columns = [np.ones(len(y))]
    for name, code in x_codes.items():
        columns += [(code == k).astype(float) for k in range(sizes[name]) if k != bases[name]]
    for a, b in pairs:
        columns += [
            ((x_codes[a] == i) & (x_codes[b] == j)).astype(float)
            for i in range(sizes[a])
            if i != bases[a]
            for j in range(sizes[b])
            if j != bases[b]
        ]
    fit = sm.GLM(y, np.column_stack(columns), family=sm.families.Poisson(), var_weights=w).fit(tol=1e-13)
    return np.exp(fit.params)


def test_refit_equals_statsmodels_poisson_on_the_rows() -> None:
    """Banded refit with a two-way table equals statsmodels' row-level Poisson GLM with var_weights
    (response = an invented boosted prediction per exposure unit): relativities to 1e-8 relative;
    the two-way table's base row and column are exactly 1."""
    rng = np.random.default_rng(11)
    n = 5000
    codes = {"a": rng.integers(0, 4, n), "b": rng.integers(0, 3, n), "c": rng.integers(0, 5, n)}
    sizes, bases = {"a": 4, "b": 3, "c": 5}, {"a": 1, "b": 0, "c": 2}
    w = rng.uniform(0.1, 1.0, n)
    y = (
        np.exp(
            0.2 * codes["a"]
            - 0.1 * codes["b"]
            + 0.05 * codes["c"]
            + 0.3 * (codes["a"] == 3) * (codes["b"] == 2)
            + rng.normal(0, 0.3, n)
        )
        * 100
    )
    fit = refit(codes, sizes, bases, [("a", "b")], w, y)
    reference = _statsmodels_relativities(codes, sizes, bases, [("a", "b")], w, y)
    ours = np.concatenate(
        [[np.exp(fit.intercept)]]
        + [np.delete(fit.relativities[k], bases[k]) for k in "abc"]
        + [fit.two_way[("a", "b")][[0, 2, 3]][:, [1, 2]].ravel()]
    )
    np.testing.assert_allclose(ours, reference, rtol=1e-8)
    table = fit.two_way[("a", "b")]
    assert np.all(table[bases["a"], :] == 1.0) and np.all(table[:, bases["b"]] == 1.0)
    assert fit.aliased == []


def test_empty_two_way_cell_is_reported_as_aliased() -> None:
    """A pair of bands that never occurs together has no estimate: its term is dropped by name and its
    relativity is 1; the other relativities still equal statsmodels on the kept columns (1e-8)."""
    rng = np.random.default_rng(3)
    n = 3000
    codes = {"a": rng.integers(0, 3, n), "b": rng.integers(0, 3, n)}
    empty = (codes["a"] == 2) & (codes["b"] == 2)
    codes = {k: v[~empty] for k, v in codes.items()}
    w = np.ones((~empty).sum())
    y = np.exp(0.1 * codes["a"] + 0.2 * codes["b"] + rng.normal(0, 0.2, w.size))
    fit = refit(codes, {"a": 3, "b": 3}, {"a": 0, "b": 0}, [("a", "b")], w, y)
    assert fit.aliased == ["a:b[2, 2]"]
    assert fit.two_way[("a", "b")][2, 2] == 1.0
    columns = (
        [np.ones(w.size)]
        + [(codes[k] == j).astype(float) for k in "ab" for j in (1, 2)]
        + [((codes["a"] == i) & (codes["b"] == j)).astype(float) for i, j in ((1, 1), (1, 2), (2, 1))]
    )
    reference = np.exp(sm.GLM(y, np.column_stack(columns), family=sm.families.Poisson()).fit(tol=1e-13).params)
    ours = [
        np.exp(fit.intercept),
        *fit.relativities["a"][1:],
        *fit.relativities["b"][1:],
        fit.two_way[("a", "b")][1, 1],
        fit.two_way[("a", "b")][1, 2],
        fit.two_way[("a", "b")][2, 1],
    ]
    np.testing.assert_allclose(ours, reference, rtol=1e-8)


def _reversing_case() -> tuple[dict, np.ndarray, np.ndarray]:
    """Cells of a promised-increasing x (3 bands) and z (2 bands), correlated: x band 1 is mostly z=1,
    band 2 mostly z=0. The response rises with x on average over z (1, 1.225, 1.25: exposure-weighted
    over z's shares .5, .5) but only band 1 gains from z=1, so the main-effects fit reverses x."""
    exposure = np.array([[50, 50], [10, 90], [90, 10]], dtype=float)
    response = np.array([[1.0, 1.0], [1.0, 1.45], [1.25, 1.25]])
    x, z = np.meshgrid(np.arange(3), np.arange(2), indexing="ij")
    return {"x": x.ravel(), "z": z.ravel()}, exposure.ravel(), response.ravel()


def test_pooled_refit_is_monotone_on_a_case_built_to_reverse() -> None:
    """Unpooled, statsmodels' main-effects fit gives x relativities 1, 1.3599, 1.2929 (a reversal of
    log(1.3599/1.2929) = 0.0505, asserted to 1e-4); the pooled refit merges x bands 1 and 2 once and
    is then monotone, its relativity ratio equals statsmodels' fit on the merged bands (1e-8; the
    merged band, now the most exposed, becomes the base)."""
    values, w, y = _reversing_case()
    bandings = {
        "x": Banding("x", "increasing", edges=np.array([1.0, 2.0])),
        "z": Banding("z", "none", edges=np.array([1.0])),
    }
    plain = refit(values, {"x": 3, "z": 2}, {"x": 0, "z": 0}, [], w, y)
    reference = _statsmodels_relativities(values, {"x": 3, "z": 2}, {"x": 0, "z": 0}, [], w, y)
    np.testing.assert_allclose(plain.relativities["x"][1:], reference[1:3], rtol=1e-8)
    np.testing.assert_allclose(plain.relativities["x"], [1.0, 1.3599, 1.2929], atol=1e-4)
    reversal = worst_reversal(bandings, plain, decimals=3)
    assert reversal.factor == "x" and reversal.band == 1
    assert reversal.amount == pytest.approx(np.log(1.35992424 / 1.29285262), abs=1e-6)

    pooled = pooled_refit(bandings, {"x": values["x"].astype(float), "z": values["z"].astype(float)}, [], w, y, 3)
    assert [m["factor"] for m in pooled.merges] == ["x"]
    assert pooled.bandings["x"].edges.tolist() == [1.0]
    rel = pooled.fit.relativities["x"]
    assert np.all(np.diff(rel) >= 0)
    merged = {"x": np.minimum(values["x"], 1), "z": values["z"]}
    reference = _statsmodels_relativities(merged, {"x": 2, "z": 2}, {"x": 0, "z": 0}, [], w, y)
    np.testing.assert_allclose(rel[1] / rel[0], reference[1], rtol=1e-8)


def test_promise_is_checked_through_the_two_way_table() -> None:
    """A promised factor whose main effect rises (1, 1.2) but whose two-way table with z at z's second
    band is 0.8 in x's second band: main x two-way = 0.96 < 1 there, a reversal of log(1/0.96)."""
    from premiumlab.tabulation.refit import Refit

    fit = Refit(
        {"x": np.array([1.0, 1.2]), "z": np.array([1.0, 1.1])},
        {("x", "z"): np.array([[1.0, 1.0], [1.0, 0.8]])},
        {"x": 0, "z": 0},
        [],
        1,
        0.0,
    )
    np.testing.assert_allclose(effect_grid("x", fit.relativities, fit.two_way), [[1.0, 1.0], [1.2, 0.96]])
    bandings = {
        "x": Banding("x", "increasing", edges=np.array([1.0])),
        "z": Banding("z", "none", edges=np.array([1.0])),
    }
    reversal = worst_reversal(bandings, fit, decimals=3)
    assert reversal.factor == "x" and reversal.amount == pytest.approx(np.log(1 / 0.96), abs=1e-12)


# ---------------------------------------------------------------------------------------------
# tabulate on the session's demo run (a 20,000-policy motor book with a two-way table)


@pytest.fixture(scope="module")
def gbm_table(demo_run, tmp_path_factory) -> dict:
    from premiumlab.tabulation.from_run import tabulate

    out = tmp_path_factory.mktemp("tabulate") / "table"
    return {"summary": tabulate(demo_run["run"], out), "path": out}


def _training_frame(demo_run) -> tuple:
    from premiumlab.runs.rundir import open_run
    from premiumlab.tabulation.from_run import rating_frame, reread_book

    run = open_run(demo_run["run"])
    book = reread_book(run)
    rows = np.flatnonzero(~book.holdout)
    return run, book, rows, rating_frame(book, run.spec, rows)


def test_table_total_on_the_training_book_equals_the_experience(demo_run, gbm_table) -> None:
    """Rated by the table alone (rating_tables.rate), the training rows' pure premium adds up to their
    observed claim amounts (relative 1e-9); base bands and levels are exactly 1; the promised factor
    (bonus_class, increasing) never decreases band to band, also through no two-way table."""
    import rating_tables

    table = rating_tables.load(gbm_table["path"])
    run, book, rows, frame = _training_frame(demo_run)
    pure = rating_tables.pure_premium(table, frame, run.spec.columns.exposure)
    assert pure.sum() == pytest.approx(book.claim_amount[rows].sum(), rel=1e-9)
    for factor in table.main_factors:
        assert (factor.relativity == 1.0).any(), factor.name
    bonus = table.factor("bonus_class")
    assert np.all(np.diff(bonus.relativity) >= 0)
    assert rating_tables.audit(table) == []
    assert [f.name for f in table.interactions] == ["driver_age__vehicle_power"]


def test_table_fidelity_equals_sklearn_tweedie_deviance(demo_run, gbm_table) -> None:
    """The table's holdout mean deviance in fidelity.json equals scikit-learn's
    `mean_tweedie_deviance` on the table's own holdout premiums (relative 1e-9, same power and weights);
    the boosted model's equals it on predictions.parquet (1e-9)."""
    from sklearn.metrics import mean_tweedie_deviance

    import rating_tables
    from premiumlab.runs.rundir import open_run
    from premiumlab.tabulation.from_run import rating_frame, reread_book

    fid = gbm_table["summary"]["fidelity"]
    run = open_run(demo_run["run"])
    book = reread_book(run)
    held = np.flatnonzero(book.holdout)
    table = rating_tables.load(gbm_table["path"])
    frame = rating_frame(book, run.spec, held)
    mu = rating_tables.pure_premium(table, frame, run.spec.columns.exposure) / book.exposure[held]
    y, w = book.claim_amount[held] / book.exposure[held], book.exposure[held]
    power = fid["tweedie_power"]
    assert fid["subset"] == "holdout" and fid["rows"] == held.size
    assert fid["policies"] == np.unique(book.policy[held]).size < held.size
    assert fid["models"]["table"]["mean_deviance"] == pytest.approx(
        mean_tweedie_deviance(y, mu, sample_weight=w, power=power), rel=1e-9
    )
    gbm = run.predictions()["gbm_pure_premium"].to_numpy()[held]
    assert fid["models"]["gbm"]["mean_deviance"] == pytest.approx(
        mean_tweedie_deviance(y, gbm, sample_weight=w, power=power), rel=1e-9
    )
    g = {k: v["gini"] for k, v in fid["models"].items()}
    source = fid["retention"]["source"]
    assert fid["retention"]["gini_table_over_source"] == pytest.approx(g["table"] / g[source], rel=1e-12)
    gap = g[source] - g["glm"]
    assert fid["retention"]["gini_source_minus_glm"] == pytest.approx(gap, rel=1e-12)
    kept = fid["retention"]["source_lift_over_glm_kept"]
    assert kept == (pytest.approx((g["table"] - g["glm"]) / gap, rel=1e-12) if gap > 0 else None)


def test_rate_level_statements(demo_run, gbm_table) -> None:
    """Rounding off-balance = (unrounded-relativity base rate) / base rate - 1, since both solve the
    same target (1e-12); it is below 0.5 % for 3 decimals; the indicated overall change is the gross
    total over the current premium total minus 1 (1e-12); the minimum premium's off-balance is the
    gross total with the minimum over the gross total without it, minus 1, recomputed here with the
    loadings of the fundamental insurance equation (1e-9)."""
    level = gbm_table["summary"]["rate_level"]
    assert level["rounding_off_balance"] == pytest.approx(
        level["base_rate_unrounded_relativities"] / level["base_rate"] - 1, abs=1e-12
    )
    assert abs(level["rounding_off_balance"]) < 0.005
    assert level["indicated_overall_change"] == pytest.approx(
        level["gross_premium_total"] / level["current_premium_total"] - 1, abs=1e-12
    )
    import rating_tables

    table = rating_tables.load(gbm_table["path"])
    _, _, _, frame = _training_frame(demo_run)
    rated = rating_tables.rate(table, frame, "exposure")
    exposure = frame["exposure"].to_numpy(float)
    lo = table.loadings
    rate = rating_tables.pure_premium(table, frame, "exposure") / exposure  # per full term
    term = (rate * (1 + lo.lae_ratio) + lo.fixed_expense) / (1 - lo.variable_expense - lo.profit)
    without = np.round(term * exposure, table.rounding.premium_decimals)
    expected = rated["gross_premium"].sum() / without.sum() - 1.0
    assert level["minimum_premium_off_balance"] == pytest.approx(expected, abs=1e-9)
    assert level["rows_at_minimum"] == int((term < lo.minimum_premium).sum()) == int(rated["at_minimum"].sum())


def test_tabulate_is_deterministic_and_fast(demo_run, gbm_table, tmp_path) -> None:
    """A second tabulate of the same run writes byte-identical table.json, factor CSVs and
    fidelity.json; each took under 60 s on the 20,000-policy book."""
    from premiumlab.tabulation.from_run import tabulate

    again = tabulate(demo_run["run"], tmp_path / "again")
    first = gbm_table["path"]
    names = ["table.json", "fidelity.json"] + [f"factors/{p.name}" for p in (first / "factors").iterdir()]
    for name in names:
        assert (first / name).read_bytes() == (tmp_path / "again" / name).read_bytes(), name
    assert gbm_table["summary"]["seconds"] < 60 and again["seconds"] < 60


def test_glm_export_keeps_the_glm_relativities(demo_run, tmp_path) -> None:
    """`model="glm"`: every factor outside the spec's two-way table (driver_age x vehicle_power) has
    the run's GLM relativity as its indicated one (1e-12), and the selected one is it rounded to 3
    decimals; the two paired factors' are the GLM's times the offset refit's (not equal); the table
    carries the two-way table, which lowers the holdout deviance below the GLM's (161.85 against 163.56
    when written, 7,561 holdout rows) with a Gini within 0.01 of it (0.452 against 0.460)."""
    import json

    import rating_tables
    from premiumlab.tabulation.from_run import tabulate

    summary = tabulate(demo_run["run"], tmp_path / "glm", model="glm")
    table = rating_tables.load(tmp_path / "glm")
    glm = json.loads((demo_run["run"] / "models" / "glm_pure_premium.json").read_text())["relativities"]
    paired = {"driver_age", "vehicle_power"}
    for factor in table.main_factors:
        expected = np.array(list(glm[factor.name].values()))
        if factor.name in paired:
            assert not np.allclose(factor.indicated, expected, rtol=1e-3)
            continue
        np.testing.assert_allclose(factor.indicated, expected, rtol=1e-12)
        np.testing.assert_array_equal(factor.relativity, np.round(expected, 3))
    g = summary["fidelity"]["models"]
    assert g["table"]["mean_deviance"] < g["glm"]["mean_deviance"]
    assert abs(g["table"]["gini"] - g["glm"]["gini"]) < 0.01
    assert table.provenance["model"] == "glm_pure_premium"
    assert [tuple(f.of) for f in table.interactions] == [("driver_age", "vehicle_power")]


def test_current_premium_target_follows_the_fundamental_insurance_equation(demo_run, tmp_path) -> None:
    """Target = current premium x (1 + 5 %) with LAE 10 %, fixed expense 30 per exposure unit, variable
    expense 20 % and profit 5 %. By the fundamental insurance equation (Werner and Modlin, Basic
    Ratemaking: premium = (pure premium incl. LAE + fixed expense) / (1 - variable - profit); formula as
    published, figures constructed for this test) the rated gross premium of the training rows adds up
    to that target (relative 1e-6: gross is rounded to cents), and the permissible loss ratio is
    pure target / premium target."""
    import json
    import shutil

    import rating_tables
    from premiumlab.tabulation.from_run import tabulate

    run_copy = demo_run["base"] / "run_current_premium"
    if not run_copy.exists():
        shutil.copytree(demo_run["run"], run_copy)
        manifest = json.loads((run_copy / "run.json").read_text())
        manifest["spec"]["table"] = {
            **manifest["spec"].get("table", {}),
            "target": "current_premium",
            "overall_change": 0.05,
        }
        manifest["spec"]["loadings"] = {
            "lae_ratio": 0.10,
            "fixed_expense": 30.0,
            "variable_expense": 0.20,
            "profit": 0.05,
        }
        (run_copy / "run.json").write_text(json.dumps(manifest))
    summary = tabulate(run_copy, tmp_path / "cp")
    level = summary["rate_level"]
    target = level["target"]
    run, book, rows, frame = _training_frame(demo_run)
    current = book.current_premium[rows].sum()
    assert target["target_premium_total"] == pytest.approx(current * 1.05, rel=1e-12)
    pure = (current * 1.05 * (1 - 0.20 - 0.05) - 30.0 * book.exposure[rows].sum()) / 1.10
    assert target["total_pure_premium"] == pytest.approx(pure, rel=1e-12)
    assert target["permissible_loss_ratio"] == pytest.approx(pure / (current * 1.05), rel=1e-12)
    rated = rating_tables.rate(rating_tables.load(tmp_path / "cp"), frame, run.spec.columns.exposure)
    assert rated["gross_premium"].sum() == pytest.approx(current * 1.05, rel=1e-6)
    assert level["indicated_overall_change"] == pytest.approx(0.05, abs=1e-5)


def test_a_changed_book_is_refused(demo_run, tmp_path) -> None:
    """A book whose bytes differ from the run's (one exposure changed) is refused with an InputError
    that names the file and sha256, and nothing is written at the target."""
    from premiumlab._core.errors import InputError
    from premiumlab.tabulation.from_run import tabulate

    frame = pd.read_parquet(demo_run["book"])
    frame.loc[0, "exposure"] = frame.loc[0, "exposure"] * 0.5
    changed = tmp_path / "changed.parquet"
    frame.to_parquet(changed, index=False)
    with pytest.raises(InputError, match=r"changed\.parquet: sha256"):
        tabulate(demo_run["run"], tmp_path / "t", book=changed)
    assert not (tmp_path / "t").exists()
