"""Boosted trees (LightGBM) for frequency, severity and pure premium, tuned by grouped K-fold CV.

Targets (`premiumlab.models.targets`; their files: docs/run-directory.md, models/gbm_*): frequency
(Poisson), severity (Gamma) and pure premium (Tweedie with variance power p), each with its label,
weight and rows, all with a log link, so the raw score is log(prediction).

Tuning: every setting of a small grid is trained on K-1 folds (folds grouped by policy, so the rows
of a policy stay together) with early stopping on the weighted mean deviance of the held-out fold
(`premiumlab.models.deviance.mean_deviance`, the family's deviance; LightGBM's built-in metrics for
these objectives are negative log-likelihoods, so they are switched off). The setting with the lowest
mean fold deviance is refitted on the whole training part with the mean of its folds' best round
counts. Thin categorical levels: LightGBM's hessian-sum settings count rows and cat_smooth is the
credibility constant of the levels (`premiumlab.models.gbm.smoothing`).

Balance: sum(weight x prediction) / sum(weight x label) on the training part, i.e. predicted over
observed claims (frequency) or amounts (severity, pure premium). Outside 1 +- 1 % every prediction
is multiplied by 1 / balance (stored as `rebalance_factor`, applied in `predict`).

Models are LightGBM text plus JSON; nothing is pickled.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from pathlib import Path

import lightgbm as lgb
import numpy as np
import pandas as pd

from premiumlab._core.cautions import DRAFT
from premiumlab._core.cluster import IN_PROCESS, TaskRunner
from premiumlab._core.errors import InputError
from premiumlab._core.jsonio import read_json
from premiumlab.book.gbm_options import GbmOptions
from premiumlab.models.gbm.search import cross_validate, search_sample, select_settings
from premiumlab.models.gbm.training import (
    BALANCE_TOLERANCE,
    JSON_FORMAT,
    SIMPLER_METHOD,
    GbmInputs,
    TrainingData,
    encode_features,
    prepare_training,
)
from premiumlab.models.trees.certificate import certify
from premiumlab.models.trees.parser import parse_model

_DEFAULT_OPTIONS = GbmOptions()


@dataclass
class GbmModel:
    """A fitted boosted model; `predict` gives frequency, severity or pure premium per unit."""

    booster: lgb.Booster
    target: str
    objective: str
    params: dict
    cv_table: list[dict]
    chosen: int
    best_rounds: int
    balance: float
    rebalanced: bool
    rebalance_factor: float
    feature_names: list[str]
    categories: dict[str, list[str]]
    monotone: dict[str, int]  # factor -> direction the model is constrained to ({} if none)
    training_rows: int
    constraint_notes: list[str] = field(default_factory=list)
    hessian_scale: float = 1.0  # LightGBM weight = weight / hessian_scale (row units)
    categorical_smoothing: dict | None = None  # how cat_smooth was estimated; None if the options gave it
    trained_on: str = IN_PROCESS.description  # where the final model was trained
    search_rows: int | None = None  # rows the search ran on; None: every training row

    def encode(self, features: pd.DataFrame) -> np.ndarray:
        """Features -> the float64 matrix the booster reads (categoricals as fixed level codes)."""
        return encode_features(features, self.feature_names, self.categories)

    def predict_raw(self, features: pd.DataFrame) -> np.ndarray:
        """log(prediction): the booster's raw score plus log(rebalance_factor)."""
        raw = self.booster.predict(self.encode(features), raw_score=True, num_threads=self.params["num_threads"])
        return np.asarray(raw, dtype=np.float64) + math.log(self.rebalance_factor)

    def predict(self, features: pd.DataFrame) -> np.ndarray:
        """Frequency (claims per exposure unit), severity (money per claim) or pure premium
        (money per exposure unit): exp(raw score) x rebalance_factor."""
        return np.exp(self.predict_raw(features))

    def model_text(self) -> str:
        """The booster in LightGBM's text format (deterministic for a given fit)."""
        return self.booster.model_to_string()

    def to_json_dict(self) -> dict:
        """Parameters, CV results, balance, features and category codes (JSON-able)."""
        return {
            "format": JSON_FORMAT,
            "version": 1,
            "target": self.target,
            "objective": self.objective,
            "params": self.params,
            "num_threads": self.params["num_threads"],
            "cv": {"table": self.cv_table, "chosen": self.chosen},
            "best_rounds": self.best_rounds,
            "training_rows": self.training_rows,
            "balance": self.balance,
            "rebalanced": self.rebalanced,
            "rebalance_factor": self.rebalance_factor,
            "balance_note": _balance_note(self),
            "feature_names": self.feature_names,
            "categories": self.categories,
            "monotone": self.monotone,
            "constraint_notes": self.constraint_notes,
            "hessian_scale": self.hessian_scale,
            "categorical_smoothing": self.categorical_smoothing,
            "trained_on": self.trained_on,
            "search_rows": self.training_rows if self.search_rows is None else self.search_rows,
            "caution": DRAFT,
        }


