"""Holdout metrics: ordered Lorenz curve and Gini, lift, double lift, actual-versus-expected,
balance, and paired bootstrap intervals for differences between models (in deviance, from
`premiumlab.models.deviance`, or in Gini).

Pure numpy/pandas functions without I/O. Inputs are validated here, at the edge
(`premiumlab._core.validators`): bad input raises `InputError` (a `ValueError`) whose message names
the argument and the first offending row.

Conventions: `actual` is the observed loss (amount or count) of each row in money or claims,
`predicted` is a model's prediction per exposure unit (pure premium or frequency), `exposure` is
earned exposure; a row's expected loss is `predicted * exposure`.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd
from scipy.stats import chi2

from premiumlab._core.errors import InputError
from premiumlab._core.validators import (
    ABOVE_ZERO,
    AT_LEAST_ZERO,
    COUNT,
    ArrayLike,
    checked_array,
    checked_arrays,
    checked_weights,
)
from premiumlab.models.deviance import checked_deviance_inputs, unit_deviance_unchecked

BootstrapMetric = Callable[..., np.ndarray]
"""(resample_weights of shape (B, n), *arrays) -> B values of the difference between two models."""

_BOOTSTRAP_CELLS_PER_CHUNK = 2_000_000  # resamples are drawn in chunks of about this many weights


# ---------------------------------------------------------------------------------------------
# validation at the edge


def _require_positive_total(name: str, values: np.ndarray) -> None:
    checked_array(name, values, AT_LEAST_ZERO)
    if values.sum() <= 0:
        raise InputError(f"{name}: the total is 0; the metric needs some observed loss")


def _check_bins(bins: int, rows: int) -> None:
    if isinstance(bins, bool) or not isinstance(bins, (int, np.integer)) or bins < 1:
        raise InputError(f"bins: {bins!r} must be a positive integer")
    if bins > rows:
        raise InputError(f"bins: {bins} bins need at least {bins} rows, got {rows}")


# ---------------------------------------------------------------------------------------------
# ordered Lorenz curve and Gini


def _checked_loss_inputs(actual: ArrayLike, exposure: ArrayLike, **predictions: ArrayLike) -> list[np.ndarray]:
    """[actual, exposure, *predictions], validated: losses >= 0 with a positive total, exposure >= 0."""
    arrays = checked_arrays(actual=actual, exposure=exposure, **predictions)
    _require_positive_total("actual", arrays[0])
    checked_weights("exposure", arrays[1])
    return arrays


def _lorenz_batch(
    resample_weights: np.ndarray, actual: np.ndarray, predicted: np.ndarray, exposure: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Ordered Lorenz points for each row of `resample_weights` (shape (B, n)).

    Rows are sorted by predicted (ascending); each run of tied predictions is one segment, so only
    the cumulative sums at the end of each run are kept. Returns x (exposure share) and y (loss
    share), both (B, runs + 1) starting at 0.
    """
    order = np.argsort(predicted, kind="stable")
    sorted_predicted = predicted[order]
    run_ends = np.flatnonzero(np.append(sorted_predicted[1:] != sorted_predicted[:-1], True))
    weights = resample_weights[:, order]
    cum_exposure = np.cumsum(weights * exposure[order], axis=1)[:, run_ends]
    cum_actual = np.cumsum(weights * actual[order], axis=1)[:, run_ends]
    start = np.zeros((weights.shape[0], 1))
    with np.errstate(invalid="ignore", divide="ignore"):
        x = np.hstack([start, cum_exposure / cum_exposure[:, -1:]])
        y = np.hstack([start, cum_actual / cum_actual[:, -1:]])
    return x, y


def _gini_batch(
    resample_weights: np.ndarray, actual: np.ndarray, predicted: np.ndarray, exposure: np.ndarray
) -> np.ndarray:
    """Gini = 1 - 2 * (trapezoid area under the ordered Lorenz curve), one value per resample."""
    x, y = _lorenz_batch(resample_weights, actual, predicted, exposure)
    area = np.sum(np.diff(x, axis=1) * (y[:, 1:] + y[:, :-1]) / 2, axis=1)
    return 1 - 2 * area


