"""The boosted models' features: the spec's factors of a book frame as LightGBM reads them."""

from __future__ import annotations

import pandas as pd

from premiumlab.book.spec import Spec


def features_from_spec(frame: pd.DataFrame, spec: Spec) -> pd.DataFrame:
    """Model features, one column per spec factor: numeric as float; an ordered categorical with a
    promise as float codes in its level order; other categoricals as pandas Categoricals (levels
    sorted as strings).

    Parameters
    ----------
    frame : pd.DataFrame
        The book's rows with a column per spec factor (as the typed book holds them, e.g.
        `Book.frame`): numbers for numeric factors, level text for categorical ones.
    spec : Spec
        The pricing spec: each factor's type, promise and levels.

    Returns
    -------
    pd.DataFrame
        One column per factor, in the spec's order, rows as in `frame`: float64 for numeric factors
        and promised ordered categoricals (codes 0..k-1 in the `levels` order, -1 for a value not
        among them), pandas Categorical for the others.
    """
    cols = {}
    for f in spec.factors:
        values = frame[f.name]
        if f.type == "numeric":
            cols[f.name] = values.to_numpy(dtype=float)
        elif f.direction != 0:
            assert f.levels is not None  # the spec refuses a promise on a categorical without `levels`
            cols[f.name] = pd.Categorical(values, categories=list(f.levels)).codes.astype(float)
        else:
            levels = list(f.levels) if f.levels is not None else sorted(set(values))
            cols[f.name] = pd.Categorical(values, categories=levels)
    return pd.DataFrame(cols)
