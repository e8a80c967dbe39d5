"""Boosted models: deviance used for early stopping, grouped folds, CV bookkeeping, invariance to
monotone transforms, reproducibility, balance, persistence and input errors (small invented books)."""

from __future__ import annotations

import json

import lightgbm as lgb
import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import mean_gamma_deviance, mean_poisson_deviance, mean_tweedie_deviance

from premiumlab._core.errors import InputError
from premiumlab.book.gbm_options import GbmOptions
from premiumlab.models.gbm.fit import fit_target, load_model
from premiumlab.models.gbm.search import _deviance_eval, fold_of_group
from premiumlab.models.gbm.training import GbmInputs, prepare_training

from _builders import OPTIONS, invented_book


@pytest.fixture(scope="module")
def book() -> tuple[pd.DataFrame, GbmInputs]:
    return invented_book()


@pytest.fixture(scope="module")
def models(book) -> dict:
    _, inputs = book
    return {target: fit_target(inputs, target, OPTIONS) for target in ("frequency", "severity", "pure_premium")}


@pytest.mark.parametrize(
    "objective, power, reference",
    [
        ("poisson", 1.0, lambda y, mu, w: mean_poisson_deviance(y, mu, sample_weight=w)),
        ("gamma", 2.0, lambda y, mu, w: mean_gamma_deviance(y, mu, sample_weight=w)),
        ("tweedie", 1.6, lambda y, mu, w: mean_tweedie_deviance(y, mu, sample_weight=w, power=1.6)),
    ],
)
def test_early_stopping_deviance_equals_scikit_learn(objective, power, reference):
    """The early-stopping metric is the weighted mean deviance of scikit-learn's
    mean_poisson_deviance / mean_gamma_deviance / mean_tweedie_deviance (reference library), to 1e-10."""
    rng = np.random.default_rng(3)
    y = rng.gamma(2.0, 1.0, 500) if objective == "gamma" else rng.poisson(0.5, 500) * rng.gamma(2.0, 1.0, 500)
    mu, w = rng.uniform(0.2, 3.0, 500), rng.uniform(0.1, 2.0, 500)
    name, value, higher_better = _deviance_eval(y, w, power)(mu, None)
    assert (name, higher_better) == ("deviance", False)
    assert value == pytest.approx(reference(y, mu, w), rel=1e-10, abs=1e-12)


def test_folds_keep_policies_together_and_ignore_row_order(book):
    """Every row of a policy falls in one fold; folds hold 1/3 of the policies within 3 percentage
    points (3000 policies); shuffling the rows does not move any policy to another fold."""
    _, inputs = book
    fold = fold_of_group(inputs.groups, 3, 2026)
    per_policy = pd.Series(fold).groupby(inputs.groups).nunique()
    assert per_policy.max() == 1
    shares = pd.Series(fold).groupby(inputs.groups).first().value_counts(normalize=True)
    assert np.abs(shares - 1 / 3).max() < 0.03
    order = np.random.default_rng(0).permutation(inputs.groups.size)
    assert np.array_equal(fold_of_group(inputs.groups[order], 3, 2026), fold[order])


def test_cv_fold_deviance_reproduced_by_bare_lightgbm(book, models):
    """A fold's recorded deviance equals a bare lightgbm.train on that fold's training rows for the
    recorded rounds, scored with scikit-learn's mean_poisson_deviance on the held-out fold (1e-9);
    the table's mean, sample sd, rounds and choice follow from the fold figures."""
    _, inputs = book
    model = models["frequency"]
    data = prepare_training(inputs, "frequency", OPTIONS)
    fold = fold_of_group(data.groups, 3, OPTIONS.seed)
    row = model.cv_table[1]
    full = data.dataset().construct()
    booster = lgb.train(
        {**data.base_params, **row["setting"]},
        full.subset(np.flatnonzero(fold != 2)),
        num_boost_round=row["fold_rounds"][2],
    )
    held = fold == 2
    expected = mean_poisson_deviance(
        data.label[held], booster.predict(data.matrix[held]), sample_weight=data.weight[held]
    )
    assert row["fold_deviances"][2] == pytest.approx(expected, rel=1e-9)
    for entry in model.cv_table:
        assert entry["mean_deviance"] == pytest.approx(np.mean(entry["fold_deviances"]), rel=1e-12)
        assert entry["sd_deviance"] == pytest.approx(np.std(entry["fold_deviances"], ddof=1), rel=1e-12)
        assert entry["rounds"] == round(np.mean(entry["fold_rounds"]))
    assert model.chosen == int(np.argmin([e["mean_deviance"] for e in model.cv_table]))
    assert model.best_rounds == model.cv_table[model.chosen]["rounds"]
    assert model.booster.current_iteration() == model.best_rounds


