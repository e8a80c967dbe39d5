"""Interaction ranking: Friedman's H computed from the trees against brute-force partial dependence
and against hand-computed cases, the bootstrap, the noise test, and recovery of an invented
interaction from a simulated book (with no additive pair flagged)."""

from __future__ import annotations

import lightgbm as lgb
import numpy as np
import pandas as pd
import pytest
from premiumlab.scenarios import __file__ as scenarios_init
from scipy import stats

from premiumlab._core.errors import InputError
from premiumlab.book.gbm_options import GbmOptions
from premiumlab.cli.format import interaction_line
from premiumlab.models.gbm.fit import fit_target
from premiumlab.models.gbm.training import GbmInputs, prepare_training
from premiumlab.models.trees.interactions import (
    NEGLIGIBLE_STRENGTH,
    NOISE_MARGIN,
    noise_test,
    null_books,
    pair_statistics,
    rank_interactions,
    top_factors_by_gain,
)
from premiumlab.models.trees.parser import Tree, Trees
from premiumlab.simulation.scenario_file import load_scenario
from premiumlab.simulation.simulator import generate

NAMES = ["a", "b", "c", "d"]


@pytest.fixture(scope="module")
def booster_and_sample() -> tuple[lgb.Booster, np.ndarray]:
    """A LightGBM Poisson model on invented data: a numeric factor with missing values, two
    categoricals (codes) and a uniform, with a product interaction of a and b."""
    rng = np.random.default_rng(1)
    rows = 4000
    x = np.column_stack(
        [rng.normal(size=rows), rng.integers(0, 6, rows), rng.uniform(size=rows), rng.integers(0, 4, rows)]
    ).astype(float)
    x[rng.uniform(size=rows) < 0.1, 0] = np.nan
    log_mu = -1 + 0.5 * np.nan_to_num(x[:, 0]) * (x[:, 1] == 2) + 0.3 * x[:, 2] + 0.2 * (x[:, 3] == 1)
    data = lgb.Dataset(x, label=rng.poisson(np.exp(log_mu)), categorical_feature=[1, 3], feature_name=NAMES)
    params = {"objective": "poisson", "num_leaves": 15, "min_data_in_leaf": 20, "verbosity": -1, "num_threads": 1}
    return lgb.train(params, data, 40), x


def _brute_force(booster: lgb.Booster, sample: np.ndarray) -> dict[tuple[str, str], tuple[float, float, float]]:
    """Strength, H^2 and share of every pair by the definition: each PD averages the model's raw score
    over all n sample rows as background (n^2 predictions), centred over the sample."""
    n = len(sample)

    def pd_of(columns: list[int]) -> np.ndarray:
        rows = np.tile(sample, (n, 1))  # row a * n + b: background row b with point a's values of `columns`
        for c in columns:
            rows[:, c] = np.repeat(sample[:, c], n)
        values = booster.predict(rows, raw_score=True).reshape(n, n).mean(axis=1)
        return values - values.mean()

    score = booster.predict(sample, raw_score=True)
    out = {}
    for j, k in [(0, 1), (0, 2), (0, 3), (1, 2), (1, 3), (2, 3)]:
        joint = pd_of([j, k])
        r = joint - pd_of([j]) - pd_of([k])
        out[(NAMES[j], NAMES[k])] = (
            float(np.sqrt(np.mean(r**2))),
            float(np.sum(r**2) / np.sum(joint**2)),
            float(np.sum(r**2) / np.sum((score - score.mean()) ** 2)),
        )
    return out


def test_tree_computation_matches_brute_force_partial_dependence(booster_and_sample):
    """The exact computation from the parsed trees equals the definition (Friedman and Popescu,
    2008, Ann. Appl. Stat., eq. 44 for H^2; recalled from memory) computed by brute force with
    LightGBM's own predictions on n^2 rows, to 1e-9 relative, for numeric, categorical and missing values; and a bootstrap replicate equals the
    brute force on the resampled sample (its rows repeated as drawn)."""
    booster, x = booster_and_sample
    trees = Trees.from_text(booster.model_to_string())
    sample = x[:50]
    found = pair_statistics(trees, sample, NAMES, replicates=2, seed=5)
    expected = _brute_force(booster, sample)
    for p, pair in enumerate(found.pairs):
        got = (found.strength[p, 0], found.h2[p, 0], found.share[p, 0])
        assert got == pytest.approx(expected[pair], rel=1e-9, abs=1e-12)
    drawn = np.random.default_rng(5).multinomial(50, np.full(50, 1 / 50), size=2)[0]
    resampled = _brute_force(booster, np.repeat(sample, drawn, axis=0))
    for p, pair in enumerate(found.pairs):
        got = (found.strength[p, 1], found.h2[p, 1], found.share[p, 1])
        assert got == pytest.approx(resampled[pair], rel=1e-9, abs=1e-12)


