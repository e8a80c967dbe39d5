"""Boosted trees (LightGBM) for frequency, severity and pure premium, tuned by grouped K-fold CV.

Targets (`premiumlab.models.targets`; their files: docs/run-directory.md, models/gbm_*): frequency
(Poisson), severity (Gamma) and pure premium (Tweedie with variance power p), each with its label,
weight and rows, all with a log link, so the raw score is log(prediction).

Tuning: every setting of a small grid is trained on K-1 folds (folds grouped by policy, so the rows
of a policy stay together) with early stopping on the weighted mean deviance of the held-out fold
(`premiumlab.models.deviance.mean_deviance`, the family's deviance; LightGBM's built-in metrics for
these objectives are negative log-likelihoods, so they are switched off). The setting with the lowest
mean fold deviance is refitted on the whole training part with the mean of its folds' best round
counts.

Balance: sum(weight x prediction) / sum(weight x label) on the training part, i.e. predicted over
observed claims (frequency) or amounts (severity, pure premium). Outside 1 +- 1 % every prediction
is multiplied by 1 / balance (stored as `rebalance_factor`, applied in `predict`).

Models are LightGBM text plus JSON; nothing is pickled.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from functools import cached_property
from pathlib import Path

import lightgbm as lgb
import numpy as np
import pandas as pd

from premiumlab._core.cautions import DRAFT
from premiumlab._core.cluster import IN_PROCESS, TaskRunner
from premiumlab._core.errors import InputError
from premiumlab._core.jsonio import read_json
from premiumlab._core.progress import progress_bar
from premiumlab._core.validators import ABOVE_ZERO, AT_LEAST_ZERO, checked_array
from premiumlab.book.gbm_options import MONOTONE_METHODS, GbmOptions
from premiumlab.models.deviance import mean_deviance
from premiumlab.models.targets import TARGETS
from premiumlab.models.trees.certificate import certify

SIMPLER_METHOD = {"advanced": "intermediate", "intermediate": "basic"}
GRID_KEYS = frozenset(
    {
        "num_leaves",
        "min_data_in_leaf",
        "min_sum_hessian_in_leaf",
        "learning_rate",
        "lambda_l2",
        "lambda_l1",
        "max_depth",
        "min_gain_to_split",
    }
)
BALANCE_TOLERANCE = 0.01
JSON_FORMAT = "premiumlab.gbm"
_DEFAULT_OPTIONS = GbmOptions()

_FORBIDDEN_NAME_CHARACTERS = set('[]{}":,') | {" ", "\t", "\n"}


@dataclass(frozen=True)
class GbmInputs:
    """The training part of a book, one row per policy and period.

    features: one column per factor; numeric (cast to float64; NaN allowed, LightGBM's missing
    handling) or pandas Categorical for an unordered factor (handled natively by LightGBM); an
    ordered categorical with a monotone promise comes as float integer codes 0..k-1.
    monotone: factor -> +1 (increasing) or -1 (decreasing), promised factors only.
    exposure (> 0, exposure units), claim_count (>= 0), claim_amount (>= 0, money; None: frequency
    only), groups: policy codes for the grouped folds.
    """

    features: pd.DataFrame
    monotone: dict[str, int]
    exposure: np.ndarray
    claim_count: np.ndarray
    claim_amount: np.ndarray | None
    groups: np.ndarray


@dataclass(frozen=True)
class TrainingData:
    """Encoded features, label and weight of one target, with the fixed LightGBM parameters."""

    target: str
    matrix: np.ndarray  # float64, rows x features; categoricals as level codes
    label: np.ndarray
    weight: np.ndarray
    groups: np.ndarray
    feature_names: list[str]
    categories: dict[str, list[str]]
    monotone: dict[str, int]  # the promises this model is constrained to keep ({} if none)
    base_params: dict

    @property
    def categorical_indices(self) -> list[int]:
        return [self.feature_names.index(name) for name in self.categories]

    @property
    def power(self) -> float:
        """Tweedie variance power of the target's deviance (1 Poisson, 2 Gamma, p Tweedie)."""
        return TARGETS[self.target].deviance_power(self.base_params.get("tweedie_variance_power"))

    def dataset(self) -> lgb.Dataset:
        return lgb.Dataset(
            self.matrix,
            label=self.label,
            weight=self.weight,
            feature_name=self.feature_names,
            categorical_feature=self.categorical_indices,
            params=_dataset_params(self.base_params),
        )


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
            "caution": DRAFT,
        }


