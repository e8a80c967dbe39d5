"""Monotonicity certificate and sweep, checked against LightGBM's own predictions on invented books
whose true effect of the promised factor is not monotone (so an unconstrained model breaks it)."""

from __future__ import annotations

import lightgbm as lgb
import numpy as np
import pandas as pd
import pytest

from premiumlab._core.errors import InputError
from premiumlab.book.gbm_options import GbmOptions
from premiumlab.models.gbm.fit import fit_target
from premiumlab.models.gbm.training import GbmInputs
from premiumlab.models.trees.certificate import certify, sweep
from premiumlab.models.trees.parser import parse_model

GRID = (
    {"num_leaves": 15, "min_data_in_leaf": 20, "learning_rate": 0.1, "lambda_l2": 1.0},
    {"num_leaves": 7, "min_data_in_leaf": 40, "learning_rate": 0.1, "lambda_l2": 0.0},
)
TRAIN_ROWS = 4500


def wavy_book(missing_share: float, rows: int = 6000, seed: int = 11) -> tuple[pd.DataFrame, GbmInputs]:
    """Fictional book: frequency rises with vehicle_age but with a dip, falls with deductible but
    with a bump, and vehicle_age interacts with annual_km (NaN for `missing_share` of policies).
    Promises: vehicle_age increasing, deductible decreasing."""
    rng = np.random.default_rng(seed)
    vehicle_age = rng.integers(0, 21, rows).astype(float)
    deductible = rng.choice([0.0, 250.0, 500.0, 1000.0, 2000.0], rows)
    km = rng.gamma(4.0, 3.0, rows)
    km[rng.random(rows) < missing_share] = np.nan
    region = pd.Categorical(rng.choice(["Ashford", "Brindle", "Corwen"], rows))
    log_mu = (
        np.log(0.2)
        + 0.04 * vehicle_age
        + 0.5 * np.sin(vehicle_age / 2.0)
        - 0.0004 * deductible
        + 0.4 * (deductible == 500.0)
        + 0.03 * vehicle_age * (np.nan_to_num(km, nan=12.0) - 12.0) / 4.0
        + np.where(region == "Brindle", 0.3, 0.0)
    )
    exposure = rng.uniform(0.3, 1.0, rows)
    count = rng.poisson(3.0 * np.exp(log_mu) * exposure)
    features = pd.DataFrame({"vehicle_age": vehicle_age, "deductible": deductible, "annual_km": km, "region": region})
    return features, GbmInputs(
        features=features,
        monotone={"vehicle_age": 1, "deductible": -1},
        exposure=exposure,
        claim_count=count,
        claim_amount=None,
        groups=np.arange(rows),
    )


PROMISES = (
    ("vehicle_age", 1, np.arange(0.0, 21.0)),
    ("deductible", -1, np.array([0.0, 100.0, 250.0, 400.0, 500.0, 750.0, 1000.0, 1500.0, 2000.0])),
)


@pytest.fixture(scope="module")
def complete_book() -> tuple[pd.DataFrame, GbmInputs]:
    return wavy_book(missing_share=0.0)


@pytest.fixture(scope="module")
def gappy_book() -> tuple[pd.DataFrame, GbmInputs]:
    return wavy_book(missing_share=0.05)


def _fit(inputs: GbmInputs, method: str, constrained: bool):
    """Frequency model on the first TRAIN_ROWS rows (3 folds, 2 settings)."""
    train = slice(0, TRAIN_ROWS)
    part = GbmInputs(
        features=inputs.features.iloc[train].reset_index(drop=True),
        monotone=inputs.monotone if constrained else {},
        exposure=inputs.exposure[train],
        claim_count=inputs.claim_count[train],
        claim_amount=None,
        groups=inputs.groups[train],
    )
    options = GbmOptions(
        folds=3,
        max_settings=2,
        max_rounds=150,
        early_stopping_rounds=20,
        grid=GRID,
        monotone_method=method,
        num_threads=1,
    )  # one thread: as fast on small books
    return fit_target(part, "frequency", options)


