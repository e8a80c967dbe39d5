"""Training data of a boosted model: inputs checked at the edge, features encoded, LightGBM parameters.

A target's rows, label and weight come from `premiumlab.models.targets`; categoricals are encoded as
level codes in the order of the training part, and the fixed LightGBM parameters (objective,
monotone constraints, threads, seed, categorical smoothing) are set once here for the search and the
final fit. LightGBM sees each row's weight divided by the target's mean hessian per row at the
start, so that its hessian-sum settings count rows (`premiumlab.models.gbm.smoothing`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import lightgbm as lgb
import numpy as np
import pandas as pd

from premiumlab._core.errors import InputError
from premiumlab._core.validators import ABOVE_ZERO, AT_LEAST_ZERO, checked_array
from premiumlab.book.gbm_options import MAX_CAT_TO_ONEHOT, MONOTONE_METHODS, GbmOptions
from premiumlab.models.gbm.smoothing import categorical_smoothing, hessian_scale
from premiumlab.models.targets import TARGETS

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
        "cat_smooth",
        "cat_l2",
        "min_data_per_group",
        "max_cat_threshold",
    }
)
BALANCE_TOLERANCE = 0.01
JSON_FORMAT = "premiumlab.gbm"

_FORBIDDEN_NAME_CHARACTERS = set('[]{}":,') | {" ", "\t", "\n"}


@dataclass(frozen=True)
class GbmInputs:
    """The training part of a book, one row per policy and period.

    features: one column per factor; numeric (cast to float64; NaN allowed, LightGBM's missing
    handling) or pandas Categorical for an unordered factor (handled natively by LightGBM; a missing
    value is a category of its own, `MISSING_LABEL`, and a category without training rows takes
    LightGBM's way for unseen categories); an ordered categorical with a monotone promise comes as
    float integer codes 0..k-1 (NaN where missing).
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
    hessian_scale: float = 1.0  # mean LightGBM hessian per row at the start; LightGBM weight = weight / it
    smoothing: dict | None = None  # how cat_smooth was chosen (`categorical_smoothing`), None if given

    @property
    def categorical_indices(self) -> list[int]:
        return [self.feature_names.index(name) for name in self.categories]

    @property
    def power(self) -> float:
        """Tweedie variance power of the target's deviance (1 Poisson, 2 Gamma, p Tweedie)."""
        return TARGETS[self.target].deviance_power(self.base_params.get("tweedie_variance_power"))

    def dataset(self) -> lgb.Dataset:
        """The LightGBM Dataset: the matrix, the label and the weight in row units (weight / hessian_scale)."""
        return lgb.Dataset(
            self.matrix,
            label=self.label,
            weight=self.weight / self.hessian_scale,
            feature_name=self.feature_names,
            categorical_feature=self.categorical_indices,
            params=_dataset_params(self.base_params),
        )


def _check_options(options: GbmOptions) -> None:
    for name in (
        "folds",
        "max_settings",
        "num_threads",
        "max_rounds",
        "early_stopping_rounds",
        "min_data_per_group",
        "max_cat_threshold",
        "cluster_rows",
        "search_rows",
    ):
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
    for name in ("cat_smooth", "cat_l2"):
        value = getattr(options, name)
        if value is not None and (
            isinstance(value, bool) or not isinstance(value, (int, float)) or not 0 <= value < math.inf
        ):
            raise InputError(f"gbm option {name}: {value!r} must be None (automatic) or a number >= 0 (rows)")
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


def _base_params(
    target: str, names: list[str], monotone: dict[str, int], options: GbmOptions, cat_smooth: float
) -> dict:
    """The fixed (non-searched) LightGBM parameters: objective, determinism, threads, constraints and
    the categorical settings (cat_smooth and cat_l2 in rows: `cat_smooth`, and options.cat_l2 or the
    same)."""
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
        "max_cat_to_onehot": MAX_CAT_TO_ONEHOT,
        "cat_smooth": cat_smooth,
        "cat_l2": cat_smooth if options.cat_l2 is None else float(options.cat_l2),
        "min_data_per_group": options.min_data_per_group,
        "max_cat_threshold": options.max_cat_threshold,
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
        claim or money per exposure unit), weight (exposure units or claims), policy groups, the
        fixed LightGBM parameters with the monotone constraints the target keeps, the hessian scale
        of the row units and, with options.cat_smooth None, how cat_smooth was estimated
        (`premiumlab.models.gbm.smoothing.categorical_smoothing`).

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
    objective, power = TARGETS[target].objective, TARGETS[target].deviance_power(options.variance_power)
    smoothing = None
    if options.cat_smooth is None:
        codes = {name: matrix[:, names.index(name)].astype(np.int64) for name in categories}
        smoothing = categorical_smoothing(label, weight, objective, power, codes)
        cat_smooth = float(smoothing["value"])
    else:
        cat_smooth = float(options.cat_smooth)
    return TrainingData(
        target=target,
        matrix=matrix,
        label=label,
        weight=weight,
        groups=groups[mask],
        feature_names=names,
        categories=categories,
        monotone=monotone,
        base_params=_base_params(target, names, monotone, options, cat_smooth),
        hessian_scale=hessian_scale(label, weight, objective, power),
        smoothing=smoothing,
    )


# ---------------------------------------------------------------------------------------------
# cross-validation
