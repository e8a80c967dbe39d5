"""How each factor is cut for tables and GLMs: numeric bands or the order of categorical levels."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from premiumlab._core.errors import InputError
from premiumlab.book.bands import assign_bands, band_labels, quantile_edges
from premiumlab.book.rows import Book
from premiumlab.book.spec import Factor, Spec
from rating_tables import MISSING_LABEL


def is_missing(values: np.ndarray) -> np.ndarray:
    """Where a factor's typed values are missing: NaN (numeric) or "" (categorical).

    Parameters
    ----------
    values : ndarray
        A factor's values as the typed book holds them (`rows.check_chunk`): float64 for a
        numeric factor, text for a categorical one.

    Returns
    -------
    ndarray of bool
        True where the value is missing.
    """
    values = np.asarray(values)
    if values.dtype.kind == "f":
        return np.isnan(values)
    return pd.isna(values) | (values == "")


@dataclass(frozen=True)
class Levels:
    """How one factor is cut for tables and GLMs: band edges (numeric) or the level order.

    When the training rows hold missing values, `MISSING_LABEL` is the last label: the missing
    band (numeric) or level (categorical), never the base.
    """

    name: str
    labels: tuple[str, ...]
    base: str
    edges: tuple[float, ...] | None = None

    @property
    def missing(self) -> bool:
        """True when the factor has a missing band or level (the last label)."""
        return bool(self.labels) and self.labels[-1] == MISSING_LABEL

    def codes(self, values: np.ndarray) -> np.ndarray:
        """Position in `labels` of each value's band or level.

        Parameters
        ----------
        values : ndarray
            The factor's values: float64 (numeric, NaN where missing) or text ("" where missing).

        Returns
        -------
        ndarray of int64
            The band (`bands.assign_bands` on `edges`) or level of each value; a missing value the
            missing label's position, or -1 when these levels have none; a level not among
            `labels` (one unseen in the training rows) -1.
        """
        missing = is_missing(values)
        if self.edges is not None:
            codes = assign_bands(np.where(missing, 0.0, np.asarray(values, dtype=float)), self.edges)
        else:
            ordinary = self.labels[: len(self.labels) - int(self.missing)]
            codes = pd.Index(ordinary, dtype=object).get_indexer(np.asarray(values, dtype=object))
        codes = np.asarray(codes, dtype=np.int64)
        codes[missing] = len(self.labels) - 1 if self.missing else -1
        return codes


def cut_levels(f: Factor, values: np.ndarray, exposure: np.ndarray, source: str) -> Levels:
    """Bands or level order of factor `f` from its `values` and their `exposure` (rows, or distinct
    values with summed exposure).

    Numeric: the spec's edges, else exposure-quantile edges (`n_bands`) of the values present.
    Categorical: the spec's `levels` order, else the levels present sorted as strings. When a value
    is missing, `MISSING_LABEL` follows as the last label. Base: the spec's `base`, else the band or
    level (never the missing one) with the largest exposure.

    Parameters
    ----------
    f : Factor
        The factor as the spec gives it.
    values : ndarray
        Its values: float for a numeric factor (NaN where missing), strings for a categorical one
        ("" where missing).
    exposure : ndarray
        Exposure of each value (exposure units, policy-years by default), aligned with `values`.
    source : str
        The spec file, named in the error for a `base` that is not a level or band.

    Returns
    -------
    Levels
        Labels in order (the missing label last, when a value is missing), the base label and, for
        a numeric factor, the interior band edges.

    Raises
    ------
    InputError
        When the spec's `base` is not one of the factor's levels or band labels, or every value
        is missing.
    """
    missing = is_missing(values)
    present, present_exposure = np.asarray(values)[~missing], np.asarray(exposure, dtype=float)[~missing]
    if present.size == 0:
        raise InputError(f"{source}: factor '{f.name}': every value is missing; it cannot be rated")
    if f.type == "numeric":
        present = present.astype(float)
        edges = np.asarray(f.bands) if f.bands is not None else quantile_edges(present, present_exposure, f.n_bands)
        labels = tuple(band_labels(edges))
        edges_t: tuple[float, ...] | None = tuple(float(e) for e in edges)
    else:
        labels = f.levels if f.levels is not None else tuple(sorted(set(present)))
        edges_t = None
    ordinary = Levels(f.name, labels, labels[0], edges_t)
    expo = np.bincount(ordinary.codes(present), weights=present_exposure, minlength=len(labels))
    base = f.base if f.base is not None else labels[int(np.argmax(expo))]
    if f.base is not None and f.base not in labels:
        raise InputError(
            f"{source}: key 'factors.{f.name}.base': '{f.base}' is not one of its "
            f"levels or bands ({', '.join(labels[:10])})"
        )
    return Levels(f.name, labels + ((MISSING_LABEL,) if missing.any() else ()), base, edges_t)


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
        f.name: cut_levels(f, *_train_values(book.frame[f.name], book.exposure, train), spec.source)
        for f in spec.factors
    }


def _train_values(column: pd.Series, exposure: np.ndarray, train: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(values, exposure) of a factor's training rows for `cut_levels`: the rows themselves, or for a
    Categorical column (a compact book) the levels met in training with their summed exposure."""
    if not isinstance(column.dtype, pd.CategoricalDtype):
        return column.to_numpy()[train], exposure[train]
    codes = column.cat.codes.to_numpy()[train]
    k = len(column.cat.categories)
    met = np.bincount(codes, minlength=k) > 0
    summed = np.bincount(codes, weights=exposure[train], minlength=k)
    return np.asarray(column.cat.categories, dtype=object)[met], summed[met]