def lorenz_curve(actual: ArrayLike, predicted: ArrayLike, exposure: ArrayLike) -> pd.DataFrame:
    """Ordered Lorenz curve (Frees, Meyers and Cummings, 2011): rows sorted by predicted per exposure
    (ascending), tied predictions merged into one point. Columns `exposure_share` and `loss_share`
    (cumulative shares in [0, 1]), first row (0, 0).

    Parameters
    ----------
    actual : array_like
        Observed loss of each row (money or claims), >= 0 with a positive total.
    predicted : array_like
        A model's prediction per exposure unit of each row; only its order matters.
    exposure : array_like
        Earned exposure of each row (exposure units), >= 0 with a positive total.

    Returns
    -------
    pandas.DataFrame
        `exposure_share` = cumulative exposure / total exposure and `loss_share` = cumulative
        actual / total actual at the end of each run of tied predictions, lowest prediction first,
        after a first row (0, 0).
    """
    actual_arr, exposure_arr, predicted_arr = _checked_loss_inputs(actual, exposure, predicted=predicted)
    x, y = _lorenz_batch(np.ones((1, actual_arr.size)), actual_arr, predicted_arr, exposure_arr)
    return pd.DataFrame({"exposure_share": x[0], "loss_share": y[0]})


def gini(actual: ArrayLike, predicted: ArrayLike, exposure: ArrayLike) -> float:
    """Gini of the ordered Lorenz curve: 1 - 2 * trapezoid area under (exposure share, loss share),
    tied predictions merged (so the value does not depend on the order of ties). 0 for a constant
    prediction; larger is better at separating low from high risks.

    Parameters
    ----------
    actual : array_like
        Observed loss of each row (money or claims), >= 0 with a positive total.
    predicted : array_like
        A model's prediction per exposure unit of each row; only its order matters.
    exposure : array_like
        Earned exposure of each row (exposure units), >= 0 with a positive total.

    Returns
    -------
    float
        Gini = 1 - sum_i (x_i - x_(i-1)) (y_i + y_(i-1)) over the points (x, y) of `lorenz_curve`,
        in [-1, 1] (unitless).
    """
    actual_arr, exposure_arr, predicted_arr = _checked_loss_inputs(actual, exposure, predicted=predicted)
    return float(_gini_batch(np.ones((1, actual_arr.size)), actual_arr, predicted_arr, exposure_arr)[0])


# ---------------------------------------------------------------------------------------------
# lift, double lift, actual versus expected, balance


def _equal_exposure_bins(sort_key: np.ndarray, exposure: np.ndarray, bins: int) -> np.ndarray:
    """Bin index (0 .. bins-1) per row: rows sorted by `sort_key` (stable, so ties keep row order),
    then row i goes to bin floor(bins * m_i) with m_i = (cumulative exposure up to and including i
    minus half of its own exposure) / total exposure, the row's exposure midpoint. Every bin then
    holds total/bins exposure to within one policy's exposure."""
    order = np.argsort(sort_key, kind="stable")
    sorted_exposure = exposure[order]
    cumulative = np.cumsum(sorted_exposure)
    midpoint = (cumulative - sorted_exposure / 2) / cumulative[-1]
    bin_index = np.empty(sort_key.size, dtype=np.int64)
    bin_index[order] = np.minimum((midpoint * bins).astype(np.int64), bins - 1)
    return bin_index


def _bin_sums(bin_index: np.ndarray, bins: int, **values: np.ndarray) -> dict[str, np.ndarray]:
    """Per-bin row count (`policies`) and sums of each named array."""
    sums = {"policies": np.bincount(bin_index, minlength=bins)}
    sums.update({name: np.bincount(bin_index, weights=v, minlength=bins) for name, v in values.items()})
    return sums


def _ratio(numerator: np.ndarray, denominator: np.ndarray) -> np.ndarray:
    """numerator / denominator, NaN where the denominator is 0 (an empty bin)."""
    out = np.full(numerator.shape, np.nan)
    np.divide(numerator, denominator, out=out, where=denominator > 0)
    return out