def _split(feature: int, left: int, right: int) -> dict:
    """One numeric node `x <= 0.5` (missing type None); children < 0 are leaves ~child."""
    return {"feature": feature, "left": left, "right": right}


def _tree(index: int, nodes: list[dict], leaves: list[float]) -> Tree:
    return Tree(
        index=index,
        split_feature=np.array([n["feature"] for n in nodes], dtype=np.int64),
        threshold=np.full(len(nodes), 0.5),
        decision_type=np.zeros(len(nodes), dtype=np.int64),
        left_child=np.array([n["left"] for n in nodes], dtype=np.int64),
        right_child=np.array([n["right"] for n in nodes], dtype=np.int64),
        leaf_value=np.array(leaves),
        cat_boundaries=np.empty(0, dtype=np.int64),
        cat_threshold=np.empty(0, dtype=np.int64),
    )


#: 16 rows: a in {0, 1} half each; b = 1 in a quarter of the rows of each a (so a and b are
#: independent in the sample); c arbitrary.
BALANCED = np.array([[a, b, c] for a in (0, 1) for b, c in zip((0, 0, 0, 0, 0, 0, 1, 1), range(8))], dtype=float)


def test_product_model_has_the_hand_computed_h():
    """Raw score F = 0.8 a b (one tree: split on a, then on b). With the sample means p_a = 1/2,
    p_b = 1/4 and a, b independent in the sample: PD_a = 0.8 a p_b, PD_b = 0.8 b p_a, so the
    centred residual is 0.8 (a - p_a)(b - p_b) and (worked by hand)
    strength = 0.8 sqrt(p_a (1 - p_a) p_b (1 - p_b)) = 0.8 sqrt(3) / 8,
    H^2 = p_a (1 - p_a) p_b (1 - p_b) / (p_a p_b (1 - p_a p_b)) = (3/64) / (7/64) = 3/7, share = 3/7
    (F is the product alone). Pairs with c: 0. Tolerance 1e-12."""
    product = _tree(0, [_split(0, -1, 1), _split(1, -2, -3)], [0.0, 0.0, 0.8])
    found = pair_statistics(Trees((product,), ("a", "b", "c")), BALANCED, ["a", "b", "c"])
    assert found.pairs == [("a", "b"), ("a", "c"), ("b", "c")]
    assert found.strength[0, 0] == pytest.approx(0.8 * np.sqrt(3) / 8, abs=1e-12)
    assert found.h2[0, 0] == pytest.approx(3 / 7, abs=1e-12)
    assert found.share[0, 0] == pytest.approx(3 / 7, abs=1e-12)
    assert np.abs(found.strength[1:, 0]).max() < 1e-12


def test_additive_model_has_no_interaction(booster_and_sample):
    """A raw score f(a) + g(b) (stumps on a and on b, hand-made) has strength and H^2 exactly 0 for
    every pair, and so does a LightGBM model trained with every factor alone in its trees
    (interaction_constraints) on data with a product interaction. Tolerance 1e-12."""
    stumps = (_tree(0, [_split(0, -1, -2)], [0.1, -0.3]), _tree(1, [_split(1, -1, -2)], [0.2, 0.5]))
    found = pair_statistics(Trees(stumps, ("a", "b", "c")), BALANCED, ["a", "b", "c"])
    assert np.abs(found.strength).max() < 1e-12 and np.abs(found.h2).max() < 1e-12
    booster, x = booster_and_sample
    params = {"objective": "poisson", "num_leaves": 15, "verbosity": -1, "num_threads": 1}
    additive = lgb.train(
        {**params, "interaction_constraints": [[0], [1], [2], [3]]},
        lgb.Dataset(x, label=(booster.predict(x) > 0.5).astype(float), categorical_feature=[1, 3], feature_name=NAMES),
        30,
    )
    found = pair_statistics(Trees.from_text(additive.model_to_string()), x[:300], NAMES)
    assert np.abs(found.strength).max() < 1e-12


