"""Thin categorical levels in the boosted models: LightGBM's hessian sums counted in rows, and the
credibility constant that smooths a categorical's levels.

Why: LightGBM's `lambda_l2`, `cat_l2`, `cat_smooth` and `min_sum_hessian_in_leaf` are sums of
hessians, whose size depends on the objective and on the money unit: at the starting prediction mu
(LightGBM's boost-from-average, the weighted mean label) a row's hessian is about w mu e^0.7 for
Poisson frequency (0.1 at a frequency of 5 %), w for Gamma severity and w mu^(2-p) for a Tweedie pure
premium (15 at a pure premium of 400 and p = 1.6). LightGBM's defaults (cat_smooth = cat_l2 = 10)
are thus 100 rows' worth on a frequency model and less than one row on a pure-premium model, which
then sorts a high-cardinality categorical's levels by their raw mean gradient, so that the thinnest,
noisiest levels end up at both ends of the order and win the splits. Two remedies:

1. Rows: the LightGBM weight of a row is its weight w / h_bar, h_bar the mean hessian per row at
   the start, so that a row's hessian is 1 on average and every hessian-sum setting counts rows, for
   every target and money unit. The model is unchanged otherwise: gradients and hessians scale
   together, predictions do not depend on a common weight factor, and LightGBM's count-based checks
   (`min_data_in_leaf`, `min_data_per_group`) are in rows already.
2. Credibility: LightGBM orders a categorical's levels by G_j / (H_j + cat_smooth) (G_j and H_j the
   level's sums of gradients and hessians; the Newton step of the level is -G_j / H_j) and considers
   only levels with H_j >= cat_smooth in row units. With cat_smooth = k = phi / tau^2, the
   Buhlmann-Straub credibility constant of the levels' Newton steps, the order is that of the
   credibility-weighted steps Z_j (-G_j / H_j), Z_j = H_j / (H_j + k): a thin level sits near the
   middle unless its experience is credible. Estimated at the start on the gradients in row units:
     phi   = sum_i (g_i - h_i G_j(i) / H_j(i))^2 / sum_i h_i x n / (n - r)   (noise per unit hessian)
     tau^2 = (sum_j H_j (b_j - b)^2 - (r - 1) phi) / (H - sum_j H_j^2 / H)   (spread of the levels)
   with b_j = -G_j / H_j, b = -G / H, H = sum_j H_j, r levels with rows, n rows. Single large losses
   would swamp both figures, so the labels are capped at a high quantile of the non-zero labels for
   this estimate only (common practice for credibility estimates).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from premiumlab.book.gbm_options import (
    LARGE_LABEL_QUANTILE,
    MAX_CAT_TO_ONEHOT,
    MIN_CAT_SMOOTH,
    POISSON_MAX_DELTA_STEP,
)


def start_gradients(
    label: np.ndarray, weight: np.ndarray, objective: str, power: float
) -> tuple[np.ndarray, np.ndarray]:
    """LightGBM's gradient and hessian of each row at the starting prediction.

    The start is mu = sum(w y) / sum(w) (boost-from-average) on the log scale s = log(mu); the
    objectives' derivatives are LightGBM's (both multiplied by the row's weight w):
    poisson g = w (mu - y), h = w mu e^0.7 (0.7: LightGBM's `poisson_max_delta_step`);
    gamma g = w (1 - y / mu), h = w y / mu;
    tweedie g = w (mu^(2-p) - y mu^(1-p)), h = w ((2-p) mu^(2-p) - (1-p) y mu^(1-p)).

    Parameters
    ----------
    label : np.ndarray
        The target's label per row (claims per exposure unit, money per claim or per exposure unit).
    weight : np.ndarray
        The target's weight per row (exposure units or claims), > 0.
    objective : str
        "poisson", "gamma" or "tweedie".
    power : float
        Tweedie variance power p (used by "tweedie" only).

    Returns
    -------
    tuple of np.ndarray
        (g, h) per row, in the label's units; h > 0 wherever the row has a positive label or the
        objective is not gamma.
    """
    mu = float(np.sum(weight * label) / np.sum(weight))
    if objective == "poisson":
        return weight * (mu - label), weight * mu * math.exp(POISSON_MAX_DELTA_STEP)
    if objective == "gamma":
        return weight * (1.0 - label / mu), weight * label / mu
    if objective == "tweedie":
        first, second = mu ** (1.0 - power), mu ** (2.0 - power)
        return weight * (second - label * first), weight * ((2.0 - power) * second - (1.0 - power) * label * first)
    raise ValueError(f"objective {objective!r} has no start gradients here")


def hessian_scale(label: np.ndarray, weight: np.ndarray, objective: str, power: float) -> float:
    """h_bar: LightGBM's mean hessian per row at the starting prediction (`start_gradients`).

    Closed forms: poisson mean(w) mu e^0.7, gamma mean(w) (as sum(w y) / mu = sum(w)), tweedie
    mean(w) mu^(2-p), with mu = sum(w y) / sum(w).

    Parameters
    ----------
    label, weight : np.ndarray
        The target's label and weight per row.
    objective : str
        "poisson", "gamma" or "tweedie".
    power : float
        Tweedie variance power p.

    Returns
    -------
    float
        The mean hessian per row (> 0), in hessian units of the objective and money unit; a row's
        LightGBM weight is w / h_bar.
    """
    return float(np.mean(start_gradients(label, weight, objective, power)[1]))


@dataclass(frozen=True)
class Credibility:
    """Buhlmann-Straub figures of one categorical's levels on start gradients in row units."""

    factor: str
    levels: int  # levels with rows
    within: float  # phi, noise per unit hessian (rows)
    between: float  # tau^2, spread of the levels' Newton steps beyond noise (may be <= 0)

    @property
    def k(self) -> float:
        """phi / tau^2 in rows: the hessian at which a level's credibility is 1/2 (inf if tau^2 <= 0)."""
        return self.within / self.between if self.between > 0 else math.inf


def level_credibility(factor: str, g: np.ndarray, h: np.ndarray, codes: np.ndarray) -> Credibility:
    """Buhlmann-Straub estimate of the credibility constant of a categorical's levels (module docstring).

    Parameters
    ----------
    factor : str
        The categorical's name (kept in the result).
    g, h : np.ndarray
        Gradient and hessian per row, in row units (hessians averaging 1 per row).
    codes : np.ndarray
        The row's level code, integers >= 0.

    Returns
    -------
    Credibility
        phi and tau^2 over the levels with a positive hessian sum; tau^2 is 0 with fewer than two
        such levels.
    """
    codes = codes.astype(np.int64)
    big_g, big_h = np.bincount(codes, weights=g), np.bincount(codes, weights=h)
    has = big_h > 0
    r, n = int(has.sum()), len(g)
    step = np.zeros_like(big_h)
    step[has] = -big_g[has] / big_h[has]
    residual = g + h * step[codes]
    within = float(np.sum(residual**2) / np.sum(h) * n / max(n - r, 1))
    total = float(big_h.sum())
    overall = -float(big_g.sum()) / total
    if r < 2:
        return Credibility(factor, r, within, 0.0)
    spread = float(np.sum(big_h[has] * (step[has] - overall) ** 2))
    between = (spread - (r - 1) * within) / (total - float(np.sum(big_h[has] ** 2)) / total)
    return Credibility(factor, r, within, between)


def capped_label(label: np.ndarray, quantile: float = LARGE_LABEL_QUANTILE) -> np.ndarray:
    """The label with every value above the `quantile` of its non-zero values set to that quantile.

    Parameters
    ----------
    label : np.ndarray
        Labels >= 0.
    quantile : float
        In (0, 1]; numpy's default (linear) quantile of the labels > 0.

    Returns
    -------
    np.ndarray
        min(label, cap), or the label itself when it has no value > 0.
    """
    positive = label[label > 0]
    return np.minimum(label, np.quantile(positive, quantile)) if positive.size else label


def categorical_smoothing(
    label: np.ndarray,
    weight: np.ndarray,
    objective: str,
    power: float,
    codes: dict[str, np.ndarray],
) -> dict:
    """cat_smooth in rows for a target: the credibility constant of its most-levelled categorical.

    Among the categoricals LightGBM orders by their levels' gradients (more than
    `MAX_CAT_TO_ONEHOT` levels with rows; fewer are split one level against the rest), the one with
    the most levels with rows (ties: the larger k) gives k = phi / tau^2 (`level_credibility`),
    estimated on the start gradients of the capped label (`capped_label`) in row units, and
    cat_smooth = min(max(k, MIN_CAT_SMOOTH), n / r), n the rows and r its levels with rows: a level
    of average size keeps a credibility of at least 1/2, also when the levels show no spread beyond
    noise (k infinite).

    Parameters
    ----------
    label, weight : np.ndarray
        The target's label and weight per row.
    objective : str
        "poisson", "gamma" or "tweedie".
    power : float
        Tweedie variance power p.
    codes : dict[str, np.ndarray]
        Per unordered categorical, the level code of each row (integers >= 0).

    Returns
    -------
    dict
        `value` (cat_smooth in rows), `factor` (None when no categorical is ordered by LightGBM, then
        value = MIN_CAT_SMOOTH), `levels`, `within` (phi), `between` (tau^2), `k` (None if
        infinite) and `limited` ("lower", "upper" or None).
    """
    g, h = start_gradients(capped_label(label), weight, objective, power)
    scale = float(np.mean(h))
    candidates = []
    for name, level_codes in codes.items():
        levels = int(np.count_nonzero(np.bincount(level_codes.astype(np.int64))))
        if levels > MAX_CAT_TO_ONEHOT:
            candidates.append(level_credibility(name, g / scale, h / scale, level_codes))
    if not candidates:
        return {
            "value": MIN_CAT_SMOOTH,
            "factor": None,
            "levels": 0,
            "within": None,
            "between": None,
            "k": None,
            "limited": None,
        }
    chosen = max(candidates, key=lambda c: (c.levels, c.k))
    upper = len(label) / chosen.levels
    value = min(max(chosen.k, MIN_CAT_SMOOTH), upper)
    limited = "lower" if chosen.k < MIN_CAT_SMOOTH else "upper" if chosen.k > upper else None
    return {
        "value": float(value),
        "factor": chosen.factor,
        "levels": chosen.levels,
        "within": chosen.within,
        "between": chosen.between,
        "k": None if math.isinf(chosen.k) else chosen.k,
        "limited": limited,
    }