def lift_table(actual: ArrayLike, predicted: ArrayLike, exposure: ArrayLike, bins: int = 10) -> pd.DataFrame:
    """Lift by equal-exposure bins of predicted per exposure (bin 1 = lowest prediction).

    Rows are assigned by their cumulative-exposure midpoint (see `_equal_exposure_bins`); tied
    predictions keep row order and may straddle a bin edge, which equal exposure requires. Columns:
    `bin`, `policies`, `exposure`, `mean_predicted` = sum(predicted * exposure) / sum(exposure),
    `mean_actual` = sum(actual) / sum(exposure) (both per exposure unit), and `actual_to_overall` =
    mean_actual / (total actual / total exposure).

    Parameters
    ----------
    actual : array_like
        Observed loss of each row (money or claims), >= 0 with a positive total.
    predicted : array_like
        A model's prediction per exposure unit of each row (pure premium or frequency).
    exposure : array_like
        Earned exposure of each row (exposure units), >= 0 with a positive total.
    bins : int
        Number of equal-exposure bins, 1 to the number of rows.

    Returns
    -------
    pandas.DataFrame
        One row per bin with the columns above; the means are NaN in a bin without exposure.
    """
    actual_arr, exposure_arr, predicted_arr = _checked_loss_inputs(actual, exposure, predicted=predicted)
    _check_bins(bins, actual_arr.size)
    bin_index = _equal_exposure_bins(predicted_arr, exposure_arr, bins)
    sums = _bin_sums(bin_index, bins, exposure=exposure_arr, expected=predicted_arr * exposure_arr, actual=actual_arr)
    mean_actual = _ratio(sums["actual"], sums["exposure"])
    return pd.DataFrame(
        {
            "bin": np.arange(1, bins + 1),
            "policies": sums["policies"],
            "exposure": sums["exposure"],
            "mean_predicted": _ratio(sums["expected"], sums["exposure"]),
            "mean_actual": mean_actual,
            "actual_to_overall": mean_actual / (actual_arr.sum() / exposure_arr.sum()),
        }
    )


def double_lift(
    actual: ArrayLike, pred_a: ArrayLike, pred_b: ArrayLike, exposure: ArrayLike, bins: int = 10
) -> pd.DataFrame:
    """Double lift of model a against model b: rows sorted by pred_a / pred_b, equal-exposure bins
    (same midpoint rule as `lift_table`), bin 1 = where a is lowest relative to b.

    Each series is an index to its own overall mean, so a model's overall level cancels:
    `actual_index` = (A_k / E_k) / (A / E), `a_index` = (P_ak / E_k) / (P_a / E), `b_index`
    likewise, where A is actual loss, E exposure and P_a = sum(pred_a * exposure), per bin k and in
    total. The model whose index tracks `actual_index` more closely ranks risks better.
    `mean_ratio` is the exposure-weighted mean of pred_a / pred_b in the bin.

    Parameters
    ----------
    actual : array_like
        Observed loss of each row (money or claims), >= 0 with a positive total.
    pred_a, pred_b : array_like
        The two models' predictions per exposure unit of each row, > 0 (their ratio orders rows).
    exposure : array_like
        Earned exposure of each row (exposure units), >= 0 with a positive total.
    bins : int
        Number of equal-exposure bins, 1 to the number of rows.

    Returns
    -------
    pandas.DataFrame
        One row per bin: `bin`, `policies`, `exposure`, `mean_ratio`, `actual_index`, `a_index`
        and `b_index` (NaN in a bin without exposure).
    """
    actual_arr, exposure_arr, a_arr, b_arr = _checked_loss_inputs(actual, exposure, pred_a=pred_a, pred_b=pred_b)
    sorted_by_ratio = ABOVE_ZERO.because("double lift sorts by pred_a / pred_b")
    checked_array("pred_a", a_arr, sorted_by_ratio)
    checked_array("pred_b", b_arr, sorted_by_ratio)
    _check_bins(bins, actual_arr.size)
    ratio = a_arr / b_arr
    bin_index = _equal_exposure_bins(ratio, exposure_arr, bins)
    sums = _bin_sums(
        bin_index,
        bins,
        exposure=exposure_arr,
        ratio=ratio * exposure_arr,
        actual=actual_arr,
        a=a_arr * exposure_arr,
        b=b_arr * exposure_arr,
    )
    total_exposure = exposure_arr.sum()

    def index(name: str) -> np.ndarray:
        return _ratio(sums[name], sums["exposure"]) / (sums[name].sum() / total_exposure)

    return pd.DataFrame(
        {
            "bin": np.arange(1, bins + 1),
            "policies": sums["policies"],
            "exposure": sums["exposure"],
            "mean_ratio": _ratio(sums["ratio"], sums["exposure"]),
            "actual_index": index("actual"),
            "a_index": index("a"),
            "b_index": index("b"),
        }
    )