def test_bootstrap_is_seeded_and_its_interval_holds_the_sample_figure(booster_and_sample):
    """The same seed gives the same replicates; the 5-95 % interval of 40 replicates contains the
    sample's strength of the product pair (a, b)."""
    booster, x = booster_and_sample
    trees = Trees.from_text(booster.model_to_string())
    first = pair_statistics(trees, x[:400], NAMES, replicates=40, seed=3)
    again = pair_statistics(trees, x[:400], NAMES, replicates=40, seed=3)
    assert np.array_equal(first.strength, again.strength)
    low, high = np.percentile(first.strength[0, 1:], [5, 95])
    assert first.pairs[0] == ("a", "b") and low <= first.strength[0, 0] <= high


def test_noise_test_by_hand():
    """Two pairs, three refits. Pair 1: observed 0.2 against null 0.04, 0.05, 0.06; pair 2: 0.03
    against 0.02, 0.03, 0.045. Logs, per-pair null means, pooled sd on 4 df, t with sqrt(1 + 1/3)
    and Student's upper tail (scipy) worked out here; Bonferroni over 2 pairs at 0.05."""
    observed = np.array([0.2, 0.03])
    null = np.array([[0.04, 0.02], [0.05, 0.03], [0.06, 0.045]])
    result = noise_test(observed, null, level=0.05)
    logs = np.log(null)
    centre = logs.mean(axis=0)
    sd = np.sqrt(((logs - centre) ** 2).sum() / 4)
    t = (np.log(observed) - centre) / (sd * np.sqrt(4 / 3))
    assert result.degrees_of_freedom == 4 and result.log_sd == pytest.approx(sd, rel=1e-12)
    assert result.p_value == pytest.approx(stats.t.sf(t, 4), rel=1e-12)
    assert result.stands_out.tolist() == [True, False]


def test_noise_test_needs_the_margin_over_the_pairs_own_noise():
    """A pair far beyond its null mean in t (p 8e-6 < 0.05 / 2) but under NOISE_MARGIN (2) times its
    own largest null strength (0.1 < 2 x 0.06) does not stand out; one at 0.2 against nulls of at most
    0.052 does. The margin is the pair's own: pair 2's nulls do not hold pair 1 back."""
    result = noise_test(np.array([0.2, 0.1]), np.array([[0.05, 0.058], [0.051, 0.06], [0.052, 0.059]]))
    assert result.p_value[1] < 0.05 / 2 and NOISE_MARGIN == 2.0
    assert result.stands_out.tolist() == [True, False]


def test_noise_test_floors_negligible_strengths():
    """Strengths under NEGLIGIBLE_STRENGTH count as the floor: a pair observed under it never stands
    out; with every null at the floor, a pair above it stands out (p = 0) and one at it does not."""
    null = np.full((3, 2), NEGLIGIBLE_STRENGTH / 10)
    result = noise_test(np.array([5 * NEGLIGIBLE_STRENGTH, NEGLIGIBLE_STRENGTH / 2]), null)
    assert result.degrees_of_freedom == 0 and result.p_value.tolist() == [0.0, 1.0]
    with pytest.raises(InputError, match="at least two refits"):
        noise_test(np.array([0.1]), np.array([[0.1]]))


def test_null_books_keep_the_surrogate_mean_and_the_claim_count():
    """Over 400 books of 2,000 rows, the mean simulated label of each row is the surrogate's mean
    (pure premium, power 1.6; tolerance: 4 standard errors of the mean over all rows, summed), and
    the expected claim count equals the book's."""
    rng = np.random.default_rng(8)
    rows = 2000
    weight = rng.uniform(0.2, 1.0, rows)
    mean = np.exp(rng.normal(np.log(300.0), 0.5, rows))
    claims = rng.poisson(weight * mean / 2000.0)
    label = np.array([rng.gamma(2.0, 1000.0, c).sum() for c in claims]) / weight
    books = np.array(list(null_books(label, weight, claims, mean, 1.6, 400, rng)))
    total = (books * weight).sum(axis=1)
    assert abs(total.mean() - (mean * weight).sum()) < 4 * total.std() / np.sqrt(400)
    frequency = next(null_books(claims / weight, weight, claims, mean / 2000.0, 1.0, 1, rng))
    assert np.allclose(frequency * weight, np.round(frequency * weight))


