"""The arithmetic of selections (pure functions): rebanding, credibility, smoothing, capping, rounding.

Relativities are multipliers on the pure premium; every function works on one factor's bands or
levels, in order, as float64 arrays. The orchestration (which rule, in which order, with which
current table) is `premiumlab.tabulation.select`.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

FloatArray = npt.NDArray[np.float64]


def rounded_edges(edges: FloatArray, step: float) -> FloatArray:
    """Interior band edges rounded to the nearest multiple of `step`, duplicates dropped.

    Parameters
    ----------
    edges : numpy.ndarray of float64
        Interior edges (no infinities), ascending, in the unit of the factor.
    step : float
        The rounding step, > 0, same unit (e.g. 5 years).

    Returns
    -------
    numpy.ndarray of float64
        round(edge / step) x step for each edge, ascending and distinct (two edges that round to
        one number become one edge).
    """
    return np.unique(np.round(np.asarray(edges, dtype=float) / step) * step)


def banded_relativity(
    band: npt.NDArray[np.intp], log_relativity: FloatArray, exposure: FloatArray, n_bands: int
) -> tuple[FloatArray, FloatArray]:
    """Each band's exposure-weighted geometric mean of the rows' relativities, and its exposure.

    r_b = exp(sum_{i in b} e_i log r_i / sum_{i in b} e_i).

    Parameters
    ----------
    band : numpy.ndarray of intp
        The band of each row, 0 to n_bands - 1.
    log_relativity : numpy.ndarray of float64
        log of each row's relativity.
    exposure : numpy.ndarray of float64
        Each row's exposure, >= 0 (exposure units).
    n_bands : int
        The number of bands.

    Returns
    -------
    relativity : numpy.ndarray of float64
        One per band; NaN for a band without exposure.
    band_exposure : numpy.ndarray of float64
        The exposure of each band.
    """
    weight = np.bincount(band, weights=exposure, minlength=n_bands)
    total = np.bincount(band, weights=exposure * log_relativity, minlength=n_bands)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean: FloatArray = np.exp(total / weight)
    return mean, weight.astype(np.float64)


def credibility_weighted(indicated: FloatArray, complement: FloatArray, z: FloatArray) -> FloatArray:
    """r = indicated^Z x complement^(1 - Z), credibility weighting on the log scale.

    Parameters
    ----------
    indicated : numpy.ndarray of float64
        The relativities to weight, > 0.
    complement : numpy.ndarray of float64
        The complement of credibility (the current relativities, or ones), > 0.
    z : numpy.ndarray of float64
        Credibility in [0, 1] of each band or level.

    Returns
    -------
    numpy.ndarray of float64
        exp(Z log indicated + (1 - Z) log complement).
    """
    return np.exp(z * np.log(indicated) + (1.0 - z) * np.log(complement))


def smoothed(relativity: FloatArray, exposure: FloatArray, window: int) -> FloatArray:
    """A centred moving average of the log relativities, weighted by exposure.

    log r'_b = sum_{|j - b| <= h} e_j log r_j / sum_{|j - b| <= h} e_j with h = (window - 1) / 2,
    the window cut at the first and last band; a window without exposure keeps r_b.

    Parameters
    ----------
    relativity : numpy.ndarray of float64
        The bands' relativities in band order, > 0.
    exposure : numpy.ndarray of float64
        The bands' exposure, >= 0.
    window : int
        An odd number of bands, >= 3.

    Returns
    -------
    numpy.ndarray of float64
        The smoothed relativities, one per band.
    """
    h = window // 2
    log_r = np.log(relativity)
    out = relativity.astype(float).copy()
    for b in range(relativity.size):
        lo, hi = max(0, b - h), min(relativity.size, b + h + 1)
        w = exposure[lo:hi]
        if w.sum() > 0:
            out[b] = np.exp(np.sum(w * log_r[lo:hi]) / w.sum())
    return out


def capped(relativity: FloatArray, current: FloatArray, cap: float) -> FloatArray:
    """Relativities held within +-cap of the current ones: clip(r, c (1 - cap), c (1 + cap)).

    Parameters
    ----------
    relativity : numpy.ndarray of float64
        The relativities to cap, > 0.
    current : numpy.ndarray of float64
        The current relativities of the same bands or levels, > 0, on the same base.
    cap : float
        The largest change either way, a share in [0, 1] (0.10 = 10 %).

    Returns
    -------
    numpy.ndarray of float64
        The capped relativities.
    """
    return np.clip(relativity, current * (1.0 - cap), current * (1.0 + cap))


def rounded_within(relativity: FloatArray, low: FloatArray, high: FloatArray, decimals: int) -> FloatArray:
    """Relativities rounded to `decimals`, a value that rounding pushed outside [low, high] moved
    one unit of the last decimal back inside (so a cap still holds after rounding).

    Parameters
    ----------
    relativity : numpy.ndarray of float64
        The relativities, within [low, high].
    low, high : numpy.ndarray of float64
        The limits of each (-inf and inf for none).
    decimals : int
        Decimals kept (the table's `relativity_decimals`).

    Returns
    -------
    numpy.ndarray of float64
        round(r, decimals); where that is above `high`, floor(high x 10^d) / 10^d; where below
        `low`, ceil(low x 10^d) / 10^d.
    """
    scale = 10.0**decimals
    r = np.round(relativity, decimals)
    with np.errstate(invalid="ignore", over="ignore"):
        r = np.where(r > high, np.floor(high * scale) / scale, r)
        return np.where(r < low, np.ceil(low * scale) / scale, r)