@pytest.mark.parametrize(
    "transform", [lambda x: x**3, lambda x: np.sign(x) * np.log1p(np.abs(x)) * 7.0], ids=["cube", "signed-log"]
)
def test_predictions_unchanged_by_increasing_transform(book, models, transform):
    """Trees use only the order of a numeric factor, and LightGBM bins zero apart (common practice):
    replacing `score` (negatives, zeros, positives) by a strictly increasing transform that keeps zero
    at zero and signs leaves every training prediction unchanged to 1e-12 (relative)."""
    features, inputs = book
    moved = features.assign(score=transform(features["score"].to_numpy()))
    transformed = GbmInputs(
        features=moved,
        monotone=inputs.monotone,
        exposure=inputs.exposure,
        claim_count=inputs.claim_count,
        claim_amount=inputs.claim_amount,
        groups=inputs.groups,
    )
    for target in ("frequency", "pure_premium"):
        refit = fit_target(transformed, target, OPTIONS)
        original = models[target]
        assert refit.best_rounds == original.best_rounds
        np.testing.assert_allclose(refit.predict(moved), original.predict(features), rtol=1e-12, atol=0)


def test_same_seed_gives_byte_identical_model_text(book, models):
    """Two fits with the same seed and threads give the same LightGBM text and JSON, byte for byte."""
    _, inputs = book
    again = fit_target(inputs, "pure_premium", OPTIONS)
    assert again.model_text() == models["pure_premium"].model_text()
    assert json.dumps(again.to_json_dict(), sort_keys=True) == json.dumps(
        models["pure_premium"].to_json_dict(), sort_keys=True
    )


def test_balance_within_one_percent_on_training_part(book, models):
    """On the training part sum(weight x prediction) / observed total is within 1 +- 1 % for each
    target (after the rebalance factor where one was needed), and `rebalanced` says whether the
    booster alone was outside 1 %."""
    features, inputs = book
    count, amount, exposure = inputs.claim_count, inputs.claim_amount, inputs.exposure
    claims = (count > 0) & (amount > 0)
    observed = {
        "frequency": (exposure, count.sum(), slice(None)),
        "severity": (count[claims], amount[claims].sum(), claims),
        "pure_premium": (exposure, amount.sum(), slice(None)),
    }
    for target, model in models.items():
        weight, total, rows = observed[target]
        ratio = np.sum(weight * model.predict(features[rows])) / total
        assert abs(ratio - 1) <= 0.01, target
        assert model.rebalanced == (abs(model.balance - 1) > 0.01)
        assert ratio == pytest.approx(model.balance * model.rebalance_factor, rel=1e-9)