# ---------------------------------------------------------------------------------------------
# validation and encoding at the edge


def _check_options(options: GbmOptions) -> None:
    for name in ("folds", "max_settings", "num_threads", "max_rounds", "early_stopping_rounds"):
        value = getattr(options, name)
        low = 2 if name == "folds" else 1
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
            raise InputError(f"gbm option {name}: {value!r} must be an integer >= {low}")
    if options.monotone_method not in MONOTONE_METHODS:
        raise InputError(
            f"gbm option monotone_method: {options.monotone_method!r} is not one of {', '.join(MONOTONE_METHODS)}"
        )
    if options.tweedie_power is not None and not 1.0 <= options.tweedie_power < 2.0:
        raise InputError(f"gbm option tweedie_power: {options.tweedie_power!r} must be in [1, 2)")
    if not options.grid:
        raise InputError("gbm option grid: no settings")
    for i, setting in enumerate(options.grid):
        unknown = sorted(set(setting) - GRID_KEYS)
        if unknown:
            raise InputError(
                f"gbm option grid[{i}]: unknown key {unknown[0]!r}; allowed: {', '.join(sorted(GRID_KEYS))}"
            )


def _check_feature_names(features: pd.DataFrame) -> list[str]:
    names = [str(c) for c in features.columns]
    if not names:
        raise InputError("features: no columns")
    if len(set(names)) != len(names):
        raise InputError(f"features: duplicate column names {sorted(n for n in names if names.count(n) > 1)[0]!r}")
    for name in names:
        if set(name) & _FORBIDDEN_NAME_CHARACTERS:
            raise InputError(
                f'features column {name!r}: LightGBM refuses spaces and any of [ ] {{ }} " : , in feature names'
            )
    return names


def _training_categories(features: pd.DataFrame) -> dict[str, list[str]]:
    """Categorical column -> its levels as strings, in the column's category order (code = position)."""
    categories = {}
    for name in features.columns:
        column = features[name]
        if isinstance(column.dtype, pd.CategoricalDtype):
            levels = [str(c) for c in column.cat.categories]
            if len(set(levels)) != len(levels):
                raise InputError(f"features column {name!r}: two categories read the same as text")
            categories[str(name)] = levels
    return categories


def _category_codes(column: pd.Series, levels: list[str], name: str) -> np.ndarray:
    """Level codes (float64) of a column against fixed levels, or InputError naming the level."""
    cat = column if isinstance(column.dtype, pd.CategoricalDtype) else column.astype("category")
    lookup = {level: code for code, level in enumerate(levels)}
    code_of = np.array([lookup.get(str(c), -1) for c in cat.cat.categories] + [-1], dtype=np.int64)
    codes = code_of[cat.cat.codes.to_numpy()]
    if (codes < 0).any():
        row = int(np.flatnonzero(codes < 0)[0])
        value = column.iloc[row]
        if pd.isna(value):
            raise InputError(f"features column {name!r}: missing level at row {row}")
        raise InputError(
            f"features column {name!r}: unknown level {str(value)!r} at row {row} (known: {', '.join(levels)})"
        )
    return codes.astype(np.float64)