def factor_codes(levels: Levels, column: pd.Series) -> np.ndarray:
    """`levels.codes` of a factor's column: of its values, or for a Categorical column (a compact
    book) of its categories, taken by each row's code (one look-up per level, not per row).

    Parameters
    ----------
    levels : Levels
        The factor's cut.
    column : pandas.Series
        The factor's column of a typed book (`Book.frame`).

    Returns
    -------
    ndarray of int64
        The position of each row's band or level in `levels.labels`, -1 where it has none.
    """
    if not isinstance(column.dtype, pd.CategoricalDtype):
        return levels.codes(column.to_numpy())
    return levels.codes(np.asarray(column.cat.categories, dtype=object))[column.cat.codes.to_numpy()]


def categorise(book_frame: pd.DataFrame, levels: dict[str, Levels]) -> pd.DataFrame:
    """Factor columns as ordered Categoricals of band or level labels.

    Parameters
    ----------
    book_frame : pandas.DataFrame
        The factor columns of a typed book (`Book.frame`), numeric factors as floats, categorical
        ones as text or Categoricals.
    levels : dict of str to Levels
        The cut of each factor to categorise (`factor_levels`); the columns come out in its order.

    Returns
    -------
    pandas.DataFrame
        One ordered Categorical column per factor of `levels`, every label a category (`Levels.codes`):
        a missing value takes the missing label when the levels have one; a value outside the
        levels (a level or a missing value unseen in the training rows) is NaN.
    """
    cols = {
        name: pd.Categorical.from_codes(factor_codes(lv, book_frame[name]), categories=list(lv.labels), ordered=True)
        for name, lv in levels.items()
    }
    return pd.DataFrame(cols)


def unseen_at_base(cats: pd.DataFrame, levels: dict[str, Levels]) -> pd.DataFrame:
    """The categorised factors with every value unseen in the training rows (NaN in `categorise`'s
    output) set to its factor's base: the complement, relativity 1, at which a model without that
    level prices it.

    Parameters
    ----------
    cats : pandas.DataFrame
        The factors as `categorise` gives them.
    levels : dict of str to Levels
        The cut of each factor, with its base.

    Returns
    -------
    pandas.DataFrame
        A copy of `cats` without NaN, the categories unchanged.
    """
    return cats.assign(**{name: cats[name].fillna(lv.base) for name, lv in levels.items() if name in cats})
