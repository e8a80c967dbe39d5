"""The boosted models' features: the spec's factors of a book frame as LightGBM reads them."""

from __future__ import annotations

import numpy as np
import pandas as pd

from premiumlab.book.levels import is_missing
from premiumlab.book.spec import Spec
from rating_tables import MISSING_LABEL


def features_from_spec(frame: pd.DataFrame, spec: Spec) -> pd.DataFrame:
    """Model features, one column per spec factor: numeric as float (NaN where missing, which
    LightGBM routes itself); an ordered categorical with a promise as float codes in its level order
    (NaN where missing); other categoricals as pandas Categoricals (levels sorted as strings), a
    missing value its own category `MISSING_LABEL`, after the others.

    Parameters
    ----------
    frame : pd.DataFrame
        The book's rows with a column per spec factor (as the typed book holds them, e.g.
        `Book.frame`): numbers for numeric factors (NaN where missing), level text for categorical
        ones ("" where missing).
    spec : Spec
        The pricing spec: each factor's type, promise and levels.

    Returns
    -------
    pd.DataFrame
        One column per factor, in the spec's order, rows as in `frame`: float64 for numeric factors
        and promised ordered categoricals (codes 0..k-1 in the `levels` order, NaN for a missing
        value or one not among them), pandas Categorical for the others (categories: the `levels`,
        else the values present sorted as text, then `MISSING_LABEL` when a value is missing).
    """
    cols = {}
    for f in spec.factors:
        values = frame[f.name]
        if f.type == "numeric":
            cols[f.name] = values.to_numpy(dtype=float)
            continue
        text = values.to_numpy(dtype=object)
        missing = is_missing(text)
        if f.direction != 0:
            assert f.levels is not None  # the spec refuses a promise on a categorical without `levels`
            codes = pd.Index(f.levels, dtype=object).get_indexer(text)
            cols[f.name] = np.where(codes < 0, np.nan, codes.astype(float))
            continue
        levels = list(f.levels) if f.levels is not None else sorted(set(text[~missing]))
        if missing.any():
            levels.append(MISSING_LABEL)
            text = np.where(missing, MISSING_LABEL, text)
        cols[f.name] = pd.Categorical(text, categories=levels)
    return pd.DataFrame(cols)
