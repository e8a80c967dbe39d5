"""How each factor is cut for tables and GLMs: numeric bands or the order of categorical levels."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from premiumlab._core.errors import InputError
from premiumlab.book.bands import banded, quantile_edges
from premiumlab.book.rows import Book
from premiumlab.book.spec import Factor, Spec


@dataclass(frozen=True)
class Levels:
    """How one factor is cut for tables and GLMs: band edges (numeric) or the level order."""

    name: str
    labels: tuple[str, ...]
    base: str
    edges: tuple[float, ...] | None = None


def cut_levels(f: Factor, values: np.ndarray, exposure: np.ndarray, source: str) -> Levels:
    """Bands or level order of factor `f` from its `values` and their `exposure` (rows, or distinct
    values with summed exposure).

    Numeric: the spec's edges, else exposure-quantile edges (`n_bands`). Categorical: the spec's
    `levels` order, else levels sorted as strings. Base: the spec's `base`, else the largest exposure.

    Parameters
    ----------
    f : Factor
        The factor as the spec gives it.
    values : ndarray
        Its values: float for a numeric factor, strings for a categorical one.
    exposure : ndarray
        Exposure of each value (exposure units, policy-years by default), aligned with `values`.
    source : str
        The spec file, named in the error for a `base` that is not a level or band.

    Returns
    -------
    Levels
        Labels in order, the base label and, for a numeric factor, the interior band edges.

    Raises
    ------
    InputError
        When the spec's `base` is not one of the factor's levels or band labels.
    """
    if f.type == "numeric":
        edges = np.asarray(f.bands) if f.bands is not None else quantile_edges(values, exposure, f.n_bands)
        cat = banded(values, edges)
        labels = tuple(cat.categories)
        codes = cat.codes
        edges_t = tuple(float(e) for e in edges)
    else:
        labels = f.levels if f.levels is not None else tuple(sorted(set(values)))
        codes = pd.Categorical(values, categories=labels).codes
        edges_t = None
    expo = np.bincount(codes, weights=exposure, minlength=len(labels))
    base = f.base if f.base is not None else labels[int(np.argmax(expo))]
    if f.base is not None and f.base not in labels:
        raise InputError(
            f"{source}: key 'factors.{f.name}.base': '{f.base}' is not one of its "
            f"levels or bands ({', '.join(labels[:10])})"
        )
    return Levels(f.name, labels, base, edges_t)


def factor_levels(book: Book, spec: Spec, train: np.ndarray) -> dict[str, Levels]:
    """Bands and level orders per factor (`cut_levels`), fixed on the training rows.

    Parameters
    ----------
    book : Book
        The typed book.
    spec : Spec
        The pricing spec: its factors, in order.
    train : ndarray of bool
        True for the training rows, one per book row.

    Returns
    -------
    dict of str to Levels
        The levels of each factor by name, in spec order.
    """
    return {
        f.name: cut_levels(f, book.frame[f.name].to_numpy()[train], book.exposure[train], spec.source)
        for f in spec.factors
    }


def categorise(book_frame: pd.DataFrame, levels: dict[str, Levels]) -> pd.DataFrame:
    """Factor columns as ordered Categoricals of band or level labels.

    Parameters
    ----------
    book_frame : pandas.DataFrame
        The factor columns of a typed book (`Book.frame`), numeric factors as floats.
    levels : dict of str to Levels
        The cut of each factor to categorise (`factor_levels`); the columns come out in its order.

    Returns
    -------
    pandas.DataFrame
        One ordered Categorical column per factor of `levels`, every label a category; a
        categorical value outside the factor's levels becomes missing.
    """
    cols = {}
    for name, lv in levels.items():
        values = book_frame[name].to_numpy()
        if lv.edges is not None:
            cols[name] = banded(values, lv.edges)
        else:
            cols[name] = pd.Categorical(values, categories=list(lv.labels), ordered=True)
    return pd.DataFrame(cols)
