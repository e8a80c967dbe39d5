"""The rating-table model: factors, loadings, rounding and the table, validated when built.

Pure premium = base_rate x product of factor relativities (in table order) x exposure; the gross
premium adds LAE, expenses and profit (docs/rating-table.md). Every object here is immutable and its arrays
are read-only float64 copies. A table that exists is well-formed: numeric bands cover
(-inf, inf) without gap or overlap, relativities are finite and > 0, categorical levels are
unique non-empty strings, fallback and base levels exist, a two-way table refers to main factors
listed before it, and `file` paths stay inside the table folder. A main factor may carry a
`MissingRow`: the relativity of a missing book value, outside the bands and levels.
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable, Iterable, Mapping
from dataclasses import Field, dataclass, field, fields
from datetime import date
from pathlib import PurePosixPath
from typing import Any, ClassVar

import numpy as np
import numpy.typing as npt

from rating_tables.errors import TableError

MONOTONE = ("increasing", "decreasing", "none")
TABLE_JSON = "table.json"
OPTIONAL_COLUMNS = ("indicated", "credibility", "current")
MISSING_LABEL = "(missing)"
DRAFT_CAUTION = (
    "Draft for review by a qualified actuary: these rates must be filed and approved under "
    "local rate regulation before use, and factors prohibited by local law must not be used."
)


def edge_text(x: float) -> str:
    """A number as exact text: `-inf`, `inf`, `nan`, or the shortest repr (`25` for 25.0).

    Parameters
    ----------
    x : float
        The number, typically a band edge in the unit of the factor's book values.

    Returns
    -------
    str
        Python's shortest text that reads back as the same float64, with a trailing `.0` dropped:
        `25` for 25.0, `0.1`, `1e+20`, `-inf`. Used in band labels and messages; the factor CSVs
        keep the `.0` (`25.0`, see `rating_tables.io`).
    """
    text = repr(float(x))
    return text[:-2] if text.endswith(".0") else text


def band_label(lower: float, upper: float) -> str:
    """A band as `[lower, upper)` (lower inclusive, upper exclusive), edges as exact text (`edge_text`),
    so distinct edges always give distinct labels.

    Parameters
    ----------
    lower : float
        The band's lower edge, included in the band (`-inf` for the first band), in the unit of
        the factor's book values.
    upper : float
        The band's upper edge, excluded from the band (`inf` for the last band), same unit.

    Returns
    -------
    str
        The label, e.g. `[-inf, 25)`, `[25, 60)`, `[60, inf)`: the one band label of premiumlab
        (exhibit sheets, audit and impact messages, book bands).
    """
    return f"[{edge_text(lower)}, {edge_text(upper)})"


def band_labels(lower: Iterable[float], upper: Iterable[float]) -> list[str]:
    """The label (`band_label`) of each band [lower[i], upper[i]).

    Parameters
    ----------
    lower : iterable of float
        Lower edges (inclusive), one per band, in the unit of the factor's book values.
    upper : iterable of float
        Upper edges (exclusive), one per band, as many as `lower`.

    Returns
    -------
    list of str
        `band_label(lower[i], upper[i])` for each band, in the given order.
    """
    return [band_label(lo, hi) for lo, hi in zip(lower, upper)]


def band_index(lower: npt.NDArray[np.float64], values: npt.NDArray[np.float64]) -> npt.NDArray[np.integer[Any]]:
    """Index of the band holding each value, for bands starting at `lower` (first edge -inf).

    The index is the number of interior edges at or below the value: counted edge by edge for up
    to 255 bands (about ten times faster than a binary search on a few edges), else np.searchsorted.

    Parameters
    ----------
    lower : numpy.ndarray of float64
        The bands' lower edges in ascending order, `lower[0] = -inf`; with contiguous bands
        (`upper[i] = lower[i + 1]`, as a valid table has) the band i is [lower[i], lower[i + 1]).
    values : numpy.ndarray of float64
        Book values, any shape, in the unit of the edges. A NaN gets an index that is valid but
        not meaningful (the rater rates the rows of missing values at the missing row instead).

    Returns
    -------
    numpy.ndarray of integers
        Same shape as `values`: i such that lower[i] <= x < lower[i + 1] (inf past the last
        edge), that is, the number of edges in `lower[1:]` that are <= x; `-inf` falls in band 0
        and `inf` in the last band.
        The dtype is uint8 for up to 255 bands, else intp.
    """
    if lower.size > 255:
        return np.searchsorted(lower, values, side="right") - 1
    index = np.zeros(np.shape(values), dtype=np.uint8)
    for edge in lower[1:]:
        index += (values >= edge).view(np.uint8)
    return index


def data_row(i: int) -> str:
    """The text naming the i-th (0-based) band or level as the factor CSV's 1-based data row.

    Parameters
    ----------
    i : int
        0-based position of the band or level in the factor (the header row not counted).

    Returns
    -------
    str
        `data row {i + 1} (1-based)`, as error messages name factor CSV rows.
    """
    return f"data row {i + 1} (1-based)"


def _set(obj: object, name: str, value: Any) -> None:
    object.__setattr__(obj, name, value)


def _readonly(values: Any, what: str, prefix: str, ndim: int = 1) -> npt.NDArray[np.float64]:
    try:
        arr = np.array(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise TableError(f"{prefix}: {what} is not numeric") from None
    if arr.ndim != ndim:
        raise TableError(f"{prefix}: {what} must be a {ndim}-D array, got shape {arr.shape}")
    arr.setflags(write=False)
    return arr


_RULES: dict[str, tuple[str, Callable[[npt.NDArray[np.float64]], npt.NDArray[np.bool_]], str]] = {
    "relativity": ("relativity", lambda v: np.isfinite(v) & (v > 0), "must be finite and > 0"),
    "exposure": ("format", lambda v: np.isfinite(v) & (v >= 0), "must be finite and >= 0"),
    "indicated": ("format", lambda v: np.isnan(v) | (np.isfinite(v) & (v > 0)), "must be empty or finite and > 0"),
    "credibility": ("format", lambda v: np.isnan(v) | ((v >= 0) & (v <= 1)), "must be empty or between 0 and 1"),
    "current": ("format", lambda v: np.isnan(v) | (np.isfinite(v) & (v > 0)), "must be empty or finite and > 0"),
}


def _check_column(
    values: npt.NDArray[np.float64],
    column: str,
    prefix: str,
    factor: str | None,
    row_text: Callable[[int], str] | None,
) -> None:
    """Refuse the first value of `column` that breaks its rule; `row_text` names a flat index
    (None: the prefix alone names the place)."""
    check, ok, rule = _RULES[column]
    flat = values.ravel()
    bad = np.flatnonzero(~ok(flat))
    if bad.size:
        i = int(bad[0])
        where = None if row_text is None else row_text(i)
        raise TableError(
            f"{prefix}{'' if where is None else ', ' + where}: {column} {edge_text(flat[i])} {rule}",
            check=check,
            factor=factor,
            where=where,
            amount=float(flat[i]),
        )


def _check_bands(
    lower: npt.NDArray[np.float64],
    upper: npt.NDArray[np.float64],
    prefix: str,
    factor: str,
    row_text: Callable[[int], str],
) -> None:
    """Bands [lower, upper) must be non-empty, contiguous and cover (-inf, inf)."""

    def fail(i: int, what: str, amount: float | None = None) -> None:
        raise TableError(
            f"{prefix}, {row_text(i)}: {what}", check="bands", factor=factor, where=row_text(i), amount=amount
        )

    if lower.size == 0:
        raise TableError(f"{prefix}: has no bands", check="bands", factor=factor)
    if upper.size != lower.size:
        raise TableError(
            f"{prefix}: {lower.size} lower edges but {upper.size} upper edges", check="bands", factor=factor
        )
    missing = np.flatnonzero(np.isnan(lower) | np.isnan(upper))
    if missing.size:
        fail(int(missing[0]), "band edge is not a number")
    if lower[0] != -np.inf:
        fail(0, f"the first band must start at -inf, not {edge_text(lower[0])}")
    if upper[-1] != np.inf:
        fail(lower.size - 1, f"the last band must end at inf, not {edge_text(upper[-1])}")
    empty = np.flatnonzero(~(lower < upper))
    if empty.size:
        i = int(empty[0])
        fail(i, f"band {band_label(lower[i], upper[i])} is empty or reversed")
    step = lower[1:] - upper[:-1]
    broken = np.flatnonzero(step != 0)
    if broken.size:
        i = int(broken[0]) + 1
        kind = "gap" if step[i - 1] > 0 else "overlap"
        fail(
            i,
            f"{kind} between the previous band's upper {edge_text(upper[i - 1])} and this "
            f"band's lower {edge_text(lower[i])}",
            amount=float(abs(step[i - 1])),
        )


def _check_levels(
    levels: Iterable[object], prefix: str, factor: str, row_text: Callable[[int], str]
) -> tuple[str, ...]:
    """Levels must be unique non-empty strings; returns them as a tuple."""
    given = tuple(levels)
    if not given:
        raise TableError(f"{prefix}: has no levels", factor=factor)
    seen: dict[str, int] = {}
    for i, level in enumerate(given):
        if not isinstance(level, str) or level == "":
            raise TableError(
                f"{prefix}, {row_text(i)}: level {level!r} is not a non-empty string", factor=factor, where=row_text(i)
            )
        if level in seen:
            raise TableError(
                f"{prefix}, {row_text(i)}: level {level!r} repeats {row_text(seen[level])}",
                factor=factor,
                where=row_text(i),
            )
        seen[level] = i
    return tuple(seen)  # the levels in the given order: every one is a new key


def check_file(file: Any, prefix: str, factor: str) -> str:
    """A factor's `file`: a relative POSIX path inside the table folder (normalised).

    Parameters
    ----------
    file : object
        The `file` value of a factor entry, any type (as read from table.json).
    prefix : str
        Start of the error message, naming where the value was found (e.g. `table.json: factors[2]`).
    factor : str
        The factor's name, for the error's `factor`.

    Returns
    -------
    str
        The path in normal form: `factors//age.csv`, `./factors/age.csv` and `factors/age.csv/` all
        give `factors/age.csv`.

    Raises
    ------
    TableError
        (check `file_path`) when `file` is not a non-empty string, holds a backslash or a NUL, is
        absolute, has a `..` part, or is `.` or `table.json`. Whether the path resolves inside the
        folder through symbolic links is checked when the file is read (`rating_tables.load`).
    """
    if not isinstance(file, str) or file == "":
        raise TableError(f"{prefix}: file must be a non-empty relative path", check="file_path", factor=factor)
    if "\\" in file or "\x00" in file:
        raise TableError(
            f"{prefix}: file {file!r} must use '/' separators and no NUL", check="file_path", factor=factor, where=file
        )
    path = PurePosixPath(file)
    if path.is_absolute():
        raise TableError(
            f"{prefix}: file {file!r} is an absolute path; it must be relative to the table folder",
            check="file_path",
            factor=factor,
            where=file,
        )
    if ".." in path.parts:
        raise TableError(
            f"{prefix}: file {file!r} uses '..' and would leave the table folder",
            check="file_path",
            factor=factor,
            where=file,
        )
    if str(path) in (".", TABLE_JSON):
        raise TableError(
            f"{prefix}: file {file!r} is not a factor file name", check="file_path", factor=factor, where=file
        )
    return str(path)


def _same(a: Any, b: Any) -> bool:
    if isinstance(a, float) and isinstance(b, float):
        return a == b or (math.isnan(a) and math.isnan(b))
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        return (
            isinstance(a, np.ndarray)
            and isinstance(b, np.ndarray)
            and a.shape == b.shape
            and bool(np.array_equal(a, b, equal_nan=True))
        )
    return bool(a == b)


class _ComparedByValue:
    """Equality field by field, numpy arrays compared by value (NaN equal to NaN)."""

    __dataclass_fields__: ClassVar[dict[str, Field[Any]]]  # every subclass is a dataclass

    def __eq__(self, other: object) -> bool:
        if type(other) is not type(self):
            return NotImplemented
        return all(_same(getattr(self, f.name), getattr(other, f.name)) for f in fields(self))

    __hash__ = None  # type: ignore[assignment]


def _missing_values(values: Mapping[str, Any], prefix: str, factor: str | None, where: str | None) -> dict[str, float]:
    """The values of a missing row as floats, each checked by the rule of its factor-file column."""
    checked: dict[str, float] = {}
    for name, value in values.items():
        if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
            place = prefix if where is None else f"{prefix}, {where}"
            raise TableError(f"{place}: {name} {value!r} is not a number", factor=factor, where=where)
        number = float(value)
        _check_column(np.array([number]), name, prefix, factor, None if where is None else lambda _: where)
        checked[name] = number
    return checked


@dataclass(frozen=True, eq=False)
class MissingRow(_ComparedByValue):
    """The row of a main factor that rates a missing book value (docs/rating-table.md, Factor files).

    It stands outside the bands and levels: `labels()`, `relativity` and `exposure` of its factor
    never include it, and it has no place in a monotone order. Its values follow the rules of a
    factor-file row: `relativity` (a multiplier on the pure premium) finite and > 0, `exposure`
    (the exposure of the rows with a missing value when the table was made, in the table's unit)
    finite and >= 0, `indicated` and `current` NaN or finite and > 0, `credibility` NaN or in
    [0, 1]. Shown as
    `MISSING_LABEL`. Two NaN values compare equal.
    """

    relativity: float
    exposure: float
    indicated: float = math.nan
    credibility: float = math.nan
    current: float = math.nan

    def __post_init__(self) -> None:
        values = {f.name: getattr(self, f.name) for f in fields(self)}
        for name, value in _missing_values(values, "missing row", None, None).items():
            _set(self, name, value)


def missing_row(values: Mapping[str, Any], prefix: str, factor: str, where: str) -> MissingRow:
    """A `MissingRow` from its column values, a bad value refused with a message naming the place.

    Parameters
    ----------
    values : mapping of str to number
        `relativity` and `exposure`, optionally `indicated`, `credibility` and `current` (NaN when
        empty).
    prefix : str
        Start of an error message, naming the file and factor (e.g. `factors/region.csv: factor 'region'`).
    factor : str
        The factor's name, for the error's `factor`.
    where : str
        The row, for the message and the error's `where` (e.g. `data row 4 (1-based), the missing row`).

    Returns
    -------
    MissingRow
        The row, its values as floats.

    Raises
    ------
    TableError
        (check `relativity` or `format`) naming `prefix` and `where` for the first value that
        breaks its rule, or that is not a number.
    """
    return MissingRow(**_missing_values(values, prefix, factor, where))


def _check_missing(factor: Any, prefix: str) -> None:
    """A main factor's `missing` is None or a MissingRow with no optional value the factor lacks."""
    row = factor.missing
    if row is None:
        return
    if not isinstance(row, MissingRow):
        raise TableError(f"{prefix}: missing must be a MissingRow or None, got {row!r}", factor=factor.name)
    for column in OPTIONAL_COLUMNS:
        if getattr(factor, column) is None and not math.isnan(getattr(row, column)):
            raise TableError(
                f"{prefix}, the missing row: {column} is given but the factor has no {column} column",
                factor=factor.name,
                where=MISSING_LABEL,
            )


def _check_name(name: Any, what: str) -> None:
    if not isinstance(name, str) or name == "":
        raise TableError(f"{what}: factor name {name!r} must be a non-empty string")


def _check_monotone(monotone: Any, prefix: str, factor: str) -> None:
    if monotone not in MONOTONE:
        raise TableError(f"{prefix}: monotone {monotone!r} must be one of {', '.join(MONOTONE)}", factor=factor)


def _optional_columns(factor: Any, prefix: str, shape: tuple[int, ...], row_text: Callable[[int], str]) -> None:
    for column in OPTIONAL_COLUMNS:
        values = getattr(factor, column)
        if values is None:
            continue
        arr = _readonly(values, column, prefix, ndim=len(shape))
        if arr.shape != shape:
            raise TableError(f"{prefix}: {column} has shape {arr.shape}, expected {shape}", factor=factor.name)
        _check_column(arr, column, prefix, factor.name, row_text)
        _set(factor, column, arr)


def _factor_arrays(factor: Any, prefix: str, n: int) -> None:
    for column in ("relativity", "exposure"):
        arr = _readonly(getattr(factor, column), column, prefix)
        if arr.size != n:
            raise TableError(f"{prefix}: {column} has {arr.size} values for {n} rows", factor=factor.name)
        _check_column(arr, column, prefix, factor.name, data_row)
        _set(factor, column, arr)
    _optional_columns(factor, prefix, (n,), data_row)


def _main_prologue(factor: Any) -> str:
    _check_name(factor.name, "factor")
    _set(
        factor,
        "file",
        check_file(
            f"factors/{factor.name}.csv" if factor.file is None else factor.file, f"factor {factor.name!r}", factor.name
        ),
    )
    prefix = f"{factor.file}: factor {factor.name!r}"
    _check_monotone(factor.monotone, prefix, factor.name)
    return prefix


@dataclass(frozen=True, eq=False)
class NumericFactor(_ComparedByValue):
    """A banded numeric factor: band i is [lower[i], upper[i]) with `relativity[i]`.

    `lower` and `upper` are in the unit of the book column named `name`; `relativity` is a
    multiplier on the pure premium, finite and > 0. `exposure` is the exposure the band held when
    the table was made (same unit as the table), finite and >= 0; `indicated` (the model's
    relativity before selection and rounding, > 0), `credibility` (in [0, 1]) and `current` (the
    relativity of the table in force that a selection was compared with, > 0) are optional exhibit
    columns (NaN where not given). The arrays may be given as any 1-D sequences of numbers; they are kept as
    read-only float64 copies. `file` defaults to `factors/NAME.csv`. `missing`, when given, rates
    a missing book value (NaN); it may carry `indicated`, `credibility` or `current` only when the
    factor has that column.
    """

    name: str
    monotone: str
    lower: np.ndarray
    upper: np.ndarray
    relativity: np.ndarray
    exposure: np.ndarray
    file: str | None = None
    indicated: np.ndarray | None = None
    credibility: np.ndarray | None = None
    current: np.ndarray | None = None
    missing: MissingRow | None = None

    def __post_init__(self) -> None:
        prefix = _main_prologue(self)
        lower = _readonly(self.lower, "lower", prefix)
        upper = _readonly(self.upper, "upper", prefix)
        _check_bands(lower, upper, prefix, self.name, data_row)
        _set(self, "lower", lower)
        _set(self, "upper", upper)
        _factor_arrays(self, prefix, lower.size)
        _check_missing(self, prefix)

    def labels(self) -> list[str]:
        """The bands as `[lower, upper)` text."""
        return band_labels(self.lower, self.upper)


@dataclass(frozen=True, eq=False)
class CategoricalFactor(_ComparedByValue):
    """A categorical factor: `relativity[i]` for `levels[i]` (levels compared as strings).

    A book value that is no level takes the `fallback` level's relativity when one is named, else
    the `base` level's. `base` optionally names the level whose relativity is 1. Level order is
    the file's order, which is the order a monotone promise refers to. The arrays are as for
    `NumericFactor`, one value per level. No level may be `MISSING_LABEL`: a missing book value
    (None, NaN, empty text) takes `missing`, when given, as for `NumericFactor`.
    """

    name: str
    monotone: str
    levels: tuple[str, ...]
    relativity: np.ndarray
    exposure: np.ndarray
    file: str | None = None
    fallback: str | None = None
    base: str | None = None
    indicated: np.ndarray | None = None
    credibility: np.ndarray | None = None
    current: np.ndarray | None = None
    missing: MissingRow | None = None

    def __post_init__(self) -> None:
        prefix = _main_prologue(self)
        levels = _check_levels(self.levels, prefix, self.name, data_row)
        if MISSING_LABEL in levels:
            i = levels.index(MISSING_LABEL)
            raise TableError(
                f"{prefix}, {data_row(i)}: level {MISSING_LABEL!r} is the label of the missing row; "
                "write the missing row with an empty level",
                factor=self.name,
                where=data_row(i),
            )
        _set(self, "levels", levels)
        for key in ("fallback", "base"):
            value = getattr(self, key)
            if value is not None and value not in levels:
                raise TableError(
                    f"{prefix}: {key} level {value!r} is not one of the factor's levels", factor=self.name, where=key
                )
        _factor_arrays(self, prefix, len(levels))
        _check_missing(self, prefix)

    def labels(self) -> list[str]:
        """The levels."""
        return list(self.levels)


@dataclass(frozen=True, eq=False)
class Bands(_ComparedByValue):
    """The bands [lower[i], upper[i]) of one side of a two-way table (validated by its owner)."""

    lower: np.ndarray
    upper: np.ndarray

    def __post_init__(self) -> None:
        _set(self, "lower", _readonly(self.lower, "lower", "bands"))
        _set(self, "upper", _readonly(self.upper, "upper", "bands"))

    def __len__(self) -> int:
        return int(self.lower.size)

    def labels(self) -> list[str]:
        """The bands as `[lower, upper)` text."""
        return band_labels(self.lower, self.upper)


Cells = Bands | tuple[str, ...]


def cell_labels(cells: Cells) -> list[str]:
    """Text for each cell of one side of a two-way table: a band or a quoted level.

    Parameters
    ----------
    cells : Bands or tuple of str
        One side of an `InteractionFactor` (`a_cells` or `b_cells`).

    Returns
    -------
    list of str
        In cell order: `band_label` text for bands (`[25, 60)`), Python's repr for levels (`'Coast'`).
    """
    return cells.labels() if isinstance(cells, Bands) else [repr(level) for level in cells]


@dataclass(frozen=True, eq=False)
class InteractionFactor(_ComparedByValue):
    """A two-way table on main factors `of = (a, b)`: `relativity[i, j]` for a-cell i, b-cell j.

    Its name is `a__b` (build-up column `rel_a__b`). A numeric side has its own `Bands`, which may
    differ from the main factor's; a categorical side lists the main factor's levels (any order).
    The table is normalised so that the base row and base column are 1 (the audit checks this).
    `exposure`, `indicated` and `credibility` are optional matrices of the same shape.
    """

    name: str
    of: tuple[str, str]
    a_cells: Cells
    b_cells: Cells
    relativity: np.ndarray
    file: str | None = None
    exposure: np.ndarray | None = None
    indicated: np.ndarray | None = None
    credibility: np.ndarray | None = None
    current: np.ndarray | None = None

    def __post_init__(self) -> None:
        _check_name(self.name, "interaction")
        of = tuple(self.of)
        if len(of) != 2 or not all(isinstance(x, str) and x for x in of) or of[0] == of[1]:
            raise TableError(f"interaction {self.name!r}: of {of!r} must name two different factors", factor=self.name)
        _set(self, "of", of)
        if self.name != f"{of[0]}__{of[1]}":
            raise TableError(f"interaction {self.name!r}: name must be {of[0] + '__' + of[1]!r}", factor=self.name)
        _set(
            self,
            "file",
            check_file(
                f"factors/{self.name}.csv" if self.file is None else self.file, f"interaction {self.name!r}", self.name
            ),
        )
        prefix = f"{self.file}: interaction {self.name!r}"
        for side, attr in zip(of, ("a_cells", "b_cells")):
            cells = getattr(self, attr)
            side_prefix = f"{prefix}, side {side!r}"
            if isinstance(cells, Bands):
                _check_bands(cells.lower, cells.upper, side_prefix, self.name, lambda i: f"band {i + 1}")
            else:
                cells = _check_levels(cells, side_prefix, self.name, lambda i: f"level {i + 1}")
                _set(self, attr, cells)
        shape = (len(self.a_cells), len(self.b_cells))
        a_labels, b_labels = cell_labels(self.a_cells), cell_labels(self.b_cells)

        def cell(flat: int) -> str:
            i, j = divmod(flat, shape[1])
            return f"cell ({of[0]}={a_labels[i]}, {of[1]}={b_labels[j]})"

        relativity = _readonly(self.relativity, "relativity", prefix, ndim=2)
        if relativity.shape != shape:
            raise TableError(f"{prefix}: relativity has shape {relativity.shape}, expected {shape}", factor=self.name)
        _check_column(relativity, "relativity", prefix, self.name, cell)
        _set(self, "relativity", relativity)
        if self.exposure is not None:
            exposure = _readonly(self.exposure, "exposure", prefix, ndim=2)
            if exposure.shape != shape:
                raise TableError(f"{prefix}: exposure has shape {exposure.shape}, expected {shape}", factor=self.name)
            _check_column(exposure, "exposure", prefix, self.name, cell)
            _set(self, "exposure", exposure)
        _optional_columns(self, prefix, shape, cell)


Factor = NumericFactor | CategoricalFactor | InteractionFactor
MainFactor = NumericFactor | CategoricalFactor


def _number(value: Any, key: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise TableError(f"{TABLE_JSON}: key {key!r} must be a number, got {value!r}", where=key)
    try:
        number = float(value)
    except OverflowError:
        raise TableError(f"{TABLE_JSON}: key {key!r} is too large", where=key) from None
    if not math.isfinite(number):
        raise TableError(f"{TABLE_JSON}: key {key!r} must be finite, got {number!r}", where=key)
    return number


@dataclass(frozen=True)
class Loadings:
    """Loadings of docs/rating-table.md, all >= 0: lae_ratio (share of pure premium), fixed_expense (money per
    exposure unit), variable_expense and profit (shares of gross premium, sum < 1), minimum_premium
    (money per full term: the least gross premium of one exposure unit, earned with the exposure).

    term premium = (rate x (1 + lae_ratio) + fixed_expense) / ((1 - variable_expense) - profit) for
    the pure premium per exposure unit `rate`; gross premium = max(minimum_premium, term premium) x
    exposure, rounded to `Rounding.premium_decimals` (`rating_tables.premium_build_up`).
    """

    lae_ratio: float = 0.0
    fixed_expense: float = 0.0
    variable_expense: float = 0.0
    profit: float = 0.0
    minimum_premium: float = 0.0

    def __post_init__(self) -> None:
        for f in fields(self):
            value = _number(getattr(self, f.name), f"loadings.{f.name}")
            if value < 0:
                raise TableError(
                    f"{TABLE_JSON}: key 'loadings.{f.name}' must be >= 0, got {value!r}",
                    where=f"loadings.{f.name}",
                    amount=value,
                )
            _set(self, f.name, value)
        if self.variable_expense + self.profit >= 1:
            raise TableError(
                f"{TABLE_JSON}: keys 'loadings.variable_expense' + 'loadings.profit' = "
                f"{self.variable_expense + self.profit!r} must be < 1",
                where="loadings",
                amount=self.variable_expense + self.profit,
            )


@dataclass(frozen=True)
class Rounding:
    """Decimals kept for relativities and for the gross premium.

    Both are integers from 0 to 12. `relativity_decimals` says how the relativities were rounded
    when the table was made; it sets the audit's tolerance for a relativity of 1 (0.5 x
    10**-relativity_decimals), and the rater does not round relativities again.
    `premium_decimals` is the rounding of the gross premium: numpy's round, half to even on the
    value times 10**premium_decimals.
    """

    relativity_decimals: int = 3
    premium_decimals: int = 2

    def __post_init__(self) -> None:
        for f in fields(self):
            value = getattr(self, f.name)
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or not 0 <= value <= 12:
                raise TableError(
                    f"{TABLE_JSON}: key 'rounding.{f.name}' must be an integer from 0 to 12, got {value!r}",
                    where=f"rounding.{f.name}",
                )
            _set(self, f.name, int(value))


def _plain_json(value: Any, key: str) -> dict[str, Any]:
    if not isinstance(value, dict):
        raise TableError(f"{TABLE_JSON}: key {key!r} must be an object, got {type(value).__name__}", where=key)
    try:
        plain: dict[str, Any] = json.loads(json.dumps(value, allow_nan=False))
        return plain
    except (TypeError, ValueError) as e:
        raise TableError(f"{TABLE_JSON}: key {key!r} must hold plain JSON values: {e}", where=key) from None


def _text(value: Any, key: str) -> str:
    if not isinstance(value, str) or value == "":
        raise TableError(f"{TABLE_JSON}: key {key!r} must be a non-empty string, got {value!r}", where=key)
    return value


#: The stages of a table: made from a model (`indicated`) or with an actuary's selections on top (`selected`).
STAGES = ("indicated", "selected")
#: The book columns a table may remember: the names of the book it was made for.
BOOK_COLUMN_KEYS = ("exposure", "policy_id", "period")


def _book_columns(value: Any) -> dict[str, str]:
    columns = _plain_json(value, "book_columns")
    for key, name in columns.items():
        if key not in BOOK_COLUMN_KEYS:
            raise TableError(
                f"{TABLE_JSON}: key 'book_columns.{key}' is unknown; use {', '.join(BOOK_COLUMN_KEYS)}",
                where=f"book_columns.{key}",
            )
        _text(name, f"book_columns.{key}")
    return columns


def _selections(value: Any) -> tuple[dict[str, Any], ...]:
    if not isinstance(value, (list, tuple)):
        raise TableError(
            f"{TABLE_JSON}: key 'selections' must be a list, got {type(value).__name__}", where="selections"
        )
    out = []
    for i, entry in enumerate(value):
        record = _plain_json(entry, f"selections[{i}]")
        for key in ("factor", "rule", "reason"):
            if not isinstance(record.get(key), str):
                raise TableError(
                    f"{TABLE_JSON}: key 'selections[{i}].{key}' must be a string", where=f"selections[{i}].{key}"
                )
        out.append(record)
    return tuple(out)


@dataclass(frozen=True)
class RatingTable:
    """A filed rating table (docs/rating-table.md).

    `base_rate` is the pure premium, in money per exposure unit, of a risk at relativity 1 on
    every factor; `effective_date` is ISO text `YYYY-MM-DD` (a `datetime.date` is accepted and
    kept as its ISO text); `exposure_unit` names the unit of exposure, one full term being 1.0
    unit (premiumlab writes the spec's `table.exposure_unit`, by default `policy-year`);
    `factors` are multiplied in this order; `target` and `provenance` are plain JSON objects;
    `cautions` always include DRAFT_CAUTION (added first when missing). `stage` is `indicated`
    (relativities as a model indicated them) or `selected` (an actuary's selections applied);
    `book_columns` remembers the column names of the book the table was made for (`exposure`,
    `policy_id`, `period`; the rater's defaults); `selections` lists each selection applied, a
    plain JSON object with at least `factor`, `rule` and `reason` (not used when rating).
    """

    table_id: str
    effective_date: str
    base_rate: float
    exposure_unit: str
    factors: tuple[Factor, ...]
    loadings: Loadings
    rounding: Rounding = Rounding()
    target: dict[str, Any] = field(default_factory=dict)
    provenance: dict[str, Any] = field(default_factory=dict)
    cautions: tuple[str, ...] = ()
    stage: str = "indicated"
    book_columns: dict[str, str] = field(default_factory=dict)
    selections: tuple[dict[str, Any], ...] = ()

    def __post_init__(self) -> None:
        _text(self.table_id, "table_id")
        _text(self.exposure_unit, "exposure_unit")
        if self.stage not in STAGES:
            raise TableError(
                f"{TABLE_JSON}: key 'stage' is {self.stage!r}; use one of {', '.join(STAGES)}", where="stage"
            )
        _set(self, "book_columns", _book_columns(self.book_columns))
        _set(self, "selections", _selections(self.selections))
        given: object = self.effective_date  # a date object is accepted too
        try:
            day = (
                date(given.year, given.month, given.day)
                if isinstance(given, date)
                else date.fromisoformat(_text(given, "effective_date"))
            )
        except ValueError:
            raise TableError(
                f"{TABLE_JSON}: key 'effective_date' {self.effective_date!r} is not an ISO date (YYYY-MM-DD)",
                where="effective_date",
            ) from None
        _set(self, "effective_date", day.isoformat())
        base_rate = _number(self.base_rate, "base_rate")
        if base_rate <= 0:
            raise TableError(
                f"{TABLE_JSON}: key 'base_rate' must be > 0, got {base_rate!r}", where="base_rate", amount=base_rate
            )
        _set(self, "base_rate", base_rate)
        if not isinstance(self.loadings, Loadings) or not isinstance(self.rounding, Rounding):
            raise TableError(f"{TABLE_JSON}: loadings and rounding must be Loadings and Rounding objects")
        _set(self, "target", _plain_json(self.target, "target"))
        _set(self, "provenance", _plain_json(self.provenance, "provenance"))
        cautions = tuple(self.cautions)
        for i, caution in enumerate(cautions):
            _text(caution, f"cautions[{i}]")
        _set(self, "cautions", cautions if DRAFT_CAUTION in cautions else (DRAFT_CAUTION, *cautions))
        _set(self, "factors", tuple(self.factors))
        self._check_factors()

    def _check_factors(self) -> None:
        names: set[str] = set()
        files: set[str | None] = set()
        mains: dict[str, MainFactor] = {}
        for i, factor in enumerate(self.factors):
            if not isinstance(factor, (NumericFactor, CategoricalFactor, InteractionFactor)):
                raise TableError(f"{TABLE_JSON}: factors[{i}] is not a factor object", where=f"factors[{i}]")
            if factor.name in names:
                raise TableError(
                    f"{TABLE_JSON}: factors[{i}]: factor name {factor.name!r} repeats",
                    factor=factor.name,
                    where=f"factors[{i}]",
                )
            if factor.file in files:
                raise TableError(
                    f"{TABLE_JSON}: factors[{i}]: file {factor.file!r} is used twice",
                    check="file_path",
                    factor=factor.name,
                    where=f"factors[{i}]",
                )
            names.add(factor.name)
            files.add(factor.file)
            if isinstance(factor, InteractionFactor):
                _check_sides(factor, mains)
            else:
                mains[factor.name] = factor

    def factor(self, name: str) -> Factor:
        """The factor called `name` (KeyError if none)."""
        for factor in self.factors:
            if factor.name == name:
                return factor
        raise KeyError(name)

    @property
    def main_factors(self) -> tuple[MainFactor, ...]:
        """The numeric and categorical factors, in table order."""
        return tuple(f for f in self.factors if not isinstance(f, InteractionFactor))

    @property
    def interactions(self) -> tuple[InteractionFactor, ...]:
        """The two-way tables, in table order."""
        return tuple(f for f in self.factors if isinstance(f, InteractionFactor))


def _check_sides(factor: InteractionFactor, mains: dict[str, MainFactor]) -> None:
    prefix = f"{factor.file}: interaction {factor.name!r}"
    for side, cells in zip(factor.of, (factor.a_cells, factor.b_cells)):
        main = mains.get(side)
        if main is None:
            raise TableError(
                f"{prefix}: {side!r} must be a numeric or categorical factor listed before the interaction",
                factor=factor.name,
                where=side,
            )
        if isinstance(main, NumericFactor) != isinstance(cells, Bands):
            kind = "bands" if isinstance(main, NumericFactor) else "levels"
            raise TableError(
                f"{prefix}: side {side!r} must have {kind} like its main factor", factor=factor.name, where=side
            )
        if isinstance(main, CategoricalFactor) and not isinstance(cells, Bands) and set(cells) != set(main.levels):
            odd = sorted(set(cells) ^ set(main.levels))
            raise TableError(
                f"{prefix}: side {side!r} levels differ from the main factor's at {odd[0]!r}",
                factor=factor.name,
                where=side,
            )


def mapping_to_side(main: CategoricalFactor, cells: tuple[str, ...]) -> npt.NDArray[np.intp]:
    """For each main-factor level index, the index of the same level on a two-way table's side.

    Parameters
    ----------
    main : CategoricalFactor
        The main factor of the side.
    cells : tuple of str
        The side's levels (`a_cells` or `b_cells` of an `InteractionFactor`): the main factor's
        levels, possibly in another order.

    Returns
    -------
    numpy.ndarray of intp
        `out[i]` is the position in `cells` of `main.levels[i]`, one entry per main-factor level.

    Raises
    ------
    KeyError
        When a main-factor level is not in `cells` (never for a side of a valid `RatingTable`).
    """
    position = {level: j for j, level in enumerate(cells)}
    return np.array([position[level] for level in main.levels], dtype=np.intp)