# ---------------------------------------------------------------------------------------------
# validation and encoding at the edge


def _balance_note(model: GbmModel) -> str:
    if model.rebalanced:
        return (
            f"training balance {model.balance:.6f} was outside 1 +- {BALANCE_TOLERANCE:.0%}: predictions "
            f"are multiplied by {model.rebalance_factor:.6f} to restore the observed total"
        )
    return f"training balance {model.balance:.6f} is within 1 +- {BALANCE_TOLERANCE:.0%}: not rebalanced"


def _training_balance(booster: lgb.Booster, data: TrainingData) -> float:
    """sum(weight x prediction) / sum(weight x label) on the training rows, from the booster's
    cached training scores (no extra prediction pass)."""
    observed = float(np.sum(data.weight * data.label))

    def ratio(predictions: np.ndarray, _: lgb.Dataset) -> tuple[str, float, bool]:
        return "balance", float(np.sum(data.weight * predictions)) / observed, False

    return float(booster.eval_train(feval=ratio)[0][2])


def fit_final(
    data: TrainingData, setting: dict, rounds: int, cv_table: list[dict] | None = None, chosen: int = 0
) -> GbmModel:
    """Train `setting` on all of `data` for `rounds` rounds, measure the balance, rebalance if needed.

    Balance = sum(w x prediction) / sum(w x label) on the training rows; outside 1 +- 1 %
    (BALANCE_TOLERANCE) every prediction is multiplied by rebalance_factor = 1 / balance.

    Parameters
    ----------
    data : TrainingData
        The encoded training data of one target.
    setting : dict
        LightGBM parameters laid over `data.base_params`.
    rounds : int
        Boosting rounds, >= 1.
    cv_table : list[dict] or None
        The cross-validation table to keep with the model (None: none, stored as []).
    chosen : int
        Index of `setting` in `cv_table`.

    Returns
    -------
    GbmModel
        The fitted booster with its parameters, balance and rebalance factor.
    """
    params = {**data.base_params, **setting}
    booster = lgb.train(params, data.dataset(), num_boost_round=rounds, keep_training_booster=True)
    balance = _training_balance(booster, data)
    booster.free_dataset()
    return _fitted(booster, data, params, rounds, balance, cv_table, chosen)