def _assert_promises_kept(model, held_out: pd.DataFrame) -> None:
    for feature, direction, grid in PROMISES:
        certificate = certify(model.model_text(), feature, direction)
        assert certificate["violation_count"] == 0 and certificate["monotone"], feature
        assert certificate["trees_checked"] == model.best_rounds
        assert certificate["trees_splitting_on_feature"] >= 5
        assert certificate["leaf_pairs_checked"] >= 50
        swept = sweep(model, held_out, feature, direction, grid, policies=1500)
        assert swept["policies"] == 1500 and swept["steps_checked"] == 1500 * (grid.size - 1)
        assert swept["violation_count"] == 0, feature


@pytest.mark.parametrize("method", ["basic", "intermediate", "advanced"])
def test_constrained_models_certified_and_swept_clean(complete_book, method):
    """Under each LightGBM constraint method (no missing values) the certificate finds no violating
    leaf pair and the sweep over 1,500 held-out policies finds no step against the promise
    (tolerance 1e-12), for an increasing and a decreasing promise; the check is not empty (at least
    5 trees split on each factor, at least 50 leaf pairs compared); the requested method is kept."""
    features, inputs = complete_book
    model = _fit(inputs, method, constrained=True)
    assert model.params["monotone_constraints_method"] == method and model.constraint_notes == []
    _assert_promises_kept(model, features.iloc[TRAIN_ROWS:])


def test_promises_kept_with_missing_values_in_another_factor(gappy_book):
    """With 5 % missing annual_km, the delivered model (advanced requested) is certified and swept
    clean; if the certificate made fit_target fall back to a simpler method, the note says which."""
    features, inputs = gappy_book
    model = _fit(inputs, "advanced", constrained=True)
    _assert_promises_kept(model, features.iloc[TRAIN_ROWS:])
    used = model.params["monotone_constraints_method"]
    assert (used == "advanced") == (model.constraint_notes == [])
    assert all(
        "the advanced constraint method broke the promise" in note or "intermediate" in note
        for note in model.constraint_notes
    )


def test_unconstrained_model_breaks_the_promise_in_both_checks(gappy_book):
    """With the constraint off, on a true effect that dips, both the certificate and the sweep find
    violations for the increasing promise on vehicle_age."""
    features, inputs = gappy_book
    model = _fit(inputs, "advanced", constrained=False)
    certificate = certify(model.model_text(), "vehicle_age", 1)
    swept = sweep(model, features.iloc[TRAIN_ROWS:], "vehicle_age", 1, np.arange(0.0, 21.0), policies=1500)
    assert certificate["violation_count"] >= 10 and not certificate["monotone"]
    assert certificate["max_violation"] > 1e-3
    worst = certificate["violations"][0]
    assert worst["amount"] == pytest.approx(worst["values"][0] - worst["values"][1], rel=1e-12)
    assert swept["violation_count"] >= 100
    assert swept["policies_with_violation"] >= 100


