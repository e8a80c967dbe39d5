"""Friedman's H statistic of two-factor interactions on a model's raw (log) score.

For a sample x_1..x_n and a factor set S, the partial dependence PD_S(x_i) is the mean raw score
over the sample with the factors in S set to their values in x_i (brute force: every row of the
sample is replicated n times), centred to mean zero over i. For a pair (j, k),
    residual_i = PD_jk(x_i) - PD_j(x_i) - PD_k(x_i),
    H_jk (unnormalised) = sqrt(sum_i residual_i^2),   H^2_jk = sum_i residual_i^2 / sum_i PD_jk(x_i)^2
(Friedman and Popescu, 2008, Predictive learning via rule ensembles, section 8.1). On a log score,
H measures departure from a multiplicative effect of the pair; pairs are ranked by unnormalised H,
which is on the score's scale and so does not make weak pairs look strong.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from itertools import combinations
from typing import TypedDict

import lightgbm as lgb
import numpy as np
import pandas as pd

from premiumlab._core.errors import InputError

DEFAULT_SAMPLE = 300
DEFAULT_FACTORS = 6


class PairInteraction(TypedDict):
    pair: list[str]
    h2: float
    h_unnormalised: float


def top_factors_by_gain(booster: lgb.Booster, count: int = DEFAULT_FACTORS) -> list[str]:
    """The `count` features with the largest total split gain (ties in feature order), gain > 0 only.

    Parameters
    ----------
    booster : lgb.Booster
        The fitted LightGBM booster.
    count : int
        Most features to return.

    Returns
    -------
    list[str]
        Feature names, largest total gain first; fewer than `count` when fewer have a gain above 0.
    """
    gains = booster.feature_importance(importance_type="gain")
    names = booster.feature_name()
    order = np.argsort(-gains, kind="stable")
    return [names[i] for i in order[:count] if gains[i] > 0]


def _centred_pd(
    predict_raw: Callable[[pd.DataFrame], np.ndarray], sample: pd.DataFrame, factors: Sequence[str]
) -> np.ndarray:
    """Centred partial dependence of `factors` at each sample point (one predict on n x n rows)."""
    n = len(sample)
    stacked = sample.take(np.tile(np.arange(n), n)).reset_index(drop=True)  # row a*n + b: background b
    at_point = np.repeat(np.arange(n), n)  # ... with factors of point a
    for factor in factors:
        stacked[factor] = sample[factor].take(at_point).reset_index(drop=True)
    scores = np.asarray(predict_raw(stacked), dtype=np.float64)
    if scores.shape != (n * n,):
        raise InputError(f"predict_raw returned shape {scores.shape} for {n * n} rows")
    dependence = scores.reshape(n, n).mean(axis=1)
    return dependence - dependence.mean()


def h_statistics(
    booster_predict_raw: Callable[[pd.DataFrame], np.ndarray],
    features_sample: pd.DataFrame,
    factors: Sequence[str],
    seed: int,
    sample_size: int = DEFAULT_SAMPLE,
) -> list[PairInteraction]:
    """H statistics of every pair of `factors` on a seeded sample of `sample_size` rows of
    `features_sample`, ranked by unnormalised H (largest first; ties in factor order).

    H^2_jk = sum_i (PD_jk - PD_j - PD_k)^2 / sum_i PD_jk^2 and unnormalised H_jk =
    sqrt(sum_i (PD_jk - PD_j - PD_k)^2), the PD centred over the sample (module docstring).

    Parameters
    ----------
    booster_predict_raw : callable
        Raw (log) score of a features frame, one value per row.
    features_sample : pd.DataFrame
        Rows in the model's feature encoding, with a column per factor in `factors`.
    factors : sequence of str
        At least two distinct factors; every pair of them is measured.
    seed : int
        Seed of the sample draw (without replacement).
    sample_size : int
        Rows sampled, n; each partial dependence predicts n^2 rows.

    Returns
    -------
    list[PairInteraction]
        One entry per pair: `pair`, `h2` (unitless, >= 0; 0 when the joint PD is flat) and
        `h_unnormalised` (raw score units), largest unnormalised H first.

    Raises
    ------
    InputError
        A factor not a column, fewer than two distinct factors, fewer than two rows, or a scorer
        returning the wrong shape.
    """
    factors = list(factors)
    absent = [f for f in factors if f not in features_sample.columns]
    if absent:
        raise InputError(f"h_statistics: features_sample has no column {absent[0]!r}")
    if len(factors) < 2 or len(set(factors)) != len(factors):
        raise InputError(f"h_statistics: need at least two distinct factors, got {factors}")
    if len(features_sample) < 2:
        raise InputError("h_statistics: features_sample needs at least two rows")
    rows = np.random.default_rng(seed).choice(
        len(features_sample), min(sample_size, len(features_sample)), replace=False
    )
    sample = features_sample.iloc[np.sort(rows)].reset_index(drop=True)
    one_way = {f: _centred_pd(booster_predict_raw, sample, [f]) for f in factors}
    results = []
    for a, b in combinations(factors, 2):
        joint = _centred_pd(booster_predict_raw, sample, [a, b])
        residual_ss = float(np.sum((joint - one_way[a] - one_way[b]) ** 2))
        joint_ss = float(np.sum(joint**2))
        results.append(
            PairInteraction(
                pair=[a, b],
                h2=residual_ss / joint_ss if joint_ss > 0 else 0.0,
                h_unnormalised=float(np.sqrt(residual_ss)),
            )
        )
    return sorted(results, key=lambda r: -r["h_unnormalised"])