def actual_vs_expected(
    actual: ArrayLike, predicted: ArrayLike, exposure: ArrayLike, levels: pd.Series | ArrayLike
) -> pd.DataFrame:
    """Actual against expected per level (or band) of one factor.

    Columns: `level`, `policies`, `exposure`, `actual` = sum(actual), `expected` =
    sum(predicted * exposure) (same units as actual), `actual_to_expected` = actual / expected.
    Levels come in category order for a categorical series (unused categories left out),
    otherwise sorted; the series' name is used in error messages.

    Parameters
    ----------
    actual : array_like
        Observed loss of each row (money or claims), >= 0 with a positive total.
    predicted : array_like
        A model's prediction per exposure unit of each row (pure premium or frequency).
    exposure : array_like
        Earned exposure of each row (exposure units), >= 0 with a positive total.
    levels : pandas.Series or array_like
        The level or band of each row, none missing.

    Returns
    -------
    pandas.DataFrame
        One row per level present; `actual_to_expected` is NaN where `expected` is 0.
    """
    actual_arr, exposure_arr, predicted_arr = _checked_loss_inputs(actual, exposure, predicted=predicted)
    levels = levels if isinstance(levels, pd.Series) else pd.Series(levels)
    name = levels.name if levels.name is not None else "levels"
    if len(levels) != actual_arr.size:
        raise InputError(f"length mismatch: actual has {actual_arr.size} rows, {name} has {len(levels)}")
    missing = np.flatnonzero(pd.isna(levels).to_numpy())
    if missing.size:
        raise InputError(f"{name}: {missing.size} missing level(s), first at row {missing[0]}")
    frame = pd.DataFrame(
        {
            "level": levels.reset_index(drop=True),
            "exposure": exposure_arr,
            "actual": actual_arr,
            "expected": predicted_arr * exposure_arr,
        }
    )
    grouped = frame.groupby("level", sort=True, observed=True)
    table = grouped.agg(
        policies=("exposure", "size"),
        exposure=("exposure", "sum"),
        actual=("actual", "sum"),
        expected=("expected", "sum"),
    ).reset_index()
    table["actual_to_expected"] = _ratio(table["actual"].to_numpy(), table["expected"].to_numpy())
    return table


#: Two-sided confidence of the intervals on A/E per level.
AE_CONFIDENCE = 0.95


def poisson_interval(counts: ArrayLike, confidence: float = AE_CONFIDENCE) -> tuple[np.ndarray, np.ndarray]:
    """The exact (Garwood) two-sided interval of a Poisson mean from an observed count.

    lower = chi2.ppf(a / 2, 2k) / 2 (0 when k = 0), upper = chi2.ppf(1 - a / 2, 2k + 2) / 2, with
    a = 1 - confidence: the means at which P(X >= k) and P(X <= k) are a / 2 each.

    Parameters
    ----------
    counts : array_like
        Observed claim counts k (whole numbers >= 0).
    confidence : float
        Two-sided confidence, in (0, 1).

    Returns
    -------
    (np.ndarray, np.ndarray)
        Lower and upper ends of the interval, in claims.
    """
    k = checked_array("counts", counts, COUNT)
    if not 0 < confidence < 1:
        raise InputError(f"confidence: {confidence!r} must lie strictly between 0 and 1")
    alpha = 1.0 - confidence
    lower = np.where(k > 0, chi2.ppf(alpha / 2, 2 * np.maximum(k, 1)) / 2, 0.0)
    return lower, chi2.ppf(1 - alpha / 2, 2 * k + 2) / 2


def claims_actual_to_expected(
    claims: ArrayLike, frequency: ArrayLike, exposure: ArrayLike, levels: pd.Series | ArrayLike
) -> pd.DataFrame:
    """Actual over expected claim counts per level, with the exact Poisson interval.

    The `actual_vs_expected` table of the counts (expected = sum(frequency x exposure)) with
    `lower` and `upper` = the Garwood 95 % interval of the actual count (`poisson_interval`)
    divided by the expected count: the interval of A/E when the expected count is taken as known.

    Parameters
    ----------
    claims : array_like
        Claim count of each row.
    frequency : array_like
        A model's predicted frequency of each row (claims per exposure unit).
    exposure : array_like
        Earned exposure of each row (exposure units).
    levels : pandas.Series or array_like
        The level or band of each row, none missing.

    Returns
    -------
    pandas.DataFrame
        `level`, `policies`, `exposure`, `actual`, `expected` (claims), `actual_to_expected`,
        `lower`, `upper` (NaN where the expected count is 0).
    """
    table = actual_vs_expected(claims, frequency, exposure, levels)
    lower, upper = poisson_interval(table["actual"].to_numpy())
    expected = table["expected"].to_numpy()
    table["lower"] = _ratio(lower, expected)
    table["upper"] = _ratio(upper, expected)
    return table


