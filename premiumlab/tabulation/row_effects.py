"""A rating factor's effect on each book row: its main relativity times its two-way relativities.

Two tables can split a factor's effect differently between the main relativities and a two-way
table (the normalisation of the two-way table's base row and column). The effect of factor F on a
row, e_F = rel_F x prod over the two-way tables on F of rel_A__B, does not depend on that split up to
a constant per table, so it is what selections compare (`premiumlab.tabulation.select`) and what the
report draws.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    import pandas as pd

    from rating_tables.table import RatingTable


def two_way_products(table: RatingTable, rels: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Per main factor in at least one two-way table, each row's product of those tables' relativities.

    Parameters
    ----------
    table : RatingTable
        The table.
    rels : dict of str to numpy.ndarray
        The rater's `rel_NAME` columns for the rows (`rating_tables.rate`).

    Returns
    -------
    dict of str to numpy.ndarray
        prod over the two-way tables A__B with F in (A, B) of rel_A__B, per row, for each such F.
    """
    out: dict[str, np.ndarray] = {}
    for t in table.interactions:
        for side in t.of:
            out[side] = out.get(side, 1.0) * rels[f"rel_{t.name}"]
    return out


def factor_effects(table: RatingTable, frame: pd.DataFrame, exposure_column: str) -> dict[str, np.ndarray]:
    """Per main factor of `table`, the effect e_F of the factor on each row of `frame`.

    Parameters
    ----------
    table : RatingTable
        The table.
    frame : pandas.DataFrame
        The rows, as the rater reads them (factor columns and the exposure column).
    exposure_column : str
        The exposure column of `frame`.

    Returns
    -------
    dict of str to numpy.ndarray
        e_F = rel_F x prod of the two-way relativities on F, one per row (a multiplier of the pure
        premium, > 0).
    """
    import rating_tables

    rated = rating_tables.rate(table, frame, exposure_column)
    rels = {c: rated[c].to_numpy(dtype=float) for c in rated.columns if c.startswith("rel_")}
    products = two_way_products(table, rels)
    return {f.name: rels[f"rel_{f.name}"] * products.get(f.name, 1.0) for f in table.main_factors}