def fit_final_on_cluster(
    data: TrainingData, setting: dict, rounds: int, runner: TaskRunner, cv_table: list[dict], chosen: int
) -> GbmModel:
    """`fit_final` trained by LightGBM's Dask interface (`lightgbm.dask`, `tree_learner = "data"`):
    the rows are cut into one block per worker, each worker builds the histograms of its rows and
    LightGBM adds them up over its own network between the workers, so every split is chosen on
    all the rows. The bin edges are found from each worker's rows, so the trees may differ slightly
    from a one-process fit's. Balance as in `fit_final`, from the booster's predictions here.

    Parameters
    ----------
    data : TrainingData
        The encoded training data of one target (held here; the blocks are sent to the workers).
    setting : dict
        LightGBM parameters laid over `data.base_params`.
    rounds : int
        Boosting rounds, >= 1.
    runner : TaskRunner
        A runner on a Dask cluster (`runner.client` not None).
    cv_table : list[dict]
        The cross-validation table to keep with the model.
    chosen : int
        Index of `setting` in `cv_table`.

    Returns
    -------
    GbmModel
        As `fit_final`, with `trained_on` naming the cluster. LightGBM's Dask interface trains each
        worker with as many threads as the worker has, not `num_threads`.
    """
    import dask.array as da
    from lightgbm.dask import DaskLGBMRegressor

    params = {**data.base_params, **setting}
    n = len(data.label)
    block = -(-n // max(1, runner.workers))
    columns = data.matrix.shape[1]
    weight = data.weight / data.hessian_scale
    x, y, w = (
        da.from_array(a, chunks=(block, columns) if a.ndim == 2 else (block,))
        for a in (data.matrix, data.label, weight)
    )
    threads = {k: v for k, v in params.items() if k != "num_threads"}  # the interface sets the workers' own
    model = DaskLGBMRegressor(client=runner.client, n_estimators=rounds, tree_learner="data", **threads)
    try:
        model.fit(x, y, sample_weight=w, feature_name=data.feature_names, categorical_feature=data.categorical_indices)
    except Exception as e:  # what LightGBM or a worker raised: one line naming the cluster
        raise InputError(
            f"--cluster: the {data.target} model's training on {runner.description} failed ({type(e).__name__}: {e})"
        ) from None
    booster = lgb.Booster(model_str=model.booster_.model_to_string())
    predicted = booster.predict(data.matrix, num_threads=params["num_threads"])
    balance = float(np.sum(data.weight * predicted) / np.sum(data.weight * data.label))
    fitted = _fitted(booster, data, params, rounds, balance, cv_table, chosen)
    fitted.trained_on = f"{runner.description} (lightgbm.dask, data-parallel)"
    return fitted


def _fitted(
    booster: lgb.Booster,
    data: TrainingData,
    params: dict,
    rounds: int,
    balance: float,
    cv_table: list[dict] | None,
    chosen: int,
) -> GbmModel:
    """The model of a trained booster, rebalanced when its training balance is off by more than
    BALANCE_TOLERANCE."""
    rebalanced = abs(balance - 1.0) > BALANCE_TOLERANCE
    return GbmModel(
        booster=booster,
        target=data.target,
        objective=params["objective"],
        params=params,
        cv_table=cv_table or [],
        chosen=chosen,
        best_rounds=rounds,
        balance=balance,
        rebalanced=rebalanced,
        rebalance_factor=1.0 / balance if rebalanced else 1.0,
        feature_names=list(data.feature_names),
        categories=dict(data.categories),
        monotone=dict(data.monotone),
        training_rows=len(data.label),
        hessian_scale=data.hessian_scale,
        categorical_smoothing=data.smoothing,
    )


def _tuned_fit(data: TrainingData, options: GbmOptions, runner: TaskRunner) -> GbmModel:
    """The search (on a sample of `options.search_rows` rows when the final fit runs on a Dask
    cluster: `runner.client` given and at least `options.cluster_rows` rows), then the final fit."""
    settings = select_settings(options)
    on_cluster = runner.client is not None and len(data.label) >= options.cluster_rows
    searched = search_sample(data, options.search_rows, options.seed) if on_cluster else data
    table = cross_validate(searched, settings, options, runner)
    chosen = int(np.argmin([row["mean_deviance"] for row in table]))
    if not on_cluster:
        return fit_final(data, settings[chosen], table[chosen]["rounds"], table, chosen)
    model = fit_final_on_cluster(data, settings[chosen], table[chosen]["rounds"], runner, table, chosen)
    model.search_rows = len(searched.label)
    return model


def _uncertified_factors(model: GbmModel) -> list[str]:
    """The constrained factors whose monotonicity certificate finds a violating leaf pair."""
    if not model.monotone:
        return []
    text = model.model_text()
    return [name for name, direction in model.monotone.items() if certify(text, name, direction)["violation_count"] > 0]


def fit_target(
    inputs: GbmInputs, target: str, options: GbmOptions = _DEFAULT_OPTIONS, runner: TaskRunner = IN_PROCESS
) -> GbmModel:
    """Tune by grouped K-fold CV (the fits run on `runner`), then refit the chosen setting on the
    whole training part here.

    A constrained model is certified (`premiumlab.models.trees.certificate`). If a promise is broken
    (LightGBM 4.7's advanced method does so when another feature has missing values), the whole
    tuning is redone with the next simpler constraint method (advanced -> intermediate -> basic),
    and `constraint_notes` says so.

    Parameters
    ----------
    inputs : GbmInputs
        The training part of the book.
    target : str
        "frequency", "severity" or "pure_premium".
    options : GbmOptions
        The grid, folds, rounds, threads, seed and constraint method (default: `GbmOptions()`).
    runner : TaskRunner
        Where the cross-validation fits run (default: in this process).

    Returns
    -------
    GbmModel
        The model of the setting with the lowest mean fold deviance, refitted on every training
        row of the target, with its CV table and constraint notes.

    Raises
    ------
    InputError
        As `prepare_training` and `cross_validate`.
    """
    model = _tuned_fit(prepare_training(inputs, target, options), options, runner)
    notes: list[str] = []
    while (broken := _uncertified_factors(model)) and options.monotone_method in SIMPLER_METHOD:
        simpler = SIMPLER_METHOD[options.monotone_method]
        notes.append(
            f"the {options.monotone_method} constraint method broke the promise on "
            f"{', '.join(broken)} (certificate); refitted with the {simpler} method"
        )
        options = replace(options, monotone_method=simpler)
        model = _tuned_fit(prepare_training(inputs, target, options), options, runner)
    model.constraint_notes = notes
    return model


def load_model(text_path: str | Path, json_path: str | Path) -> GbmModel:
    """A model from its LightGBM text file and its JSON file (as written from `model_text` and
    `to_json_dict`).

    Parameters
    ----------
    text_path : str or Path
        The LightGBM text model (RUN/models/gbm_*.txt, docs/run-directory.md).
    json_path : str or Path
        Its JSON file (RUN/models/gbm_*.json, format "premiumlab.gbm").

    Returns
    -------
    GbmModel
        The model, predicting as it did when written.

    Raises
    ------
    InputError
        A file unreadable, not a LightGBM text model or not a premiumlab.gbm JSON, a key missing,
        or feature names that differ between the two files.
    """
    text_path, json_path = Path(text_path), Path(json_path)
    try:
        text = text_path.read_text(encoding="utf-8")
    except (FileNotFoundError, UnicodeDecodeError) as error:
        raise InputError(f"{text_path}: cannot read the model text ({error})") from None
    meta = read_json(json_path)
    if not isinstance(meta, dict) or meta.get("format") != JSON_FORMAT:
        raise InputError(f"{json_path}: not a {JSON_FORMAT} JSON file (key 'format')")
    required = (
        "target",
        "objective",
        "params",
        "cv",
        "best_rounds",
        "balance",
        "rebalanced",
        "rebalance_factor",
        "feature_names",
        "categories",
        "monotone",
        "training_rows",
        "constraint_notes",
    )
    absent = [key for key in required if key not in meta]
    if absent:
        raise InputError(f"{json_path}: missing key {absent[0]!r}")
    try:
        parse_model(text)  # LightGBM aborts the process on some damaged texts: they are refused first
    except InputError as error:
        raise InputError(f"{text_path}: {error}") from None
    try:
        booster = lgb.Booster(model_str=text)
    except lgb.basic.LightGBMError as error:
        raise InputError(f"{text_path}: not a LightGBM text model ({error})") from None
    if booster.feature_name() != meta["feature_names"]:
        raise InputError(f"{json_path}: key 'feature_names' does not match the features of {text_path}")
    return GbmModel(
        booster=booster,
        target=meta["target"],
        objective=meta["objective"],
        params=meta["params"],
        cv_table=meta["cv"]["table"],
        chosen=meta["cv"]["chosen"],
        best_rounds=meta["best_rounds"],
        balance=meta["balance"],
        rebalanced=meta["rebalanced"],
        rebalance_factor=meta["rebalance_factor"],
        feature_names=meta["feature_names"],
        categories=meta["categories"],
        monotone=meta["monotone"],
        training_rows=meta["training_rows"],
        constraint_notes=meta["constraint_notes"],
        hessian_scale=meta.get("hessian_scale", 1.0),
        categorical_smoothing=meta.get("categorical_smoothing"),
        trained_on=meta.get("trained_on", IN_PROCESS.description),
        search_rows=meta.get("search_rows"),
    )