def balance(actual: ArrayLike, predicted: ArrayLike, exposure: ArrayLike) -> float:
    """Expected over actual in total: sum(predicted * exposure) / sum(actual) (1 = balanced).

    Parameters
    ----------
    actual : array_like
        Observed loss of each row (money or claims), >= 0 with a positive total.
    predicted : array_like
        A model's prediction per exposure unit of each row (pure premium or frequency).
    exposure : array_like
        Earned exposure of each row (exposure units), >= 0 with a positive total.

    Returns
    -------
    float
        sum(predicted * exposure) / sum(actual) (unitless).
    """
    actual_arr, exposure_arr, predicted_arr = _checked_loss_inputs(actual, exposure, predicted=predicted)
    return float(np.sum(predicted_arr * exposure_arr) / actual_arr.sum())


# ---------------------------------------------------------------------------------------------
# paired bootstrap


@dataclass(frozen=True)
class BootstrapInterval:
    """A difference between two models on the full holdout, with its paired bootstrap spread."""

    estimate: float  # the difference on the full sample
    lower: float  # 2.5th percentile of the resampled differences
    upper: float  # 97.5th percentile
    share_positive: float  # share of resamples with a difference > 0
    n_boot: int
    seed: int
    resampled: str  # "rows" or "groups"

    def to_dict(self) -> dict[str, float | int | str]:
        return asdict(self)


def _resample_counts(rng: np.random.Generator, units: int, resamples: int) -> np.ndarray:
    """(resamples, units) counts of how often each unit is drawn in `units` draws with replacement."""
    draws = rng.integers(0, units, size=(resamples, units))
    flat = (draws + units * np.arange(resamples)[:, None]).ravel()
    return np.bincount(flat, minlength=resamples * units).reshape(resamples, units)


