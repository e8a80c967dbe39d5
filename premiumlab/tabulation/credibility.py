"""Credibility of thin levels and bands: Buhlmann-Straub.

Why Buhlmann-Straub rather than a ridge-penalised GLM: it gives each level a credibility Z in
[0, 1] that a reviewer can read in the exhibit and recompute from three figures (the level's
exposure m_i, the within-level variance v and the between-level variance a); its structural
parameters have closed-form unbiased estimators, so there is no penalty to tune by
cross-validation; and the complement of credibility (the overall level, or the neighbouring
bands) is explicit. A ridge penalty shrinks every coefficient toward the base level instead and
leaves no per-level weight to show.

Model: unit j of level i (a row: one policy in one period) has pure premium x_ij = amount / exposure
(money per exposure unit) with weight m_ij = exposure; E[x_ij | level] = mu_i and
Var[x_ij | level] = sigma_i^2 / m_ij. Estimators:
  m_i = sum_j m_ij,  xbar_i = sum_j m_ij x_ij / m_i,  m = sum_i m_i,  xbar = sum_i m_i xbar_i / m
  v = sum_i sum_j m_ij (x_ij - xbar_i)^2 / sum_i (n_i - 1)
  a = (sum_i m_i (xbar_i - xbar)^2 - (r - 1) v) / (m - sum_i m_i^2 / m), 0 when negative
  Z_i = m_i / (m_i + v / a)    (0 for every level when a = 0; r levels with exposure)
Credibility estimate: Z_i xbar_i + (1 - Z_i) C_i, with the complement C_i the overall xbar for a
categorical factor and, for a band of a numeric factor, the exposure-weighted mean experience of
its neighbouring bands (the overall xbar where they have no exposure).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from premiumlab._core.errors import InputError
from premiumlab._core.validators import ABOVE_ZERO, checked_array


@dataclass(frozen=True)
class BuhlmannStraub:
    """Structural parameters and per-level figures of a Buhlmann-Straub fit (module docstring)."""

    weight: np.ndarray  # m_i, exposure per level
    units: np.ndarray  # n_i, rows per level
    mean: np.ndarray  # xbar_i (NaN without exposure)
    overall: float  # xbar
    within: float  # v
    between: float  # a, >= 0
    credibility: np.ndarray  # Z_i

    @property
    def k(self) -> float:
        """v / a, the exposure at which a level has credibility 1/2 (inf when a = 0)."""
        return self.within / self.between if self.between > 0 else float("inf")


def buhlmann_straub(x: np.ndarray, w: np.ndarray, group: np.ndarray, n_groups: int) -> BuhlmannStraub:
    """Fit Buhlmann-Straub to units with values `x`, weights `w` > 0 and level codes `group` (0..n-1).

    The estimators of the module docstring: m_i, xbar_i, xbar, the within-level variance
    v = sum_i sum_j m_ij (x_ij - xbar_i)^2 / sum_i (n_i - 1), the between-level variance
    a = max(0, (sum_i m_i (xbar_i - xbar)^2 - (r - 1) v) / (m - sum_i m_i^2 / m)) and the credibility
    Z_i = m_i / (m_i + v / a). v is NaN and a is 0 when no level has two units; a is 0 with fewer
    than two levels with weight; every Z_i is 0 when a = 0.

    Parameters
    ----------
    x : np.ndarray
        Value of each unit, e.g. pure premium in money per exposure unit; finite.
    w : np.ndarray
        Weight of each unit (> 0), e.g. its exposure.
    group : np.ndarray
        Level code of each unit, in 0 .. n_groups-1.
    n_groups : int
        Number of levels; levels without units get weight 0, mean NaN and credibility 0.

    Returns
    -------
    BuhlmannStraub
        Per level: weight m_i, units n_i, mean xbar_i and credibility Z_i; overall: xbar, v and a.

    Raises
    ------
    InputError
        When `x` or `w` is not finite, `w` is not > 0, their length differs from `group`'s, or a
        code lies outside 0 .. n_groups-1.
    """
    group = np.asarray(group, dtype=np.int64)
    x = checked_array("credibility values", x, rows=len(group))
    w = checked_array("credibility weights", w, ABOVE_ZERO, rows=len(group))
    if len(group) and (group.min() < 0 or group.max() >= n_groups):
        raise InputError(f"credibility: level codes must lie in 0..{n_groups - 1}")
    m_i = np.bincount(group, weights=w, minlength=n_groups)
    n_i = np.bincount(group, minlength=n_groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.bincount(group, weights=w * x, minlength=n_groups) / m_i
    m = m_i.sum()
    overall = float(np.sum(w * x) / m)
    dof = np.sum(np.maximum(n_i - 1, 0))
    within = float(np.sum(w * (x - mean[group]) ** 2) / dof) if dof > 0 else float("nan")
    has = m_i > 0
    r = int(has.sum())
    spread = float(np.sum(m_i[has] * (mean[has] - overall) ** 2))
    denominator = m - np.sum(m_i**2) / m
    between = max(0.0, (spread - (r - 1) * within) / denominator) if r > 1 and dof > 0 else 0.0
    z = m_i / (m_i + within / between) if between > 0 else np.zeros(n_groups)
    return BuhlmannStraub(m_i, n_i, mean, overall, within, between, z)


def neighbour_complement(mean: np.ndarray, weight: np.ndarray, overall: float) -> np.ndarray:
    """Per band: the weight-averaged mean of the bands just below and above it (one at the ends);
    `overall` where the neighbours have no weight.

    C_k = (w_{k-1} xbar_{k-1} + w_{k+1} xbar_{k+1}) / (w_{k-1} + w_{k+1}), a missing or weightless
    neighbour counting 0.

    Parameters
    ----------
    mean : np.ndarray
        Mean experience xbar_k of each band in ascending band order (NaN allowed where the band has
        no weight), e.g. money per exposure unit.
    weight : np.ndarray
        Weight w_k (exposure) of each band, >= 0.
    overall : float
        The complement where neither neighbour has weight, in the unit of `mean`.

    Returns
    -------
    np.ndarray
        The complement C_k of each band, in the unit of `mean`.
    """
    mean = np.where(weight > 0, mean, 0.0)
    left_w, right_w = np.concatenate([[0.0], weight[:-1]]), np.concatenate([weight[1:], [0.0]])
    left_s, right_s = np.concatenate([[0.0], (mean * weight)[:-1]]), np.concatenate([(mean * weight)[1:], [0.0]])
    total = left_w + right_w
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(total > 0, (left_s + right_s) / total, overall)


def credibility_by_level(
    amount: np.ndarray, exposure: np.ndarray, codes: np.ndarray, n_levels: int, numeric: bool = False
) -> pd.DataFrame:
    """Buhlmann-Straub credibility of each level's pure premium toward its complement.

    The units are the rows, x = amount / exposure with weight exposure (`buhlmann_straub`); the
    complement is the overall mean xbar, or for bands of a numeric factor the mean of the
    neighbouring bands (`neighbour_complement`).

    Parameters
    ----------
    amount : np.ndarray
        Claim amount of each row (money).
    exposure : np.ndarray
        Exposure of each row (> 0), in the book's exposure unit.
    codes : np.ndarray
        Level or band of each row, in 0 .. n_levels-1.
    n_levels : int
        Number of levels or bands.
    numeric : bool
        The codes are bands of a numeric factor in ascending order: the complement is the
        neighbouring bands' experience instead of the overall experience.

    Returns
    -------
    pd.DataFrame
        One row per level: exposure, rows, experience (amount per exposure unit; NaN without
        exposure), complement, credibility Z in [0, 1] and the credibility-weighted estimate
        Z x experience + (1 - Z) x complement (the complement where the level has no exposure).
        `.attrs` holds the structural figures: within_variance v, between_variance a, k = v / a,
        overall and the kind of complement.
    """
    exposure = np.asarray(exposure, dtype=float)
    fit = buhlmann_straub(np.asarray(amount, dtype=float) / exposure, exposure, codes, n_levels)
    complement = neighbour_complement(fit.mean, fit.weight, fit.overall) if numeric else np.full(n_levels, fit.overall)
    experience = np.where(fit.weight > 0, fit.mean, np.nan)
    estimate = np.where(
        fit.weight > 0, fit.credibility * np.nan_to_num(fit.mean) + (1 - fit.credibility) * complement, complement
    )
    table = pd.DataFrame(
        {
            "exposure": fit.weight,
            "rows": fit.units,
            "experience": experience,
            "complement": complement,
            "credibility": fit.credibility,
            "estimate": estimate,
        }
    )
    table.attrs.update(
        {
            "within_variance": fit.within,
            "between_variance": fit.between,
            "k": fit.k,
            "overall": fit.overall,
            "complement": "neighbouring bands" if numeric else "overall",
        }
    )
    return table


def credibility_weighted(effect: np.ndarray, weight: np.ndarray, z: np.ndarray) -> np.ndarray:
    """Effects weighted by credibility towards their complement, the weighted mean effect.

    e_i' = Z_i e_i + (1 - Z_i) ebar with ebar = sum_i w_i e_i / sum_i w_i: on the log scale the
    complement is the relativity of the overall level of the factor.

    Parameters
    ----------
    effect : np.ndarray
        Effect e_i of each level on the log score (finite).
    weight : np.ndarray
        Weight w_i of each level (exposure, >= 0 with a positive total).
    z : np.ndarray
        Credibility Z_i of each level, in [0, 1].

    Returns
    -------
    np.ndarray
        The credibility-weighted effects e_i', in the unit of `effect`.
    """
    e = checked_array("effects", effect, unit="level")
    complement = np.average(e, weights=checked_array("effect weights", weight, rows=e.size, unit="level"))
    return complement + checked_array("credibility", z, rows=e.size, unit="level") * (e - complement)
