"""Holdout metrics of a run's prediction columns, per target.

Targets on the holdout, each with its actual, prediction, weight and deviance power:
frequency (claims per exposure; weight exposure; Poisson, power 1), severity (amount per claim on
rows with claims and a positive amount; weight claims; Gamma, power 2) and pure premium (amount per
exposure; weight exposure; Tweedie at the GLM's power). Pure premium is also compared as frequency x
severity against the direct Tweedie model.
"""
from __future__ import annotations

import numpy as np
import pandas as pd


def target_view(preds: pd.DataFrame, target: str) -> tuple[pd.Series, np.ndarray, np.ndarray, np.ndarray]:
    """(row mask, actual total, weight, actual per weight unit) of one target on the given rows."""
    count = preds["claim_count"].to_numpy(float)
    expo = preds["exposure"].to_numpy(float)
    if target == "frequency":
        return pd.Series(True, index=preds.index), count, expo, count / expo
    amount = preds["claim_amount"].to_numpy(float)
    if target == "severity":
        mask = (count > 0) & (amount > 0)
        return pd.Series(mask, index=preds.index), amount[mask], count[mask], amount[mask] / count[mask]
    return pd.Series(True, index=preds.index), amount, expo, amount / expo


def model_columns(preds: pd.DataFrame, target: str) -> list[str]:
    """Prediction columns for a target: glm_/gbm_ target, plus freq x sev for pure premium."""
    names = [f"{k}_{target}" for k in ("glm", "gbm")]
    if target == "pure_premium":
        names += ["glm_freq_x_sev", "gbm_freq_x_sev"]
    return [n for n in names if n in preds.columns]


def power_of(target: str, tweedie_power: float) -> float:
    return {"frequency": 1.0, "severity": 2.0}.get(target, tweedie_power)


def holdout_metrics(preds: pd.DataFrame, tweedie_power: float) -> dict:
    """Mean deviance, D^2, Gini and balance of every model column on the holdout rows."""
    from premiumlab.evaluation.metrics import balance, d2, gini, mean_deviance
    hold = preds[preds["holdout"]].reset_index(drop=True)
    out = {}
    for target in ("frequency", "severity", "pure_premium"):
        if target != "frequency" and "claim_amount" not in hold:
            continue
        mask, actual, weight, y = target_view(hold, target)
        power = power_of(target, tweedie_power)
        out[target] = {"power": power, "rows": int(mask.sum()), "models": {}}
        for col in model_columns(hold, target):
            mu = hold.loc[mask, col].to_numpy(float)
            out[target]["models"][col] = {
                "mean_deviance": mean_deviance(y, mu, weight, power), "d2": d2(y, mu, weight, power),
                "gini": gini(actual, mu, weight), "balance": balance(actual, mu, weight)}
    return out