def _paired_bootstrap(
    metric_fn: BootstrapMetric,
    *arrays: np.ndarray,
    n_boot: int = 200,
    seed: int,
    groups: ArrayLike | None = None,
) -> BootstrapInterval:
    """Paired bootstrap of a difference between two models.

    Each resample draws n unit indices (rows, or the distinct `groups` such as policies) uniformly
    with replacement from `np.random.default_rng(seed).integers`; a unit drawn k times gets weight
    k, so the weights are multinomial(n, 1/n each) counts: exact resampling, not the Poisson(1)
    approximation. Both models see the same resample because `metric_fn(weights, *arrays)`
    computes the difference for a whole batch of weight rows (shape (B, n_rows)) at once; batches
    hold about two million weights. The estimate is `metric_fn` with unit weights; the interval is
    the 2.5 and 97.5 percentiles of the resampled differences.
    """
    if isinstance(n_boot, bool) or not isinstance(n_boot, (int, np.integer)) or n_boot < 2:
        raise InputError(f"n_boot: {n_boot!r} must be an integer >= 2")
    rows = arrays[0].shape[0] if arrays else 0
    if rows == 0 or any(a.shape[0] != rows for a in arrays):
        lengths = [a.shape[0] for a in arrays]
        raise InputError(f"arrays: need one or more arrays of equal, positive length, got lengths {lengths}")
    if groups is None:
        unit_of_row = None
        units = rows
    else:
        group_values = np.asarray(groups)
        if group_values.shape != (rows,):
            raise InputError(f"groups: expected {rows} rows, got shape {group_values.shape}")
        missing = np.flatnonzero(pd.isna(group_values))
        if missing.size:
            raise InputError(f"groups: {missing.size} missing value(s), first at row {missing[0]}")
        _, unit_of_row = np.unique(group_values, return_inverse=True)
        units = int(unit_of_row.max()) + 1
    rng = np.random.default_rng(seed)
    chunk = max(1, _BOOTSTRAP_CELLS_PER_CHUNK // rows)
    differences = []
    for start in range(0, n_boot, chunk):
        counts = _resample_counts(rng, units, min(chunk, n_boot - start))
        weights = (counts if unit_of_row is None else counts[:, unit_of_row]).astype(float)
        differences.append(metric_fn(weights, *arrays))
    resampled = np.concatenate(differences)
    if not np.isfinite(resampled).all():
        raise InputError(
            f"bootstrap: {int((~np.isfinite(resampled)).sum())} of {n_boot} resamples gave an undefined "
            "metric (e.g. no loss drawn); the holdout is too small for this comparison"
        )
    estimate = float(metric_fn(np.ones((1, rows)), *arrays)[0])
    lower, upper = np.percentile(resampled, [2.5, 97.5])
    return BootstrapInterval(
        estimate=estimate,
        lower=float(lower),
        upper=float(upper),
        share_positive=float(np.mean(resampled > 0)),
        n_boot=int(n_boot),
        seed=int(seed),
        resampled="rows" if groups is None else "groups",
    )


def _weighted_mean_difference(
    resample_weights: np.ndarray, weighted_difference: np.ndarray, weight: np.ndarray
) -> np.ndarray:
    return (resample_weights @ weighted_difference) / (resample_weights @ weight)


def deviance_difference(
    y: ArrayLike,
    mu_a: ArrayLike,
    mu_b: ArrayLike,
    weight: ArrayLike,
    power: float,
    *,
    n_boot: int = 200,
    seed: int,
    groups: ArrayLike | None = None,
) -> BootstrapInterval:
    """mean_deviance(a) - mean_deviance(b) with a paired bootstrap interval (> 0: b fits better).
    `groups` (e.g. policy ids) resamples whole groups of rows together.

    The difference is sum(w (d(y, mu_a) - d(y, mu_b))) / sum(w), with d the Tweedie unit deviance
    of `power` (`premiumlab.models.deviance.unit_deviance`); each resample weights the rows by how
    often they (or their group) are drawn.

    Parameters
    ----------
    y : array_like
        Observed response per unit of weight (frequency, severity or pure premium).
    mu_a, mu_b : array_like
        The two models' predictions of y, in the family's domain.
    weight : array_like
        Row weights (exposure units or claims), >= 0 with a positive total.
    power : float
        Tweedie power of the deviance: 0, 1, 1 < p < 2, 2 or p > 2.
    n_boot : int
        Bootstrap resamples, >= 2.
    seed : int
        Seed of numpy's `default_rng` drawing the resamples.
    groups : array_like or None
        A group id per row (e.g. policy ids): whole groups are drawn; None draws rows.

    Returns
    -------
    BootstrapInterval
        The difference on the full sample, the 2.5 and 97.5 percentiles of the resampled
        differences and the share of them above 0.
    """
    y_arr, w_arr, mu_a_arr, mu_b_arr = checked_deviance_inputs(y, weight, power, mu_a=mu_a, mu_b=mu_b)
    unit_difference = unit_deviance_unchecked(y_arr, mu_a_arr, power) - unit_deviance_unchecked(y_arr, mu_b_arr, power)
    return _paired_bootstrap(
        _weighted_mean_difference, w_arr * unit_difference, w_arr, n_boot=n_boot, seed=seed, groups=groups
    )


def _gini_difference_batch(
    resample_weights: np.ndarray,
    actual: np.ndarray,
    pred_a: np.ndarray,
    pred_b: np.ndarray,
    exposure: np.ndarray,
) -> np.ndarray:
    return _gini_batch(resample_weights, actual, pred_a, exposure) - _gini_batch(
        resample_weights, actual, pred_b, exposure
    )


def gini_difference(
    actual: ArrayLike,
    pred_a: ArrayLike,
    pred_b: ArrayLike,
    exposure: ArrayLike,
    *,
    n_boot: int = 200,
    seed: int,
    groups: ArrayLike | None = None,
) -> BootstrapInterval:
    """gini(a) - gini(b) with a paired bootstrap interval (> 0: a ranks risks better).
    `groups` (e.g. policy ids) resamples whole groups of rows together.

    Parameters
    ----------
    actual : array_like
        Observed loss of each row (money or claims), >= 0 with a positive total.
    pred_a, pred_b : array_like
        The two models' predictions per exposure unit of each row.
    exposure : array_like
        Earned exposure of each row (exposure units), >= 0 with a positive total.
    n_boot : int
        Bootstrap resamples, >= 2.
    seed : int
        Seed of numpy's `default_rng` drawing the resamples.
    groups : array_like or None
        A group id per row (e.g. policy ids): whole groups are drawn; None draws rows.

    Returns
    -------
    BootstrapInterval
        The difference on the full sample, the 2.5 and 97.5 percentiles of the resampled
        differences and the share of them above 0.
    """
    actual_arr, exposure_arr, a_arr, b_arr = _checked_loss_inputs(actual, exposure, pred_a=pred_a, pred_b=pred_b)
    return _paired_bootstrap(
        _gini_difference_batch,
        actual_arr,
        a_arr,
        b_arr,
        exposure_arr,
        n_boot=n_boot,
        seed=seed,
        groups=groups,
    )
