"""Holdout metrics of a run's prediction columns, per target.

Targets on the holdout (`premiumlab.models.targets`), each with its actual (the numerator),
prediction, weight and deviance power: frequency (Poisson, power 1), severity (Gamma, power 2) and
pure premium (Tweedie at the GLM's power). Pure premium is also compared as frequency x severity
against the direct Tweedie model.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from premiumlab.models.targets import CLAIM_AMOUNT, CLAIM_COUNT, EXPOSURE, TARGETS


def target_view(preds: pd.DataFrame, target: str) -> tuple[pd.Series, np.ndarray, np.ndarray, np.ndarray]:
    """(row mask, actual total, weight, actual per weight unit) of one target on the given rows.

    Parameters
    ----------
    preds : pandas.DataFrame
        Rows of `predictions.parquet`: exposure, claim count and (for severity and pure premium)
        claim amount.
    target : str
        The target's name: "frequency", "severity" or "pure_premium".

    Returns
    -------
    tuple of (pandas.Series, ndarray, ndarray, ndarray)
        The target's rows as a bool Series on `preds`' index; then, on those rows, the numerator
        (claims or money), the weight (exposure units or claims) and the label numerator / weight.
    """
    amount = preds[CLAIM_AMOUNT].to_numpy(float) if TARGETS[target].needs_amount else None
    view = TARGETS[target].view(preds[EXPOSURE].to_numpy(float), preds[CLAIM_COUNT].to_numpy(float), amount)
    return pd.Series(view.rows, index=preds.index), view.numerator, view.weight, view.label


def model_columns(preds: pd.DataFrame, target: str) -> list[str]:
    """Prediction columns for a target: glm_/gbm_ target, plus freq x sev for pure premium.

    Parameters
    ----------
    preds : pandas.DataFrame
        Rows of `predictions.parquet`.
    target : str
        The target's name: "frequency", "severity" or "pure_premium".

    Returns
    -------
    list of str
        Those of glm_TARGET, gbm_TARGET (and for pure premium glm_freq_x_sev, gbm_freq_x_sev)
        that `preds` has, in that order.
    """
    names = [f"{k}_{target}" for k in ("glm", "gbm")]
    if target == "pure_premium":
        names += ["glm_freq_x_sev", "gbm_freq_x_sev"]
    return [n for n in names if n in preds.columns]


def null_rate(preds: pd.DataFrame, target: str) -> float:
    """The null model of a target: one constant rate, fitted on the training rows.

    The maximum-likelihood intercept-only log-link GLM of the target's family with its weight:
    c = sum(numerator) / sum(weight) over the training rows (claims per exposure unit, money per
    claim, money per exposure unit).

    Parameters
    ----------
    preds : pandas.DataFrame
        Rows of `predictions.parquet`: the bool `holdout` column, exposure, claim count and (for
        severity and pure premium) claim amount.
    target : str
        The target's name: "frequency", "severity" or "pure_premium".

    Returns
    -------
    float
        The rate c; NaN when the training rows of the target have no weight.
    """
    _mask, actual, weight, _y = target_view(preds[~preds["holdout"].to_numpy(bool)], target)
    total = float(weight.sum())
    return float(actual.sum()) / total if total > 0 else float("nan")


def holdout_metrics(preds: pd.DataFrame, tweedie_power: float) -> dict:
    """Mean deviance, D^2, Gini and balance of every model column on the holdout rows, against the
    null model.

    Per target and model column, on the target's holdout rows with label y = numerator / weight,
    weight w and prediction mu: mean deviance sum(w d(y, mu)) / sum(w) with the target's Tweedie
    power; D^2 = 1 - D(y, mu) / D(y, ybar), ybar = sum(w y) / sum(w); the Gini of the numerator
    ordered by mu (`metrics.gini`); balance sum(mu w) / sum(numerator); and the ratio of the mean
    deviance to the null model's, the null model being the constant rate c of the training rows
    (`null_rate`), whose holdout mean deviance is sum(w d(y, c)) / sum(w).

    Parameters
    ----------
    preds : pandas.DataFrame
        Rows of `predictions.parquet`: the bool `holdout` column, exposure, claim count, claim
        amount if the book has one, and the model columns.
    tweedie_power : float
        The GLM's Tweedie power, the deviance power of pure premium (frequency uses 1, severity 2).

    Returns
    -------
    dict
        Per target name (severity and pure premium only with a claim amount column): `power`,
        `rows` (holdout rows of the target), `null` (`rate`: c per weight unit, `mean_deviance`: its
        holdout mean deviance) and `models`, per model column `mean_deviance`, `d2`, `gini`,
        `balance` and `deviance_to_null` (mean deviance / the null's; above 1: worse than the
        constant rate).
    """
    from premiumlab.evaluation.metrics import balance, gini
    from premiumlab.models.deviance import d2, mean_deviance

    hold = preds[preds["holdout"]].reset_index(drop=True)
    out: dict[str, dict] = {}
    for target in TARGETS.values():
        if target.needs_amount and CLAIM_AMOUNT not in hold:
            continue
        mask, actual, weight, y = target_view(hold, target.name)
        power = target.deviance_power(tweedie_power)
        rate = null_rate(preds, target.name)
        null = mean_deviance(y, np.full_like(y, rate), weight, power) if np.isfinite(rate) and rate > 0 else np.nan
        out[target.name] = {
            "power": power,
            "rows": int(mask.sum()),
            "null": {"rate": rate, "mean_deviance": null},
            "models": {},
        }
        for col in model_columns(hold, target.name):
            mu = hold.loc[mask, col].to_numpy(float)
            deviance = mean_deviance(y, mu, weight, power)
            out[target.name]["models"][col] = {
                "mean_deviance": deviance,
                "d2": d2(y, mu, weight, power),
                "gini": gini(actual, mu, weight),
                "balance": balance(actual, mu, weight),
                "deviance_to_null": deviance / null if null > 0 else np.nan,
            }
    return out