def test_targets_rows_weights_and_constraints(book, models):
    """Severity trains on the rows with claims and amounts only; monotone constraints sit on the
    frequency and pure-premium models, on severity only when asked; the Tweedie power is passed."""
    _, inputs = book
    claims = int(((inputs.claim_count > 0) & (inputs.claim_amount > 0)).sum())
    assert models["severity"].training_rows == claims
    assert models["frequency"].training_rows == inputs.exposure.size
    assert models["frequency"].params["monotone_constraints"] == [0, 0, 0, 1]
    assert models["pure_premium"].params["monotone_constraints_method"] == "advanced"
    assert models["pure_premium"].params["tweedie_variance_power"] == 1.6
    assert "monotone_constraints" not in models["severity"].params and models["severity"].monotone == {}
    assert models["frequency"].monotone == {"bonus_class": 1}
    constrained = prepare_training(inputs, "severity", GbmOptions(constrain_severity=True))
    assert constrained.base_params["monotone_constraints"] == [0, 0, 0, 1]
    assert {m.params["num_threads"] for m in models.values()} == {1}
    assert {m.to_json_dict()["num_threads"] for m in models.values()} == {1}
    assert all(m.params["deterministic"] for m in models.values())


def test_saved_text_and_json_load_back_to_same_predictions(book, models, tmp_path):
    """A model written as LightGBM text + JSON and read back predicts exactly the same, with the
    same category codes."""
    features, _ = book
    model = models["pure_premium"]
    (tmp_path / "m.txt").write_text(model.model_text())
    (tmp_path / "m.json").write_text(json.dumps(model.to_json_dict()))
    loaded = load_model(tmp_path / "m.txt", tmp_path / "m.json")
    np.testing.assert_array_equal(loaded.predict(features), model.predict(features))
    assert loaded.categories == {"region": ["Eastholm", "Northmere", "Southvale", "Westreach"]}
    as_text = features.assign(region=features["region"].astype(str))
    np.testing.assert_array_equal(loaded.predict(as_text), model.predict(features))


def test_unknown_level_and_bad_inputs_are_named(book, models):
    """An unknown level names factor and level; bad vectors name the column and row; a promise on an
    unordered categorical is refused."""
    features, inputs = book
    odd = features.head(5).assign(region=["Northmere", "Atlantis", "Eastholm", "Eastholm", "Eastholm"])
    with pytest.raises(InputError, match=r"'region': unknown level 'Atlantis' at row 1"):
        models["frequency"].predict(odd)
    exposure = inputs.exposure.copy()
    exposure[5] = 0.0
    bad = GbmInputs(features, inputs.monotone, exposure, inputs.claim_count, inputs.claim_amount, inputs.groups)
    with pytest.raises(InputError, match=r"exposure: 1 value\(s\) not > 0, first at row 5 \(value 0.0\)"):
        fit_target(bad, "frequency", OPTIONS)
    promised = GbmInputs(features, {"region": 1}, inputs.exposure, inputs.claim_count, None, inputs.groups)
    with pytest.raises(InputError, match=r"'region' is an unordered categorical"):
        fit_target(promised, "frequency", OPTIONS)
    with pytest.raises(InputError, match=r"claim_amount: required for the severity model"):
        fit_target(
            promised.__class__(features, {}, inputs.exposure, inputs.claim_count, None, inputs.groups),
            "severity",
            OPTIONS,
        )
    with pytest.raises(InputError, match=r"monotone_method: 'strict'"):
        fit_target(inputs, "frequency", GbmOptions(monotone_method="strict"))


def test_a_search_job_that_built_its_dataset_can_still_be_copied_to_another_worker(book):
    """Dask copies a scattered search job between workers (pickle, via __getstate__); once a task has
    built the job's binned LightGBM Dataset, which holds a pointer, the copy leaves it out and builds
    it again: pickling succeeds, and a fold fitted on a copy gives the same deviance and rounds as on
    the original (exact)."""
    import copy
    import pickle

    from premiumlab.models.gbm.search import _fold_task, _SearchJob

    _, inputs = book
    job = _SearchJob(prepare_training(inputs, "frequency", OPTIONS), OPTIONS)
    task = ({"num_leaves": 7, "learning_rate": 0.1}, 0)
    first = _fold_task(job, task)
    assert "binned" in job.__dict__
    assert len(pickle.dumps(job)) > 0
    moved = copy.copy(job)
    assert "binned" not in moved.__dict__
    assert _fold_task(moved, task) == first