def encode_features(features: pd.DataFrame, feature_names: list[str], categories: dict[str, list[str]]) -> np.ndarray:
    """The float64 matrix (rows x feature_names) with categoricals replaced by fixed level codes.

    Parameters
    ----------
    features : pd.DataFrame
        One column per feature (other columns are ignored): numeric, or categorical/text for the
        features named in `categories`.
    feature_names : list[str]
        The model's features, in its column order.
    categories : dict[str, list[str]]
        Categorical feature -> its levels as text; a level's code is its position in the list.

    Returns
    -------
    np.ndarray
        float64, rows x len(feature_names): numeric values as they are (NaN kept), categorical
        values as their level codes 0..k-1.

    Raises
    ------
    InputError
        A feature column missing, a categorical value missing or not among its levels, or a
        non-categorical column that is not numeric.
    """
    missing = [n for n in feature_names if n not in features.columns]
    if missing:
        raise InputError(f"features: missing column {missing[0]!r}")
    matrix = np.empty((len(features), len(feature_names)), dtype=np.float64)
    for j, name in enumerate(feature_names):
        column = features[name]
        if name in categories:
            matrix[:, j] = _category_codes(column, categories[name], name)
        elif pd.api.types.is_numeric_dtype(column.dtype):
            matrix[:, j] = column.to_numpy(dtype=np.float64, na_value=np.nan)
        else:
            raise InputError(f"features column {name!r}: must be numeric, got {column.dtype}")
    return matrix


def _check_monotone(monotone: dict[str, int], names: list[str], categories: dict[str, list[str]]) -> None:
    for name, direction in monotone.items():
        if name not in names:
            raise InputError(f"monotone: factor {name!r} is not a features column")
        if name in categories:
            raise InputError(
                f"monotone: factor {name!r} is an unordered categorical; pass an ordered factor as integer codes 0..k-1"
            )
        if direction not in (1, -1):
            raise InputError(f"monotone: factor {name!r} has direction {direction!r}; use +1 or -1")


