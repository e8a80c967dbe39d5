"""A rating factor's effect in a table, averaged over its two-way partners: the table's partial dependence.

Two tables can split a factor's effect differently between the main relativities and a two-way
table (which row and column of the two-way table are at 1). The factor's partial dependence in the
table does not depend on that split up to a constant:

    log e_F(r) = log rel_F(r) + sum over the two-way tables T on F of sum_j P(j) log T[i_r, j],

with i_r the row's cell on F's side of T, j the partner's cells and P(j) the partner's exposure
shares over the rows given (a missing partner value's share adds log 1 = 0, as the rater gives it
1). It is what `select` compares band for band and what the report draws beside the boosted
model's partial dependence, which averages over the same rows.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    import pandas as pd

    from rating_tables.table import Cells, MainFactor, RatingTable


def _side_cells(main: MainFactor, side: Cells, values: pd.Series) -> np.ndarray:
    """Each row's cell on one side of a two-way table; the number of cells for a missing value."""
    from rating_tables import Bands
    from rating_tables.rate import row_cells
    from rating_tables.table import band_index, mapping_to_side

    cells = row_cells(main, values)
    missing = cells == len(main.labels())
    if isinstance(side, Bands):
        numbers = np.asarray(values, dtype=float) if values.dtype.kind in "fiu" else values.astype(float).to_numpy()
        index = band_index(side.lower, np.where(missing, 0.0, numbers)).astype(np.intp)
        return np.where(missing, len(side), index)
    assert not hasattr(main, "lower")
    mapping = mapping_to_side(main, side)  # type: ignore[arg-type]
    return np.where(missing, len(side), mapping[np.where(missing, 0, cells)])


def effect_parts(
    table: RatingTable, frame: pd.DataFrame, exposure: np.ndarray
) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray]]:
    """Per main factor of `table`, the two parts of log e_F(r) for each row of `frame` (module docstring).

    Parameters
    ----------
    table : RatingTable
        The table.
    frame : pandas.DataFrame
        The rows, as the rater reads them (the factor columns; the exposure column is not read).
    exposure : numpy.ndarray
        Each row's exposure, the partners' weights (exposure units).

    Returns
    -------
    main : dict of str to numpy.ndarray
        log rel_F(r) per row, for every numeric and categorical factor F in table order.
    two_way : dict of str to numpy.ndarray
        The partner-averaged two-way part, sum over T of sum_j P(j) log T[i_r, j], per row; 0 for a
        factor in no two-way table. log e_F = main + two_way.
    """
    import rating_tables

    rated = rating_tables.rate(table, frame, annual=True)
    main = {f.name: np.log(rated[f"rel_{f.name}"].to_numpy(dtype=float)) for f in table.main_factors}
    two_way = {name: np.zeros(len(frame)) for name in main}
    for t in table.interactions:
        a, b = (table.factor(side) for side in t.of)
        i = _side_cells(a, t.a_cells, frame[a.name])  # type: ignore[arg-type]
        j = _side_cells(b, t.b_cells, frame[b.name])  # type: ignore[arg-type]
        log_t = np.log(t.relativity)
        for name, own, partner, matrix in ((a.name, i, j, log_t), (b.name, j, i, log_t.T)):
            valued = partner < matrix.shape[1]
            share = np.bincount(partner[valued], weights=exposure[valued], minlength=matrix.shape[1])
            mean = np.append(matrix @ (share / exposure.sum()), 0.0)  # last: a missing value on this side
            two_way[name] = two_way[name] + mean[own]
    return main, two_way
