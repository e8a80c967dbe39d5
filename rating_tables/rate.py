"""The rater (docs/rating-table.md, Rating algorithm): pure and gross premium of every book row, vectorised.

pure_premium  = ((base_rate x rel_1) x rel_2 ... x rel_k) x exposure   (factors in table order)
gross_premium = max(minimum_premium, (pure x (1 + lae_ratio) + fixed_expense x exposure)
                                     / (1 - variable_expense - profit)), rounded half to even
                to `premium_decimals`.
Exposure is the book's earned exposure, or one full term (1.0) per row with `annual=True`.
Numeric values go to the band [lower, upper) that holds them (`table.band_index`: the count of
interior edges at or below the value; -inf and inf fall in the end bands); categorical values are compared as strings (pandas
categoricals are mapped once per category, then taken by code). Errors name the 0-based book row.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np
import numpy.typing as npt
import pandas as pd

from rating_tables.errors import TableError
from rating_tables.table import (
    Bands,
    CategoricalFactor,
    Loadings,
    NumericFactor,
    RatingTable,
    band_index,
    mapping_to_side,
)


def _book_row(i: int) -> str:
    """The text naming position `i` of a book as a 0-based row."""
    return f"book row {i} (0-based)"


def _column(book: pd.DataFrame, name: str, what: str) -> pd.Series:
    if name not in book.columns:
        raise TableError(f"{what}: the book has no column {name!r}", check="book", where=name)
    return book[name]


def _numeric_values(series: pd.Series, what: str, row_offset: int = 0) -> npt.NDArray[np.float64]:
    """The column as float64; TableError at the first non-numeric or missing value."""
    if isinstance(series.dtype, pd.CategoricalDtype):
        series = pd.Series(np.asarray(series, dtype=object))
    if pd.api.types.is_bool_dtype(series.dtype):
        raise TableError(f"{what}: the column holds true/false values, not numbers", check="book")
    values: npt.NDArray[np.float64]
    if pd.api.types.is_numeric_dtype(series.dtype):
        values = series.to_numpy(dtype=np.float64, na_value=np.nan)
    else:
        try:
            values = series.astype("float64").to_numpy()
        except (TypeError, ValueError):
            coerced = pd.to_numeric(series, errors="coerce")
            bad = np.flatnonzero(coerced.isna().to_numpy() & series.notna().to_numpy())
            where = _book_row(row_offset + int(bad[0])) if bad.size else "some row"
            text = series.iloc[int(bad[0])] if bad.size else "?"
            raise TableError(f"{what}: value {text!r} at {where} is not a number", check="book", where=where) from None
    missing = np.flatnonzero(np.isnan(values))
    if missing.size:
        where = _book_row(row_offset + int(missing[0]))
        raise TableError(f"{what}: missing value at {where}", check="book", where=where)
    return values


def _level_index(factor: CategoricalFactor, series: pd.Series, row_offset: int = 0) -> npt.NDArray[np.intp]:
    """Index into `factor.levels` of each value, compared as strings; unknown values take the
    fallback level when the factor names one."""
    what = f"factor {factor.name!r}"
    codes: npt.NDArray[np.integer[Any]]
    if isinstance(series.dtype, pd.CategoricalDtype):
        codes = series.cat.codes.to_numpy()
        labels = [str(c) for c in series.cat.categories]
    else:
        codes, uniques = pd.factorize(series, use_na_sentinel=True)
        labels = [str(u) for u in uniques]
    missing = np.flatnonzero(codes < 0)
    if missing.size:
        where = _book_row(row_offset + int(missing[0]))
        raise TableError(f"{what}: missing value at {where}", check="book", factor=factor.name, where=where)
    position = {level: i for i, level in enumerate(factor.levels)}
    to_level = np.array([position.get(label, -1) for label in labels], dtype=np.intp)
    unknown = to_level < 0
    if unknown.any():
        if factor.fallback is None:
            first = int(np.flatnonzero(unknown[codes])[0])
            where = _book_row(row_offset + first)
            raise TableError(
                f"{what}: level {labels[codes[first]]!r} at {where} is not in the table and the factor has no fallback",
                check="book",
                factor=factor.name,
                where=where,
            )
        to_level[unknown] = position[factor.fallback]
    index: npt.NDArray[np.intp] = to_level[codes]
    return index


def _exposure(
    book: pd.DataFrame, exposure_column: str | None, annual: bool, row_offset: int
) -> npt.NDArray[np.float64]:
    if annual:
        return np.ones(len(book))
    if exposure_column is None:
        raise TableError(
            "exposure: name the book's exposure column, or rate annual (one full term per row)", check="book"
        )
    what = f"exposure column {exposure_column!r}"
    values = _numeric_values(_column(book, exposure_column, what), what, row_offset)
    bad = np.flatnonzero(~(np.isfinite(values) & (values >= 0)))
    if bad.size:
        where = _book_row(row_offset + int(bad[0]))
        raise TableError(
            f"{what}: value {float(values[bad[0]])!r} at {where} must be finite and >= 0", check="book", where=where
        )
    return values


def _relativities(table: RatingTable, book: pd.DataFrame, row_offset: int = 0) -> dict[str, npt.NDArray[np.float64]]:
    """The build-up columns `rel_NAME` (interactions `rel_a__b`), in table order."""
    cells: dict[str, npt.NDArray[np.integer[Any]]] = {}
    values: dict[str, npt.NDArray[np.float64]] = {}
    out: dict[str, npt.NDArray[np.float64]] = {}
    for factor in table.factors:
        if isinstance(factor, NumericFactor):
            what = f"factor {factor.name!r}"
            values[factor.name] = _numeric_values(_column(book, factor.name, what), what, row_offset)
            cells[factor.name] = band_index(factor.lower, values[factor.name])
            out[f"rel_{factor.name}"] = factor.relativity[cells[factor.name]]
        elif isinstance(factor, CategoricalFactor):
            series = _column(book, factor.name, f"factor {factor.name!r}")
            cells[factor.name] = _level_index(factor, series, row_offset)
            out[f"rel_{factor.name}"] = factor.relativity[cells[factor.name]]
        else:
            i, j = (
                _side_index(table, side, side_cells, cells, values)
                for side, side_cells in zip(factor.of, (factor.a_cells, factor.b_cells))
            )
            flat = i.astype(np.intp) * factor.relativity.shape[1] + j  # one flat take: 2-D fancy indexing is slower
            out[f"rel_{factor.name}"] = factor.relativity.ravel()[flat]
    return out


def _side_index(
    table: RatingTable,
    side: str,
    side_cells: Bands | tuple[str, ...],
    cells: dict[str, npt.NDArray[np.integer[Any]]],
    values: dict[str, npt.NDArray[np.float64]],
) -> npt.NDArray[np.integer[Any]]:
    if isinstance(side_cells, Bands):
        return band_index(side_cells.lower, values[side])
    main = table.factor(side)
    assert isinstance(main, CategoricalFactor)
    index: npt.NDArray[np.intp] = mapping_to_side(main, side_cells)[cells[side]]
    return index


def _pure_premium(
    base_rate: float, rels: dict[str, npt.NDArray[np.float64]], exposure: npt.NDArray[np.float64]
) -> npt.NDArray[np.float64]:
    """((base_rate x rel_1) x ... x rel_k) x exposure, money per row."""
    pure = np.full(exposure.shape, base_rate)
    for rel in rels.values():
        pure *= rel
    return pure * exposure


def gross_premium(
    pure: npt.NDArray[np.float64],
    exposure: npt.NDArray[np.float64],
    loadings: Loadings,
    premium_decimals: int,
    apply_minimum: bool = True,
) -> npt.NDArray[np.float64]:
    """max(minimum_premium, (pure x (1 + lae_ratio) + fixed_expense x exposure) / (1 - variable_expense
    - profit)), rounded half to even to `premium_decimals` (money per row).

    Computed in this order, in float64, which a rating system must follow to match to the cent:
    `(pure * (1.0 + lae_ratio) + fixed_expense * exposure) / ((1.0 - variable_expense) - profit)`,
    then the maximum with the minimum premium, then numpy's round (the value times
    10**premium_decimals rounded to the nearest integer, ties to even, divided back).

    Parameters
    ----------
    pure : numpy.ndarray of float64
        Pure premium per row, money (not rounded).
    exposure : numpy.ndarray of float64
        Exposure per row in the table's exposure unit, same shape as `pure` (1.0 for one full term).
    loadings : Loadings
        lae_ratio (share of the pure premium), fixed_expense (money per exposure unit),
        variable_expense and profit (shares of the gross premium), minimum_premium (money per row).
    premium_decimals : int
        Decimals kept, 0 to 12 (`Rounding.premium_decimals`; 2 for cents).
    apply_minimum : bool
        False leaves out the minimum premium (used to measure its effect).

    Returns
    -------
    numpy.ndarray of float64
        Gross premium per row, money, rounded to `premium_decimals`. The minimum applies to every
        row whatever its exposure, including exposure 0.
    """
    gross = (pure * (1.0 + loadings.lae_ratio) + loadings.fixed_expense * exposure) / (
        1.0 - loadings.variable_expense - loadings.profit
    )
    if apply_minimum:
        gross = np.maximum(gross, loadings.minimum_premium)
    return np.round(gross, premium_decimals)


def rating_columns(
    table: RatingTable,
    book: pd.DataFrame,
    exposure_column: str | None = None,
    annual: bool = False,
    row_offset: int = 0,
) -> dict[str, npt.NDArray[np.float64]]:
    """The columns the rater adds: `rel_*` in table order, then `pure_premium`, `gross_premium`.

    `row_offset` is added to row numbers in error messages (for books rated in batches).

    Parameters
    ----------
    table : RatingTable
        The table to rate with.
    book : pandas.DataFrame
        One row per policy and period, with a column named as each numeric and categorical factor
        of the table, and the exposure column unless `annual`. Other columns are not read, and the
        columns `rate` adds are not checked for here (`check_no_clash`).
    exposure_column : str or None
        The column of earned exposure, in the table's exposure unit, finite and >= 0.
    annual : bool
        Rate every row for one full term (exposure 1.0); `exposure_column` is then not read.
    row_offset : int
        The 0-based position in the whole book of `book`'s first row.

    Returns
    -------
    dict of str to numpy.ndarray of float64
        `rel_NAME` for each factor entry in table order (`rel_A__B` for a two-way table), the
        relativity looked up for each row; `pure_premium` = ((base_rate x rel_1) x ... x rel_k) x
        exposure, money, not rounded; `gross_premium` as `gross_premium` computes it, money rounded
        to `premium_decimals`. Each array has one value per row of `book`.

    Raises
    ------
    TableError
        (check `book`) for a missing column or a boolean column where numbers are needed; and,
        naming the 0-based book row, for a missing value, a value of a numeric factor or of the
        exposure that is not a number, an exposure that is negative or not finite, a level the
        factor does not list when it has no fallback, or a premium too large to represent.
    """
    exposure = _exposure(book, exposure_column, annual, row_offset)
    out = _relativities(table, book, row_offset)
    with np.errstate(over="ignore", invalid="ignore"):  # checked below, row by row
        out["pure_premium"] = _pure_premium(table.base_rate, out, exposure)
        out["gross_premium"] = gross_premium(
            out["pure_premium"], exposure, table.loadings, table.rounding.premium_decimals
        )
    bad = np.flatnonzero(~np.isfinite(out["gross_premium"]))
    if bad.size:
        where = _book_row(row_offset + int(bad[0]))
        raise TableError(
            f"premium at {where} is too large to represent (exposure {float(exposure[bad[0]])!r}); check the exposure",
            check="book",
            where=where,
        )
    return out


def check_no_clash(existing: list[str], added: list[str], what: str) -> None:
    """Refuse a book that already has a column the rater would add.

    Parameters
    ----------
    existing : list of str
        The book's column names.
    added : list of str
        The columns rating adds (`added_columns`).
    what : str
        Start of the error message, naming the book.

    Raises
    ------
    TableError
        (check `book`) naming the first column of `added` that `existing` already has.
    """
    clash = [c for c in added if c in set(existing)]
    if clash:
        raise TableError(
            f"{what}: the book already has a column {clash[0]!r}, which rating would add", check="book", where=clash[0]
        )


def added_columns(table: RatingTable) -> list[str]:
    """Names of the columns `rate` adds, in order.

    Parameters
    ----------
    table : RatingTable
        The table to rate with.

    Returns
    -------
    list of str
        `rel_NAME` for each factor entry in table order (`rel_A__B` for a two-way table), then
        `pure_premium` and `gross_premium`.
    """
    return [f"rel_{f.name}" for f in table.factors] + ["pure_premium", "gross_premium"]


def rate(
    table: RatingTable, book: pd.DataFrame, exposure_column: str | None = None, annual: bool = False
) -> pd.DataFrame:
    """Rate every row of `book`: its columns plus `rel_*`, `pure_premium` and `gross_premium`.

    `exposure_column` is the earned exposure (in the table's exposure unit); with `annual=True`
    every row is rated for one full term and the column is not needed.

    Parameters
    ----------
    table : RatingTable
        The table to rate with.
    book : pandas.DataFrame
        One row per policy and period. A numeric factor's column holds numbers (text that reads
        as a number is accepted, a boolean column is not); its value x takes the band with
        lower <= x < upper. A categorical factor's values are compared, as text (`str(value)`),
        with the levels exactly: no trimming, case counts, the integer 2 is `2` and the float 2.0
        is `2.0`; a value that is no level takes the fallback level. A missing value (NaN, None)
        in a factor or the exposure column is an error.
    exposure_column : str or None
        The column of earned exposure in the table's exposure unit, finite and >= 0; needed
        unless `annual`.
    annual : bool
        Rate every row for one full term: exposure 1.0 for every row.

    Returns
    -------
    pandas.DataFrame
        `book`'s columns, in order and unchanged, then `rel_NAME` per factor entry in table order,
        `pure_premium` = ((base_rate x rel_1) x ... x rel_k) x exposure (money per row, not
        rounded) and `gross_premium` (money per row, rounded to `premium_decimals`; formula in
        `gross_premium`); the added columns are float64 and the index is `book`'s.

    Raises
    ------
    TableError
        When `book` already has one of the added columns, or for a bad row as `rating_columns`
        says; messages name the 0-based book row.
    """
    check_no_clash(list(book.columns), added_columns(table), "book")
    added = pd.DataFrame(rating_columns(table, book, exposure_column, annual), index=book.index, copy=False)
    return pd.concat([book, added], axis=1)


def solve_base_rate(
    table: RatingTable, book: pd.DataFrame, exposure_column: str | None, target_total: float, annual: bool = False
) -> tuple[RatingTable, dict[str, Any]]:
    """The table with the base rate that makes sum(pure_premium) over `book` equal `target_total`.

    Pure premium is linear in the base rate, so the new base rate is base_rate x off-balance factor,
    with off-balance factor = target_total / sum(pure_premium at the current base rate). The table's
    `target.total_pure_premium` is set to `target_total`. When a minimum premium is loaded, the report
    also states its effect on the gross premium: sum(gross) / sum(gross without the minimum) - 1.

    Parameters
    ----------
    table : RatingTable
        The table whose base rate is solved; its relativities are not changed.
    book : pandas.DataFrame
        The rows the total refers to (e.g. the training rows), as `rate` reads them.
    exposure_column : str or None
        The column of earned exposure, in the table's exposure unit; None with `annual`.
    target_total : float
        The total pure premium to reproduce over `book`, money (e.g. the rows' claim amounts),
        finite and > 0.
    annual : bool
        Rate every row for one full term (exposure 1.0).

    Returns
    -------
    table : RatingTable
        `table` with base_rate x target_total / sum(pure_premium) (not rounded) and `target`
        holding `total_pure_premium` = target_total beside its other keys.
    report : dict
        `base_rate_before`, `base_rate` (money per exposure unit); `off_balance_factor` (the
        ratio above); `total_pure_premium_before`, `total_pure_premium` (at the solved base rate,
        equal to the target up to floating point), `target_total_pure_premium` (money). With a
        minimum premium > 0 also `minimum_premium`: `minimum_premium` (money per row),
        `policies_at_minimum` (rows whose gross premium without the minimum, rounded, is below it),
        `share_at_minimum` (their share of the rows, in [0, 1]), `gross_without_minimum` and
        `gross_with_minimum` (money totals, gross premiums rounded per row), and `effect` =
        gross_with_minimum / gross_without_minimum - 1.

    Raises
    ------
    TableError
        When `target_total` is not a finite number > 0, when the table rates `book` to a total
        pure premium of 0 (no exposure), or for a bad row as `rating_columns` says.
    """
    if (
        isinstance(target_total, bool)
        or not isinstance(target_total, (int, float, np.number))
        or not np.isfinite(target_total)
        or target_total <= 0
    ):
        raise TableError(f"target_total: must be a finite number > 0, got {target_total!r}", where="target_total")
    exposure = _exposure(book, exposure_column, annual, 0)
    rels = _relativities(table, book)
    before = float(_pure_premium(table.base_rate, rels, exposure).sum())
    if not before > 0:
        raise TableError("book: the table rates it to a total pure premium of 0 (no exposure?)", check="book")
    off_balance = float(target_total) / before
    solved = dataclasses.replace(
        table,
        base_rate=table.base_rate * off_balance,
        target={**table.target, "total_pure_premium": float(target_total)},
    )
    pure = _pure_premium(solved.base_rate, rels, exposure)
    report: dict[str, Any] = {
        "base_rate_before": table.base_rate,
        "base_rate": solved.base_rate,
        "off_balance_factor": off_balance,
        "total_pure_premium_before": before,
        "total_pure_premium": float(pure.sum()),
        "target_total_pure_premium": float(target_total),
    }
    minimum = table.loadings.minimum_premium
    if minimum > 0:
        decimals = table.rounding.premium_decimals
        without = gross_premium(pure, exposure, table.loadings, decimals, apply_minimum=False)
        with_minimum = gross_premium(pure, exposure, table.loadings, decimals)
        report["minimum_premium"] = {
            "minimum_premium": minimum,
            "policies_at_minimum": int((without < minimum).sum()),
            "share_at_minimum": float((without < minimum).mean()),
            "gross_without_minimum": float(without.sum()),
            "gross_with_minimum": float(with_minimum.sum()),
            "effect": float(with_minimum.sum() / without.sum() - 1.0),
        }
    return solved, report