def _target_rows(inputs: GbmInputs, target: str, rows: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(row mask, label, weight) of the target (`premiumlab.models.targets`), the inputs checked."""
    exposure = checked_array("exposure", inputs.exposure, ABOVE_ZERO, rows)
    count = checked_array("claim_count", inputs.claim_count, AT_LEAST_ZERO, rows)
    amount = None
    if TARGETS[target].needs_amount:
        if inputs.claim_amount is None:
            raise InputError(f"claim_amount: required for the {target} model")
        amount = checked_array("claim_amount", inputs.claim_amount, AT_LEAST_ZERO, rows)
    view = TARGETS[target].view(exposure, count, amount)
    if not (view.weight * view.label).sum() > 0:
        raise InputError(f"{target}: the training rows hold no claims to model")
    return view.rows, view.label, view.weight


def _constrained(target: str, monotone: dict[str, int], options: GbmOptions) -> dict[str, int]:
    """The promises the target's model is constrained to: all on frequency and pure premium, on
    severity only with constrain_severity."""
    return dict(monotone) if target != "severity" or options.constrain_severity else {}


def _base_params(target: str, names: list[str], monotone: dict[str, int], options: GbmOptions) -> dict:
    """The fixed (non-searched) LightGBM parameters: objective, determinism, threads, constraints."""
    params = {
        "objective": TARGETS[target].objective,
        "metric": "None",
        "verbosity": -1,
        "seed": options.seed,
        "num_threads": options.num_threads,
        "deterministic": True,
        "force_row_wise": True,
        "bagging_fraction": 1.0,
        "bagging_freq": 0,
        "feature_fraction": 1.0,
        "max_bin": 255,
        "feature_pre_filter": False,
        "zero_as_missing": False,
    }
    if TARGETS[target].power is None:
        params["tweedie_variance_power"] = options.variance_power
    if monotone:
        params["monotone_constraints"] = [int(monotone.get(name, 0)) for name in names]
        params["monotone_constraints_method"] = options.monotone_method
    return params


def _dataset_params(params: dict) -> dict:
    keys = (
        "verbosity",
        "seed",
        "num_threads",
        "deterministic",
        "force_row_wise",
        "max_bin",
        "feature_pre_filter",
        "zero_as_missing",
    )
    return {k: params[k] for k in keys}


def prepare_training(inputs: GbmInputs, target: str, options: GbmOptions) -> TrainingData:
    """Validate the inputs and build the encoded training data of one target.

    Parameters
    ----------
    inputs : GbmInputs
        The training part of the book.
    target : str
        "frequency", "severity" or "pure_premium" (`premiumlab.models.targets.TARGETS`).
    options : GbmOptions
        Tuning options; here their ranges are checked and the fixed LightGBM parameters built.

    Returns
    -------
    TrainingData
        On the target's rows only: the encoded matrix, label (claims per exposure unit, money per
        claim or money per exposure unit), weight (exposure units or claims), policy groups, and
        the fixed LightGBM parameters with the monotone constraints the target keeps.

    Raises
    ------
    InputError
        An unknown target, an option out of range, bad feature names or monotone promises, groups
        of the wrong length, a missing or invalid exposure, count or amount, or no claims to model.
    """
    if target not in TARGETS:
        raise InputError(f"target: {target!r} is not one of {', '.join(TARGETS)}")
    _check_options(options)
    names = _check_feature_names(inputs.features)
    rows = len(inputs.features)
    categories = _training_categories(inputs.features)
    _check_monotone(inputs.monotone, names, categories)
    groups = np.asarray(inputs.groups)
    if groups.shape != (rows,):
        raise InputError(f"groups: expected {rows} rows (as features), got shape {groups.shape}")
    mask, label, weight = _target_rows(inputs, target, rows)
    monotone = _constrained(target, inputs.monotone, options)
    matrix = encode_features(inputs.features, names, categories)[mask]
    return TrainingData(
        target=target,
        matrix=matrix,
        label=label,
        weight=weight,
        groups=groups[mask],
        feature_names=names,
        categories=categories,
        monotone=monotone,
        base_params=_base_params(target, names, monotone, options),
    )


# ---------------------------------------------------------------------------------------------
# cross-validation


def fold_of_group(groups: np.ndarray, folds: int, seed: int) -> np.ndarray:
    """Fold index (0..folds-1) of each row: a seeded hash of its group, so a policy's rows share a
    fold and the assignment does not depend on row order.

    fold = hash(group; key = seed mod 10^16) mod folds, with pandas' 64-bit `hash_array`.

    Parameters
    ----------
    groups : np.ndarray
        The policy code of each row.
    folds : int
        Number of folds, >= 2.
    seed : int
        Seed of the hash, >= 0.

    Returns
    -------
    np.ndarray
        int64 fold index per row, in 0..folds-1.
    """
    hash_key = f"{seed % 10**16:016d}"
    hashes = pd.util.hash_array(np.asarray(groups), hash_key=hash_key, categorize=False)
    return (hashes % np.uint64(folds)).astype(np.int64)


def _select_settings(options: GbmOptions) -> list[dict]:
    """The grid, or a seeded subset of max_settings of it (grid order kept)."""
    grid = [dict(s) for s in options.grid]
    if len(grid) <= options.max_settings:
        return grid
    picked = np.random.default_rng(options.seed).choice(len(grid), options.max_settings, replace=False)
    return [grid[i] for i in sorted(picked)]


def _deviance_eval(
    label: np.ndarray, weight: np.ndarray, power: float
) -> Callable[[np.ndarray, lgb.Dataset], tuple[str, float, bool]]:
    """LightGBM feval on one validation fold: weighted mean deviance of the family, predictions on
    the response scale. The float64 labels are used, not the Dataset's float32 copy."""

    def evaluate(predictions: np.ndarray, _: lgb.Dataset) -> tuple[str, float, bool]:
        return "deviance", mean_deviance(label, predictions, weight, power), False

    return evaluate


def _fold_fit(
    full: lgb.Dataset,
    data: TrainingData,
    setting: dict,
    train_rows: np.ndarray,
    valid_rows: np.ndarray,
    options: GbmOptions,
) -> tuple[float, int]:
    """(held-out deviance at the best round, best round count) of one setting on one fold."""
    feval = _deviance_eval(data.label[valid_rows], data.weight[valid_rows], data.power)
    booster = lgb.train(
        {**data.base_params, **setting},
        full.subset(train_rows.tolist()),
        num_boost_round=options.max_rounds,
        valid_sets=[full.subset(valid_rows.tolist())],
        valid_names=["fold"],
        feval=feval,
        callbacks=[lgb.early_stopping(options.early_stopping_rounds, verbose=False)],
    )
    return float(booster.best_score["fold"]["deviance"]), int(booster.best_iteration or options.max_rounds)