@pytest.fixture(scope="module")
def simulated_van_book() -> tuple[GbmInputs, GbmOptions]:
    """The invented light-commercial-van scenario (scenarios/interaction.toml: drivers with under
    5 years' experience in vans of 4,500 kg or more claim 2.5 x as often) with 20,000 policies;
    region and usage act only through main effects."""
    scenario = load_scenario(scenarios_init.replace("__init__.py", "interaction.toml"))
    book = generate(scenario, policies=20_000, seed=2).book
    features = pd.DataFrame(
        {
            "driver_experience": book["driver_experience"].astype(float),
            "gross_weight": book["gross_weight"].astype(float),
            "region": pd.Categorical(book["region"]),
            "usage": pd.Categorical(book["usage"]),
        }
    )
    inputs = GbmInputs(
        features,
        {},
        book["exposure"].to_numpy(),
        book["claim_count"].to_numpy(),
        book["claim_amount"].to_numpy(),
        pd.factorize(book["policy_id"])[0],
    )
    options = GbmOptions(
        folds=3,
        max_settings=1,
        max_rounds=300,
        early_stopping_rounds=20,
        num_threads=1,
        grid=({"num_leaves": 7, "min_data_in_leaf": 50, "learning_rate": 0.1, "lambda_l2": 1.0},),
    )
    return inputs, options


def test_reference_flags_the_simulated_interaction_and_no_additive_pair(simulated_van_book):
    """Simulator recovery (invented data): on the boosted frequency model, the true pair
    (driver_experience, gross_weight) ranks first, stands out from the refits (p < 0.05 / 6), and is
    the only candidate; its strength is at least twice the largest of its null strengths."""
    inputs, options = simulated_van_book
    model = fit_target(inputs, "frequency", options)
    ranking = rank_interactions(model, prepare_training(inputs, "frequency", options), inputs.claim_count, seed=4)
    first = ranking["pairs"][0]
    assert set(first["pair"]) == {"driver_experience", "gross_weight"}
    assert first["stands_out"] and first["p_value"] < 0.05 / 6
    assert first["strength"] >= 2 * max(first["null_strength"])
    assert ranking["candidates"] == [first["pair"]]
    assert not any(p["stands_out"] for p in ranking["pairs"][1:])
    assert first["strength_interval"][0] <= first["strength"] <= first["strength_interval"][1]
    line = interaction_line(ranking)
    assert "stands out from noise" in line and "to tabulate it," in line


def test_candidates_line_names_the_spec_setting():
    """The `fit` line offers the candidates as the spec's [table] interactions, and says so when none."""
    pair = {"pair": ["occupancy", "construction"], "strength": 0.12, "p_value": 1e-6, "stands_out": True}
    ranking = {"model": "pure_premium", "factors": ["occupancy", "construction", "territory"], "pairs": [pair]}
    line = interaction_line({**ranking, "candidates": [pair["pair"]]})
    assert '[table] interactions = [["occupancy", "construction"]]' in line and "\n" not in line
    none = interaction_line({**ranking, "pairs": [{**pair, "stands_out": False}], "candidates": []})
    assert "no pair of the 3 top factors" in none


def test_checked_inputs(booster_and_sample):
    """A factor the model does not have is named; one factor is refused; top factors by gain are
    features of the model with a gain."""
    booster, x = booster_and_sample
    trees = Trees.from_text(booster.model_to_string())
    with pytest.raises(InputError, match=r"'mileage' is not a feature"):
        pair_statistics(trees, x[:10], ["a", "mileage"])
    with pytest.raises(InputError, match="at least two distinct factors"):
        pair_statistics(trees, x[:10], ["a"])
    assert set(top_factors_by_gain(booster)) <= set(NAMES)
