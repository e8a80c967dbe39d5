"""Numeric bands: edges, labels and assignment (lower edge inclusive, upper exclusive)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from rating_tables.table import band_labels as labels_of_bands


def band_labels(edges: np.ndarray | tuple[float, ...]) -> list[str]:
    """Labels of the bands cut by interior `edges`: [-inf, e0), [e0, e1), ..., [e_last, inf), as the
    filed rating tables write them (`rating_tables.table.band_label`: edges as exact text, e.g.
    "[21, 25)", "[-inf, 21)", "[1234567, 1234568)").

    Parameters
    ----------
    edges : ndarray or tuple of float
        Interior band edges, ascending, in the factor's own unit; the outer edges -inf and inf are
        added here.

    Returns
    -------
    list of str
        len(edges) + 1 labels, lowest band first.
    """
    full = np.concatenate([[-np.inf], np.asarray(edges, dtype=float), [np.inf]])
    return labels_of_bands(full[:-1], full[1:])


def assign_bands(values: np.ndarray, edges: np.ndarray | tuple[float, ...]) -> np.ndarray:
    """Band index of each value: number of interior edges <= value (0 .. len(edges)).

    Parameters
    ----------
    values : ndarray
        Values of a numeric factor, in the unit of `edges`.
    edges : ndarray or tuple of float
        Interior band edges, ascending; a value equal to an edge falls in the band above it.

    Returns
    -------
    ndarray of int
        The band index of each value, 0 for the band below the first edge.
    """
    return np.searchsorted(np.asarray(edges, dtype=float), np.asarray(values, dtype=float), side="right")


def banded(values: np.ndarray, edges: np.ndarray | tuple[float, ...]) -> pd.Categorical:
    """Values as an ordered pandas Categorical of band labels.

    Parameters
    ----------
    values : ndarray
        Values of a numeric factor, in the unit of `edges`.
    edges : ndarray or tuple of float
        Interior band edges, ascending (`assign_bands`).

    Returns
    -------
    pandas.Categorical
        Ordered, with every band's label (`band_labels`) as a category, used or not.
    """
    labels = band_labels(edges)
    return pd.Categorical.from_codes(assign_bands(values, edges), categories=labels, ordered=True)


#: A cumulative weight share within this of k / n_bands counts as reaching it, so that the order in
#: which weights were summed (rows, distinct values, chunks of a book) cannot move an edge at a tie.
SHARE_TOLERANCE = 1e-9


def quantile_edges(values: np.ndarray, weights: np.ndarray, n_bands: int) -> np.ndarray:
    """Interior edges just above the weighted quantiles k/n_bands (k = 1..n_bands-1) of `values`.

    With u_1 < ... < u_m the distinct values and W_i the share of the weight on values <= u_i, the
    k-th edge is u_(j+1) for the first j with W_j >= k/n_bands - `SHARE_TOLERANCE`, so the bands below it hold at least
    k/n_bands of the weight. Weights are summed per distinct value first, so rows or their distinct
    values with summed weights give the same edges, whatever their order. Coinciding edges (heavy
    ties) collapse, giving fewer bands; no band is empty.

    Parameters
    ----------
    values : ndarray
        Values of a numeric factor (rows, or distinct values), without NaN.
    weights : ndarray
        Weight of each value, >= 0 with a positive total: its exposure (exposure units,
        policy-years by default).
    n_bands : int
        Bands wanted (>= 1); fewer come back when ties make edges coincide.

    Returns
    -------
    ndarray of float
        The distinct interior edges, ascending, each above the smallest value (at most n_bands - 1).
    """
    uniq, inv = np.unique(np.asarray(values, dtype=float), return_inverse=True)
    w = np.bincount(inv.ravel(), weights=np.asarray(weights, dtype=float), minlength=len(uniq))
    cum = np.cumsum(w) / w.sum()
    idx = np.searchsorted(cum, np.arange(1, n_bands) / n_bands - SHARE_TOLERANCE, side="left")
    edges = np.unique(uniq[np.clip(idx + 1, 0, len(uniq) - 1)])
    return edges[edges > uniq[0]]