def test_certificate_agrees_with_lightgbm_tree_by_tree_with_zero_as_missing():
    """Against LightGBM's own predictor (leaf indices from `pred_leaf`), tree by tree, for an
    unconstrained model with zero_as_missing (Zero missing type), NaN in another feature and a
    native categorical: the trees whose leaf values fall somewhere along a grid holding every
    threshold of the feature, the next value above each and the zero band, for 1,000 policies, are
    exactly the trees the certificate flags."""
    rng = np.random.default_rng(5)
    rows = 6000
    x = rng.integers(-5, 6, rows).astype(float)
    other = rng.normal(0.0, 1.0, rows)
    other[:400] = np.nan
    code = rng.integers(0, 4, rows).astype(float)
    y = rng.poisson(np.exp(-1.0 + 0.5 * np.sin(x) + 0.3 * x * np.nan_to_num(other) + 0.2 * code))
    matrix = np.column_stack([x, other, code])
    params = {
        "objective": "poisson",
        "verbosity": -1,
        "zero_as_missing": True,
        "num_leaves": 15,
        "min_data_in_leaf": 20,
        "deterministic": True,
        "force_row_wise": True,
        "num_threads": 1,
    }
    booster = lgb.train(params, lgb.Dataset(matrix, y, categorical_feature=[2], params=params), 30)
    text = booster.model_to_string()
    _, trees = parse_model(text)
    assert any((((t.decision_type >> 2) & 3) == 1).any() for t in trees)  # the Zero missing type occurs
    thresholds = np.unique(np.concatenate([t.threshold[t.split_feature == 0] for t in trees]))
    grid = np.unique(np.concatenate([thresholds, np.nextafter(thresholds, np.inf), [-1e-35, 0.0, 1e-35, -6, 6]]))
    policies = matrix[rng.choice(rows, 1000, replace=False)]
    stacked = np.repeat(policies, grid.size, axis=0)
    stacked[:, 0] = np.tile(grid, len(policies))
    leaves = booster.predict(stacked, pred_leaf=True)
    caught = {
        tree.index
        for tree in trees
        if (np.diff(tree.leaf_value[leaves[:, tree.index]].reshape(len(policies), grid.size), axis=1) < 0).any()
    }
    certificate = certify(text, 0, 1)
    assert len(caught) >= 5
    assert set(certificate["trees_with_violations"]) == caught


def test_refuses_unknown_feature_categorical_promise_and_bad_direction(complete_book):
    """Bad requests name what is wrong."""
    _features, inputs = complete_book
    model = _fit(inputs, "basic", constrained=True)
    text = model.model_text()
    with pytest.raises(InputError, match=r"'mileage' is not in the model"):
        certify(text, "mileage", 1)
    with pytest.raises(InputError, match=r"splits the promised feature as a categorical"):
        certify(text, "region", 1)
    with pytest.raises(InputError, match=r"direction: 0"):
        certify(text, "vehicle_age", 0)
    with pytest.raises(InputError, match=r"feature_names"):
        certify("not a model", 0, 1)


def _chain_model(leaves: int) -> str:
    """A one-tree model text whose tree is a chain: node i sends x <= i to leaf i, the rest on."""
    internal = leaves - 1
    lefts = " ".join(str(~i) for i in range(internal))
    rights = " ".join([*(str(i + 1) for i in range(internal - 1)), str(~internal)])
    tree = "\n".join(
        [
            "Tree=0",
            f"num_leaves={leaves}",
            "num_cat=0",
            "split_feature=" + " ".join(["0"] * internal),
            "threshold=" + " ".join(f"{i}.5" for i in range(internal)),
            "decision_type=" + " ".join(["2"] * internal),
            f"left_child={lefts}",
            f"right_child={rights}",
            "leaf_value=" + " ".join(f"{i / leaves:.6f}" for i in range(leaves)),
            "is_linear=0",
            "shrinkage=1",
            "",
            "",
        ]
    )
    return f"tree\nversion=v4\nnum_class=1\nnum_tree_per_iteration=1\nmax_feature_idx=0\nfeature_names=x\n\n{tree}end of trees\n"


def test_a_tree_too_large_for_the_pairwise_check_is_refused_not_allocated():
    """Issue 11: a 30,000-leaf tree made the certificate allocate leaves^2 matrices (858 MiB) and
    die; a tree above MAX_CERTIFIED_LEAVES is now refused in one line, one at the bound is checked."""
    from premiumlab.models.trees.certificate import MAX_CERTIFIED_LEAVES

    with pytest.raises(InputError, match=f"tree 0 has {MAX_CERTIFIED_LEAVES + 1} leaves"):
        certify(_chain_model(MAX_CERTIFIED_LEAVES + 1), "x", 1)
    small = certify(_chain_model(50), "x", 1)
    assert small["monotone"] and small["trees_checked"] == 1
