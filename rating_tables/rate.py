"""The rater (docs/rating-table.md, Rating algorithm): pure and gross premium of every book row, vectorised.

rate          = (base_rate x rel_1) x rel_2 ... x rel_k        (per exposure unit, factors in table order)
pure_premium  = rate x exposure
term premium  = (rate x (1 + lae_ratio) + fixed_expense) / ((1 - variable_expense) - profit)
gross_premium = max(minimum_premium, term premium) x exposure, rounded half to even to
                `premium_decimals` (the minimum premium is an amount per full term, earned with the
                exposure), with its build-up (`premium_build_up`).
Exposure is the book's earned exposure, or one full term (1.0) per row with `annual=True`.
Numeric values go to the band [lower, upper) that holds them (`table.band_index`: the count of
interior edges at or below the value; -inf and inf fall in the end bands); categorical values are
compared as strings (pandas categoricals are mapped once per category, then taken by code). A
missing value (NaN, None, empty text) takes the factor's missing row; a categorical value that is
no level takes the fallback level, else the base level (unless `strict_levels`); a two-way table
gives 1.0 to a row missing on either side. `LevelCounts` counts, per factor, the rows rated so.
Errors name the 0-based book row.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt
import pandas as pd

from rating_tables.errors import TableError
from rating_tables.table import (
    Bands,
    CategoricalFactor,
    Loadings,
    MainFactor,
    NumericFactor,
    RatingTable,
    band_index,
    mapping_to_side,
)

UNKNOWN_SHOWN = 5  # distinct unknown levels a LevelCounts keeps, the first in book order


@dataclass(frozen=True)
class LevelCounts:
    """Rows of one factor that were not rated at a band or level of their own.

    `missing_rows` took the factor's missing row (their value was missing: NaN, None or empty
    text); `fallback_rows` held a categorical value that is no level and took `fallback_level`
    (the factor's `fallback`, else its `base`); `unknown_levels` are the first distinct such
    values in book order, at most `UNKNOWN_SHOWN` (5), as text. It is false when no row was
    counted.
    """

    factor: str
    missing_rows: int = 0
    fallback_rows: int = 0
    fallback_level: str | None = None
    unknown_levels: tuple[str, ...] = ()

    def __bool__(self) -> bool:
        return bool(self.missing_rows or self.fallback_rows)

    def merged(self, later: LevelCounts) -> LevelCounts:
        """These counts followed by those of the rows after them (`later`, same factor).

        Parameters
        ----------
        later : LevelCounts
            The counts of the next rows of the same book.

        Returns
        -------
        LevelCounts
            Rows summed; the unknown levels of both in book order, without repeats, the first
            `UNKNOWN_SHOWN` kept; so the counts of a book do not depend on how it was cut in batches.
        """
        return LevelCounts(
            self.factor,
            self.missing_rows + later.missing_rows,
            self.fallback_rows + later.fallback_rows,
            self.fallback_level if self.fallback_level is not None else later.fallback_level,
            tuple(dict.fromkeys(self.unknown_levels + later.unknown_levels))[:UNKNOWN_SHOWN],
        )


def _book_row(i: int) -> str:
    """The text naming position `i` of a book as a 0-based row."""
    return f"book row {i} (0-based)"


def _column(book: pd.DataFrame, name: str, what: str) -> pd.Series:
    if name not in book.columns:
        raise TableError(f"{what}: the book has no column {name!r}", check="book", where=name)
    return book[name]


def _numeric_values(series: pd.Series, what: str, row_offset: int = 0) -> npt.NDArray[np.float64]:
    """The column as float64, NaN where a value is missing (NaN, None or empty text); TableError at
    the first value that is not a number."""
    if isinstance(series.dtype, pd.CategoricalDtype):
        series = pd.Series(np.asarray(series, dtype=object))
    if pd.api.types.is_bool_dtype(series.dtype):
        raise TableError(f"{what}: the column holds true/false values, not numbers", check="book")
    values: npt.NDArray[np.float64]
    if pd.api.types.is_numeric_dtype(series.dtype):
        values = series.to_numpy(dtype=np.float64, na_value=np.nan)
        return values
    try:
        values = series.astype("float64").to_numpy()
        return values
    except (TypeError, ValueError):
        pass  # empty text, which is missing, or text that is no number: looked for below
    series = series.mask((series == "").to_numpy(dtype=bool, na_value=False))
    try:
        values = series.astype("float64").to_numpy()
    except (TypeError, ValueError):
        coerced = pd.to_numeric(series, errors="coerce")
        bad = np.flatnonzero(coerced.isna().to_numpy() & series.notna().to_numpy())
        where = _book_row(row_offset + int(bad[0])) if bad.size else "some row"
        text = series.iloc[int(bad[0])] if bad.size else "?"
        raise TableError(f"{what}: value {text!r} at {where} is not a number", check="book", where=where) from None
    return values


def _refuse_missing(missing: npt.NDArray[np.bool_], what: str, row_offset: int, factor: str | None = None) -> None:
    """TableError naming the first row where `missing` is true, if any."""
    if missing.any():
        where = _book_row(row_offset + int(np.flatnonzero(missing)[0]))
        no_row = "" if factor is None else " and the table has no missing row for it"
        raise TableError(f"{what}: missing value at {where}{no_row}", check="book", factor=factor, where=where)


def _missing_values_of(factor: MainFactor, missing: npt.NDArray[np.bool_], row_offset: int) -> int:
    """The number of missing values, refused when the factor has no missing row."""
    if factor.missing is None:
        _refuse_missing(missing, f"factor {factor.name!r}", row_offset, factor.name)
    return int(missing.sum())


def _first_distinct(codes: npt.NDArray[np.integer[Any]], labels: list[str]) -> tuple[str, ...]:
    """The labels of the first `UNKNOWN_SHOWN` distinct codes in row order."""
    distinct, first = np.unique(codes, return_index=True)
    return tuple(labels[int(c)] for c in distinct[np.argsort(first)][:UNKNOWN_SHOWN])


def _level_index(
    factor: CategoricalFactor, series: pd.Series, row_offset: int = 0, strict_levels: bool = False
) -> tuple[npt.NDArray[np.intp], npt.NDArray[np.bool_], LevelCounts]:
    """Index into `factor.levels` of each value, compared as strings, and which values are missing.

    Unknown values take the fallback level, else the base level (refused with `strict_levels` or
    when the factor names neither); missing values (None, NaN, empty text) get index 0 and are
    flagged, refused when the factor has no missing row.
    """
    what = f"factor {factor.name!r}"
    codes: npt.NDArray[np.integer[Any]]
    if isinstance(series.dtype, pd.CategoricalDtype):
        codes = series.cat.codes.to_numpy()
        labels = [str(c) for c in series.cat.categories]
    else:
        codes, uniques = pd.factorize(series, use_na_sentinel=True)
        labels = [str(u) for u in uniques]
    empty_label = np.array([label == "" for label in labels] + [True])  # the last entry is for code -1
    missing = empty_label[codes] if empty_label[:-1].any() or (codes < 0).any() else np.zeros(codes.shape, bool)
    missing_rows = _missing_values_of(factor, missing, row_offset)
    position = {level: i for i, level in enumerate(factor.levels)}
    # -1 marks a label that is no level; the missing ones (empty text, code -1) point to level 0
    to_level = np.array([0 if label == "" else position.get(label, -1) for label in labels] + [0], dtype=np.intp)
    unknown = (to_level < 0)[codes] if (to_level < 0).any() else np.zeros(codes.shape, bool)
    counts = LevelCounts(factor.name, missing_rows=missing_rows)
    if unknown.any():
        stand_in = factor.fallback if factor.fallback is not None else factor.base
        if stand_in is None or strict_levels:
            first = int(np.flatnonzero(unknown)[0])
            where = _book_row(row_offset + first)
            why = (
                "the factor has no fallback or base level"
                if stand_in is None
                else f"strict levels refuse it (the fallback would be {stand_in!r})"
            )
            raise TableError(
                f"{what}: level {labels[codes[first]]!r} at {where} is not in the table and {why}",
                check="book",
                factor=factor.name,
                where=where,
            )
        counts = dataclasses.replace(
            counts,
            fallback_rows=int(unknown.sum()),
            fallback_level=stand_in,
            unknown_levels=_first_distinct(codes[unknown], labels),
        )
        to_level[to_level < 0] = position[stand_in]
    index: npt.NDArray[np.intp] = to_level[codes]
    return index, missing, counts


def row_cells(factor: MainFactor, values: pd.Series) -> npt.NDArray[np.intp]:
    """The band or level of `factor` that rates each book value, as the rater finds it.

    Parameters
    ----------
    factor : NumericFactor or CategoricalFactor
        The factor.
    values : pandas.Series
        The book's column of the factor.

    Returns
    -------
    numpy.ndarray of intp
        For each value, the index of its band (numeric) or level (categorical, an unknown level at
        its fallback or base level), or len(factor.labels()) for a missing value (the missing
        row's place).

    Raises
    ------
    TableError
        As `rate` does for a value it cannot rate.
    """
    if isinstance(factor, NumericFactor):
        numbers = _numeric_values(values, f"factor {factor.name!r}")
        missing = np.isnan(numbers)
        cells: npt.NDArray[np.intp] = band_index(factor.lower, numbers).astype(np.intp)
    else:
        cells, missing, _ = _level_index(factor, values)
    return np.where(missing, len(factor.labels()), cells)


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
    _refuse_missing(np.isnan(values), what, row_offset)
    bad = np.flatnonzero(~(np.isfinite(values) & (values >= 0)))
    if bad.size:
        where = _book_row(row_offset + int(bad[0]))
        raise TableError(
            f"{what}: value {float(values[bad[0]])!r} at {where} must be finite and >= 0", check="book", where=where
        )
    return values


def _relativities(
    table: RatingTable, book: pd.DataFrame, row_offset: int = 0, strict_levels: bool = False
) -> tuple[dict[str, npt.NDArray[np.float64]], dict[str, LevelCounts]]:
    """The build-up columns `rel_NAME` (interactions `rel_a__b`), in table order, and the counts
    of each main factor."""
    cells: dict[str, npt.NDArray[np.integer[Any]]] = {}
    values: dict[str, npt.NDArray[np.float64]] = {}
    missing: dict[str, npt.NDArray[np.bool_]] = {}
    counts: dict[str, LevelCounts] = {}
    out: dict[str, npt.NDArray[np.float64]] = {}
    for factor in table.factors:
        if isinstance(factor, NumericFactor):
            what = f"factor {factor.name!r}"
            values[factor.name] = _numeric_values(_column(book, factor.name, what), what, row_offset)
            missing[factor.name] = np.isnan(values[factor.name])
            counts[factor.name] = LevelCounts(
                factor.name, missing_rows=_missing_values_of(factor, missing[factor.name], row_offset)
            )
            cells[factor.name] = band_index(factor.lower, values[factor.name])
        elif isinstance(factor, CategoricalFactor):
            series = _column(book, factor.name, f"factor {factor.name!r}")
            cells[factor.name], missing[factor.name], counts[factor.name] = _level_index(
                factor, series, row_offset, strict_levels
            )
        else:
            i, j = (
                _side_index(table, side, side_cells, cells, values)
                for side, side_cells in zip(factor.of, (factor.a_cells, factor.b_cells))
            )
            flat = i.astype(np.intp) * factor.relativity.shape[1] + j  # one flat take: 2-D fancy indexing is slower
            rel = factor.relativity.ravel()[flat]
            a, b = factor.of
            if counts[a].missing_rows or counts[b].missing_rows:
                rel[missing[a] | missing[b]] = 1.0  # two-way tables have no missing cell
            out[f"rel_{factor.name}"] = rel
            continue
        rel = factor.relativity[cells[factor.name]]
        if counts[factor.name].missing_rows:
            assert factor.missing is not None  # else _missing_values_of refused the rows
            rel[missing[factor.name]] = factor.missing.relativity
        out[f"rel_{factor.name}"] = rel
    return out, counts


def _side_index(
    table: RatingTable,
    side: str,
    side_cells: Bands | tuple[str, ...],
    cells: dict[str, npt.NDArray[np.integer[Any]]],
    values: dict[str, npt.NDArray[np.float64]],
) -> npt.NDArray[np.integer[Any]]:
    """Each row's cell on one side of a two-way table (any cell for a missing value, given 1.0 later)."""
    if isinstance(side_cells, Bands):
        return band_index(side_cells.lower, values[side])
    main = table.factor(side)
    assert isinstance(main, CategoricalFactor)
    index: npt.NDArray[np.intp] = mapping_to_side(main, side_cells)[cells[side]]
    return index


def _rate_per_unit(base_rate: float, rels: dict[str, npt.NDArray[np.float64]], n: int) -> npt.NDArray[np.float64]:
    """(base_rate x rel_1) x ... x rel_k: pure premium per exposure unit (one full term), money per row."""
    rate = np.full(n, base_rate)
    for rel in rels.values():
        rate *= rel
    return rate


def _pure_premium(
    base_rate: float, rels: dict[str, npt.NDArray[np.float64]], exposure: npt.NDArray[np.float64]
) -> npt.NDArray[np.float64]:
    """((base_rate x rel_1) x ... x rel_k) x exposure, money per row."""
    return _rate_per_unit(base_rate, rels, exposure.size) * exposure


#: The money columns of the premium build-up, in the order the rater adds them (docs/rating-table.md).
BUILD_UP_COLUMNS = (
    "pure_premium",
    "lae_load",
    "fixed_expense_load",
    "variable_expense_load",
    "profit_load",
    "minimum_premium_adjustment",
    "gross_premium",
)
#: The flag the rater adds after the build-up: the row was charged the minimum premium.
AT_MINIMUM = "at_minimum"


def premium_build_up(
    rate: npt.NDArray[np.float64],
    exposure: npt.NDArray[np.float64],
    loadings: Loadings,
    premium_decimals: int,
    apply_minimum: bool = True,
) -> dict[str, npt.NDArray[Any]]:
    """The gross premium of every row and its build-up, the minimum premium applied to one full term.

    With P = `rate` (pure premium per exposure unit), e = exposure, and the loadings:

    - term premium T = (P x (1 + lae_ratio) + fixed_expense) / ((1 - variable_expense) - profit),
      the gross premium of one full term, computed in this order in float64;
    - at_minimum = T < minimum_premium (the minimum premium is an amount per full term);
    - gross premium = max(minimum_premium, T) x e, the term premium earned with the exposure;
    - build-up: pure_premium = P x e, lae_load = P x e x lae_ratio, fixed_expense_load =
      fixed_expense x e, variable_expense_load = T x e x variable_expense, profit_load = T x e x
      profit, minimum_premium_adjustment = (max(minimum_premium, T) - T) x e. Before rounding they
      add up to the gross premium exactly.

    Every money column is rounded on its own, half to even, to `premium_decimals` (numpy's round:
    the value times 10**premium_decimals rounded to the nearest integer, ties to even, divided
    back), so the rounded build-up may differ from the rounded gross premium by at most half a
    unit of the last decimal per column.

    Parameters
    ----------
    rate : numpy.ndarray of float64
        Pure premium per exposure unit of each row, ((base_rate x rel_1) x ... x rel_k), money.
    exposure : numpy.ndarray of float64
        Exposure per row in the table's exposure unit, same shape (1.0 for one full term).
    loadings : Loadings
        lae_ratio (share of the pure premium), fixed_expense (money per exposure unit),
        variable_expense and profit (shares of the gross premium), minimum_premium (money per
        full term).
    premium_decimals : int
        Decimals kept, 0 to 12 (`Rounding.premium_decimals`; 2 for cents).
    apply_minimum : bool
        False leaves out the minimum premium (used to measure its effect).

    Returns
    -------
    dict of str to numpy.ndarray
        `BUILD_UP_COLUMNS` (money per row, float64, rounded), then `at_minimum` (bool).
    """
    term = (rate * (1.0 + loadings.lae_ratio) + loadings.fixed_expense) / (
        (1.0 - loadings.variable_expense) - loadings.profit
    )
    at_minimum = term < loadings.minimum_premium if apply_minimum else np.zeros(term.shape, dtype=bool)
    charged = np.where(at_minimum, loadings.minimum_premium, term)
    pure = rate * exposure
    unrounded = {
        "pure_premium": pure,
        "lae_load": pure * loadings.lae_ratio,
        "fixed_expense_load": loadings.fixed_expense * exposure,
        "variable_expense_load": term * exposure * loadings.variable_expense,
        "profit_load": term * exposure * loadings.profit,
        "minimum_premium_adjustment": (charged - term) * exposure,
        "gross_premium": charged * exposure,
    }
    out: dict[str, npt.NDArray[Any]] = {k: np.round(v, premium_decimals) for k, v in unrounded.items()}
    out[AT_MINIMUM] = at_minimum
    return out


def rating_columns(
    table: RatingTable,
    book: pd.DataFrame,
    exposure_column: str | None = None,
    annual: bool = False,
    row_offset: int = 0,
    strict_levels: bool = False,
) -> tuple[dict[str, npt.NDArray[Any]], dict[str, LevelCounts]]:
    """The columns the rater adds: `rel_*` in table order, then the premium build-up and
    `at_minimum`; and the counts of the rows rated at a missing row or a stand-in level.

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
    strict_levels : bool
        Refuse a categorical value that is no level even when the factor has a fallback or base.

    Returns
    -------
    columns : dict of str to numpy.ndarray
        `rel_NAME` (float64) for each factor entry in table order (`rel_A__B` for a two-way table), the
        relativity looked up for each row (the missing row's for a missing value; 1.0 from a
        two-way table for a row missing on either side); then `premium_build_up`'s columns
        (money rounded to `premium_decimals`, and the boolean `at_minimum`). Each array has one
        value per row of `book`.
    counts : dict of str to LevelCounts
        For each numeric and categorical factor, in table order, the rows of `book` rated at its
        missing row or at its fallback (or base) level.

    Raises
    ------
    TableError
        (check `book`) for a missing column or a boolean column where numbers are needed; and,
        naming the 0-based book row, for a missing value of a factor without a missing row or of
        the exposure, a value of a numeric factor or of the exposure that is not a number, an
        exposure that is negative or not finite, a level the factor does not list when it has no
        fallback or base level (or with `strict_levels`), or a premium too large to represent.
    """
    exposure = _exposure(book, exposure_column, annual, row_offset)
    out, counts = _relativities(table, book, row_offset, strict_levels)
    with np.errstate(over="ignore", invalid="ignore"):  # checked below, row by row
        rate = _rate_per_unit(table.base_rate, out, len(book))
        build_up = premium_build_up(rate, exposure, table.loadings, table.rounding.premium_decimals)
    bad = np.flatnonzero(~np.isfinite(build_up["gross_premium"]) | ~np.isfinite(build_up["pure_premium"]))
    if bad.size:
        where = _book_row(row_offset + int(bad[0]))
        raise TableError(
            f"premium at {where} is too large to represent (exposure {float(exposure[bad[0]])!r}); check the exposure",
            check="book",
            where=where,
        )
    out.update(build_up)
    return out, counts


def pure_premium(
    table: RatingTable, book: pd.DataFrame, exposure_column: str | None = None, annual: bool = False
) -> npt.NDArray[np.float64]:
    """The pure premium of every row, not rounded: for measuring a table (deviance, totals), not
    for charging.

    Parameters
    ----------
    table : RatingTable
        The table to rate with.
    book : pandas.DataFrame
        As for `rate`.
    exposure_column : str or None
        The column of earned exposure in the table's exposure unit; needed unless `annual`.
    annual : bool
        Rate every row for one full term (exposure 1.0).

    Returns
    -------
    numpy.ndarray of float64
        ((base_rate x rel_1) x ... x rel_k) x exposure per row of `book`, money, full precision.

    Raises
    ------
    TableError
        For a bad row, as `rating_columns` says.
    """
    exposure = _exposure(book, exposure_column, annual, 0)
    rels, _ = _relativities(table, book)
    return _pure_premium(table.base_rate, rels, exposure)


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
        `BUILD_UP_COLUMNS` (pure premium, the loads, the minimum-premium adjustment, gross premium)
        and `at_minimum`.
    """
    return [f"rel_{f.name}" for f in table.factors] + [*BUILD_UP_COLUMNS, AT_MINIMUM]


def rate(
    table: RatingTable,
    book: pd.DataFrame,
    exposure_column: str | None = None,
    annual: bool = False,
    *,
    strict_levels: bool = False,
) -> pd.DataFrame:
    """Rate every row of `book`: its columns plus `rel_*`, the premium build-up and `at_minimum`.

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
        is `2.0`; a value that is no level takes the fallback level, else the base level. A
        missing value of a factor (NaN, None, empty text) takes the factor's missing row, and
        1.0 from every two-way table on the factor; without a missing row it is an error, as is
        a missing exposure.
    exposure_column : str or None
        The column of earned exposure in the table's exposure unit, finite and >= 0; needed
        unless `annual`.
    annual : bool
        Rate every row for one full term: exposure 1.0 for every row.
    strict_levels : bool
        Refuse a categorical value that is no level even when the factor has a fallback or base.

    Returns
    -------
    pandas.DataFrame
        `book`'s columns, in order and unchanged, then `rel_NAME` per factor entry in table order
        (float64), the money columns of `premium_build_up` (float64, each rounded to
        `premium_decimals`) and `at_minimum` (bool); the index is `book`'s.

    Raises
    ------
    TableError
        When `book` already has one of the added columns, or for a bad row as `rating_columns`
        says; messages name the 0-based book row.
    """
    check_no_clash(list(book.columns), added_columns(table), "book")
    columns, _ = rating_columns(table, book, exposure_column, annual, strict_levels=strict_levels)
    added = pd.DataFrame(columns, index=book.index, copy=False)
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
        minimum premium > 0 also `minimum_premium`: `minimum_premium` (money per full term),
        `rows_at_minimum` (rows whose term premium is below it, `at_minimum`),
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
    rels, _ = _relativities(table, book)
    before = float(_pure_premium(table.base_rate, rels, exposure).sum())
    if not before > 0:
        raise TableError("book: the table rates it to a total pure premium of 0 (no exposure?)", check="book")
    off_balance = float(target_total) / before
    solved = dataclasses.replace(
        table,
        base_rate=table.base_rate * off_balance,
        target={**table.target, "total_pure_premium": float(target_total)},
    )
    rate = _rate_per_unit(solved.base_rate, rels, exposure.size)
    report: dict[str, Any] = {
        "base_rate_before": table.base_rate,
        "base_rate": solved.base_rate,
        "off_balance_factor": off_balance,
        "total_pure_premium_before": before,
        "total_pure_premium": float((rate * exposure).sum()),
        "target_total_pure_premium": float(target_total),
    }
    minimum = table.loadings.minimum_premium
    if minimum > 0:
        decimals = table.rounding.premium_decimals
        without = premium_build_up(rate, exposure, table.loadings, decimals, apply_minimum=False)["gross_premium"]
        with_minimum = premium_build_up(rate, exposure, table.loadings, decimals)
        report["minimum_premium"] = {
            "minimum_premium": minimum,
            "rows_at_minimum": int(with_minimum[AT_MINIMUM].sum()),
            "share_at_minimum": float(with_minimum[AT_MINIMUM].mean()),
            "gross_without_minimum": float(without.sum()),
            "gross_with_minimum": float(with_minimum["gross_premium"].sum()),
            "effect": float(with_minimum["gross_premium"].sum() / without.sum() - 1.0),
        }
    return solved, report