@dataclass
class _SearchJob:
    """What every task of one search shares. The Dataset binned on all rows and each row's fold are
    built on first use, once in each process that runs tasks (after Dask has sent the job there)."""

    data: TrainingData
    options: GbmOptions

    @cached_property
    def binned(self) -> tuple[lgb.Dataset, np.ndarray]:
        return (self.data.dataset().construct(), fold_of_group(self.data.groups, self.options.folds, self.options.seed))


def _fold_task(job: _SearchJob, task: tuple[dict, int]) -> tuple[float, int]:
    """One task of the search, run here or on a Dask worker: setting `task[0]` on fold `task[1]`."""
    setting, k = task
    full, fold = job.binned
    return _fold_fit(full, job.data, setting, np.flatnonzero(fold != k), np.flatnonzero(fold == k), job.options)


def cross_validate(
    data: TrainingData, settings: list[dict], options: GbmOptions, runner: TaskRunner = IN_PROCESS
) -> list[dict]:
    """One CV row per setting: fold deviances at each fold's best round, their mean and sample
    standard deviation, the folds' best rounds and their rounded mean (`rounds`). The settings x
    folds fits are independent tasks for `runner` (`premiumlab._core.cluster`).

    A fold's deviance is the weighted mean deviance of its held-out rows,
    sum(w d(y, mu)) / sum(w), at the target's power (`premiumlab.models.deviance.mean_deviance`).

    Parameters
    ----------
    data : TrainingData
        The encoded training data of one target (`prepare_training`).
    settings : list[dict]
        LightGBM parameters per setting, laid over `data.base_params`.
    options : GbmOptions
        folds, seed (of the fold hash), max_rounds and early_stopping_rounds are used.
    runner : TaskRunner
        Where the settings x folds fits run (default: one after the other in this process).

    Returns
    -------
    list[dict]
        One dict per setting, in the order given: `setting`, `mean_deviance`, `sd_deviance`
        (ddof 1), `rounds` (max(1, round(mean of the folds' best rounds))), `fold_deviances`,
        `fold_rounds`.

    Raises
    ------
    InputError
        A fold holds none of the target's rows.
    """
    fold = fold_of_group(data.groups, options.folds, options.seed)
    empty = [k for k in range(options.folds) if not (fold == k).any()]
    if empty:
        raise InputError(f"gbm folds: fold {empty[0]} of {options.folds} holds no {data.target} rows; use fewer folds")
    tasks = [(setting, k) for setting in settings for k in range(options.folds)]
    with progress_bar(f"cross-validating the {data.target} model", len(tasks)) as advance:
        results = runner.map(_fold_task, _SearchJob(data, options), tasks, advance)
    table = []
    for i, setting in enumerate(settings):
        mine = results[i * options.folds : (i + 1) * options.folds]
        deviances, rounds = [r[0] for r in mine], [r[1] for r in mine]
        table.append(
            {
                "setting": setting,
                "mean_deviance": float(np.mean(deviances)),
                "sd_deviance": float(np.std(deviances, ddof=1)),
                "rounds": max(1, round(float(np.mean(rounds)))),
                "fold_deviances": deviances,
                "fold_rounds": rounds,
            }
        )
    return table


# ---------------------------------------------------------------------------------------------
# final fit, balance, persistence


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
    )


def _tuned_fit(data: TrainingData, options: GbmOptions, runner: TaskRunner) -> GbmModel:
    settings = _select_settings(options)
    table = cross_validate(data, settings, options, runner)
    chosen = int(np.argmin([row["mean_deviance"] for row in table]))
    return fit_final(data, settings[chosen], table[chosen]["rounds"], table, chosen)


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
    )
