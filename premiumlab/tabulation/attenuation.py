"""Attenuation: how much of its source model's effect a table keeps, per factor and overall.

Per factor, over the training rows with weight w = exposure: x_r = the source model's effect on the
log score at row r (its effect curve, `effects.effect_curve`, summed over the boosters of a
frequency x severity source; the log relativity for a GLM) and y_r = the table's effect on the log
premium at row r (the log relativity of the row's band, plus for each two-way table holding the
factor the exposure-weighted mean over the partner's bands of the table's log cell relativity: the
table's own partial dependence). The attenuation is the weighted least-squares slope of y on x,

    b = sum_r w_r (x_r - xbar)(y_r - ybar) / sum_r w_r (x_r - xbar)^2,   xbar, ybar weighted means,

1 when the table keeps the model's effect, below 1 when it flattens it (credibility, pooling,
banding), above 1 when it steepens it. Overall: the same slope of the log of the table's pure
premium per exposure unit on the log of the source's prediction. A factor on which the source has
no effect (its x spans less than NO_EFFECT_BELOW = 1e-6 on the log scale, relativities equal to six
decimals, e.g. a GLM factor its credibility penalty held at the base) has no slope (None).
"""

from __future__ import annotations

import numpy as np

from premiumlab._core.validators import AT_LEAST_ZERO, checked_array
from premiumlab.tabulation.effects import Curve
from rating_tables import MISSING_LABEL

#: Slopes below this are reported as a flattened effect (a common-practice threshold, not a law).
FLATTENED_BELOW = 0.8
#: A source effect spanning less than this on the log scale is no effect: it has no slope.
NO_EFFECT_BELOW = 1e-6


def attenuation_slope(table_effect: np.ndarray, source_effect: np.ndarray, weight: np.ndarray) -> float | None:
    """Weighted least-squares slope of the table's effect on the source's (module docstring).

    Parameters
    ----------
    table_effect : np.ndarray
        y_r, the table's effect on the log premium of each row (finite).
    source_effect : np.ndarray
        x_r, the source model's effect on the log score of each row (finite).
    weight : np.ndarray
        w_r >= 0 of each row (exposure), positive total.

    Returns
    -------
    float or None
        b = sum w (x - xbar)(y - ybar) / sum w (x - xbar)^2 (unitless); None when x spans less
        than NO_EFFECT_BELOW on the rows with weight (or no row has weight).
    """
    x = checked_array("source effect", source_effect)
    y = checked_array("table effect", table_effect, rows=x.size)
    w = checked_array("attenuation weights", weight, AT_LEAST_ZERO, rows=x.size)
    weighted = x[w > 0]
    if weighted.size == 0 or weighted.max() - weighted.min() < NO_EFFECT_BELOW:
        return None
    dx = x - np.average(x, weights=w)
    return float(np.sum(w * dx * (y - np.average(y, weights=w))) / np.sum(w * dx * dx))


def curve_at_rows(curve: Curve, values: np.ndarray) -> np.ndarray:
    """The effect curve at each row: numeric values take their grid cell's point ([g_i, g_{i+1}),
    the first cell from -inf, as `effects.cell_exposure`), categorical rows their level's point.

    Parameters
    ----------
    curve : Curve
        A factor's effect curve (`effects.effect_curve`).
    values : np.ndarray
        The factor on the rows: numeric values, or level indices (categorical).

    Returns
    -------
    np.ndarray
        The curve's effect at each row (log score, up to the curve's constant): at the missing
        value (a missing number, or the last level when it is `MISSING_LABEL`) the curve's
        `missing_effect`; NaN where the curve has no effect (a level without a point, a missing
        value the training rows did not hold).
    """
    missing = np.nan if curve.missing_effect is None else curve.missing_effect
    if not curve.labels:
        v = np.asarray(values, dtype=float)
        cell = np.maximum(np.searchsorted(curve.points, v, side="right") - 1, 0)
        return np.where(np.isnan(v), missing, curve.effect[cell])
    at_level = np.full(len(curve.labels), np.nan)
    at_level[np.asarray(curve.points, dtype=np.int64)] = curve.effect
    if curve.labels[-1] == MISSING_LABEL:
        at_level[-1] = missing
    return at_level[np.asarray(values, dtype=np.int64)]


def table_partial_dependence(
    name: str,
    main: np.ndarray,
    two_way: dict[tuple[str, str], np.ndarray],
    cells: dict[str, np.ndarray],
    exposure: np.ndarray,
) -> np.ndarray:
    """The table's effect of one factor on the log premium at each row: its own log relativity plus,
    per two-way table holding it, the exposure-weighted mean of the log cell relativity over the
    partner's cells (the table's partial dependence over the rows).

    Parameters
    ----------
    name : str
        The factor.
    main : np.ndarray
        Log relativity of each of the factor's cells (bands, or levels of a categorical factor),
        the missing row's last when the factor has one.
    two_way : dict
        Per two-way table (a, b): log relativity matrix, rows the cells of a, columns those of b
        (no missing cell: a missing value takes relativity 1 there, log 0).
    cells : dict[str, np.ndarray]
        Per factor: the cell (band or level index) of each row, indexing `main` and the matrices;
        a cell past a matrix's last row or column is the missing value's.
    exposure : np.ndarray
        Exposure of each row (the partners' weights).

    Returns
    -------
    np.ndarray
        y_r = main[cell_r] + sum over tables of sum_j P(partner cell j) log T[cell_r, j], one per
        row, with P the partner's exposure shares (its missing value's share adding log 1 = 0).
    """
    own = cells[name]
    out = np.asarray(main, dtype=float)[own]
    for (a, b), matrix in two_way.items():
        if name not in (a, b):
            continue
        side, partner = (matrix, b) if name == a else (matrix.T, a)
        valued = cells[partner] < side.shape[1]
        share = np.bincount(cells[partner][valued], weights=exposure[valued], minlength=side.shape[1])
        mean_cell = side @ (share / exposure.sum())
        inside = own < side.shape[0]
        out = out + np.where(inside, mean_cell[np.where(inside, own, 0)], 0.0)
    return out


def flattened(slopes: dict[str, float | None]) -> list[str]:
    """The factors whose attenuation is below FLATTENED_BELOW (0.8, a common-practice threshold).

    Parameters
    ----------
    slopes : dict
        Factor -> attenuation slope (None: the source has no effect on the factor).

    Returns
    -------
    list of str
        The factors with a slope below 0.8, in the order of `slopes`.
    """
    return [name for name, b in slopes.items() if b is not None and b < FLATTENED_BELOW]
