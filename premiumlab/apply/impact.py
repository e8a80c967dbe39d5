"""`impact`: the premium dislocation from the current to the proposed rates, and its outputs."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from premiumlab._core.errors import InputError
from premiumlab.results import ImpactResult
from rating_tables.errors import TableError

if TYPE_CHECKING:
    from rating_tables.table import RatingTable

COLUMN_PREFIX = "column:"
#: Columns of `premium_rows` holding the current and proposed premiums (names no factor can take).
CURRENT, PROPOSED = "\x00current", "\x00proposed"


def _read_frame(path: str | Path) -> pd.DataFrame:
    """A whole book as a DataFrame (CSV values as strings, so "01" stays "01"), for `impact`."""
    from premiumlab.book.reading import iter_book, read_columns

    columns = read_columns(path)
    parts = [chunk for _, chunk in iter_book(path, columns)]
    if not parts:
        raise InputError(f"{path}: the book has no rows")
    return pd.concat(parts, ignore_index=True)


def book_column(table: RatingTable, key: str, given: str | None) -> str | None:
    """The book column for `key` (`exposure`, `policy_id` or `period`): the one the user named,
    else the one the table remembers (`table.book_columns`), else `exposure` for the exposure.

    Parameters
    ----------
    table : RatingTable
        The table rating the book (for `impact`, the proposed one).
    key : str
        One of `rating_tables.table.BOOK_COLUMN_KEYS`.
    given : str or None
        The column named by an option (`--exposure`, `--policy-id`, `--period`), None if not.

    Returns
    -------
    str or None
        The column name; None for a policy id or period neither named nor remembered.
    """
    if given is not None:
        return given
    return table.book_columns.get(key, "exposure" if key == "exposure" else None)


def _column_premiums(source: str, frame: pd.DataFrame) -> np.ndarray:
    """Premiums per policy from the book column named by `source` (`column:NAME`), all > 0."""
    name = source[len(COLUMN_PREFIX) :]
    if name not in frame.columns:
        raise InputError(f"{source}: the book has no column '{name}'")
    values = pd.to_numeric(frame[name], errors="coerce").to_numpy(float)
    bad = np.flatnonzero(~(np.isfinite(values) & (values > 0)))
    if bad.size:
        raise InputError(
            f"column '{name}': {bad.size} rows with a missing or non-positive premium "
            f"(rows {', '.join(map(str, bad[:5]))})"
        )
    return values


def _gross_premiums(table: RatingTable, frame: pd.DataFrame, exposure: str | None, annual: bool) -> np.ndarray:
    """Gross premiums per policy rated with a loaded table."""
    import rating_tables

    return rating_tables.rate(table, frame, None if annual else exposure, annual=annual)["gross_premium"].to_numpy()


@dataclass(frozen=True)
class RatedSides:
    """What every part of the book is rated with: the loaded tables and the book's columns."""

    proposed: RatingTable
    current: RatingTable | None  # None: the current premium is the book column `current_column`
    current_column: str | None
    exposure: str | None
    annual: bool
    id_columns: tuple[str, ...]

    @property
    def tables(self) -> list[RatingTable]:
        """The tables, the proposed first (`_impact_groups` breaks the change down by their factors)."""
        return [self.proposed] if self.current is None else [self.proposed, self.current]


def dislocation(
    current: str,
    proposed: str,
    book: str | Path,
    exposure: str | None,
    annual: bool,
    cap: float | None,
    thresholds: tuple[float, ...],
    policy_id: str | None = None,
    period: str | None = None,
    cluster: str | None = None,
) -> ImpactResult:
    """Per-policy change from `current` to `proposed` premiums (tables or `column:NAME`); each
    table is loaded once.

    Parameters
    ----------
    current : str
        Current table folder, or `column:NAME` for a premium column of the book.
    proposed : str
        Proposed table folder.
    book : str or Path
        Book of policies.
    exposure : str or None
        The book's exposure column (years); ignored with `annual`. None: the proposed table's
        remembered column (`book_column`).
    annual : bool
        Compare one full term per policy: both sides rated by tables for exposure 1. Refused with
        a current premium column, which holds each row's premium for its own period.
    cap : float or None
        Cap each policy's change at +-cap (0.15 = 15 %).
    thresholds : tuple of float
        Increases whose shares are counted (0.1 = 10 %).
    policy_id : str or None
        The book's policy id column, which identifies the rows listed (the largest increases) and
        counts the policies. None: the proposed table's remembered column, if any.
    period : str or None
        The book's period column, shown beside the policy id. None: the table's, if any.
    cluster : str or None
        Rate the parts of a Parquet dataset on a Dask cluster (`premiumlab._core.cluster`: local:N
        or a scheduler address): each worker reads a part and returns its premiums (current and
        proposed), the factor columns of the breakdown and the id columns (`premium_rows`); this
        process joins them in book order and computes the summary on them exactly as without a
        cluster. None: read and rate the whole book here.

    Returns
    -------
    ImpactResult
        `rating_tables.impact`'s summary with the proposed table's cautions.
    """
    import rating_tables

    if proposed.startswith(COLUMN_PREFIX):
        raise InputError(f"--proposed {proposed}: the proposed premium must come from a table folder")
    if annual and current.startswith(COLUMN_PREFIX):
        raise InputError(
            f"--annual with --current {current}: a premium column holds each row's premium for its own "
            "period and cannot be put on a full-term basis by the rater; compare two tables with --annual, "
            "or drop --annual"
        )
    if cluster is not None:
        from premiumlab._core.cluster import dataset_parts, parse_cluster

        parse_cluster(cluster)
        parts = dataset_parts(Path(book), "impact")
    table = rating_tables.load(proposed)
    id_columns = tuple(
        c for c in (book_column(table, k, v) for k, v in (("policy_id", policy_id), ("period", period))) if c
    )
    by_column = current.startswith(COLUMN_PREFIX)
    sides = RatedSides(
        proposed=table,
        current=None if by_column else rating_tables.load(current),
        current_column=current[len(COLUMN_PREFIX) :] if by_column else None,
        exposure=book_column(table, "exposure", exposure),
        annual=annual,
        id_columns=id_columns,
    )
    if cluster is None:
        premiums = premium_rows(sides, _read_frame(book), str(book))
    else:
        from premiumlab._core.cluster import tasks_on

        with tasks_on(cluster) as runner:
            pieces = runner.map(_premiums_of_part, sides, [str(p) for p in parts], lambda: None)
        premiums = pd.concat(pieces, ignore_index=True)
        if premiums.empty:
            raise InputError(f"{book}: the book has no rows")
    return _summary(sides, premiums, cap, thresholds)


def premium_rows(sides: RatedSides, frame: pd.DataFrame, where: str) -> pd.DataFrame:
    """The rows the dislocation is summarised from, for a whole book or one part of it.

    Parameters
    ----------
    sides : RatedSides
        The tables (or current premium column) and the book's exposure and id columns.
    frame : pandas.DataFrame
        Book rows (a whole book or one part), as `_read_frame` reads them.
    where : str
        The book or part, named in the message of a missing id column.

    Returns
    -------
    pandas.DataFrame
        One row per book row: the factor columns of the breakdown (`_impact_groups`), the id
        columns, then `CURRENT` and `PROPOSED`, the gross premiums (money) rated by the tables
        (or the current premium column).
    """
    absent = [c for c in sides.id_columns if c not in frame.columns]
    if absent:
        raise InputError(f"{where}: the book has no column '{absent[0]}' (the policy id or period column)")
    if sides.current is None:
        now = _column_premiums(COLUMN_PREFIX + str(sides.current_column), frame)
    else:
        now = _gross_premiums(sides.current, frame, sides.exposure, sides.annual)
    rows = pd.concat(
        [_impact_groups(frame, sides.tables), frame[list(sides.id_columns)].reset_index(drop=True)], axis=1
    )
    rows[CURRENT] = now
    rows[PROPOSED] = _gross_premiums(sides.proposed, frame, sides.exposure, sides.annual)
    return rows


def _premiums_of_part(sides: RatedSides, part: str) -> pd.DataFrame:
    """`premium_rows` of one part of a Parquet dataset (here or on a Dask worker); a row the part
    refuses is named by the part and its 0-based row in it."""
    try:
        return premium_rows(sides, _read_frame(part), part)
    except (InputError, TableError) as e:  # its rows are numbered from the part's first row
        raise InputError(str(e) if str(e).startswith(part) else f"{part}: {e}") from None


def _summary(
    sides: RatedSides, premiums: pd.DataFrame, cap: float | None, thresholds: tuple[float, ...]
) -> ImpactResult:
    """`rating_tables.impact` of the joined premium rows, with the proposed table's cautions."""
    import rating_tables

    groups = list(dict.fromkeys(f.name for table in sides.tables for f in table.main_factors))
    result = rating_tables.impact(
        premiums[CURRENT].to_numpy(),
        premiums[PROPOSED].to_numpy(),
        premiums,
        groups,
        thresholds=thresholds,
        cap=cap,
        id_columns=sides.id_columns,
    )
    return ImpactResult(
        rows=result["rows"],
        policies=result["policies"],
        total_current=result["total_current"],
        total_proposed=result["total_proposed"],
        overall_change=result["overall_change"],
        bands=tuple(result["bands"]),
        above_thresholds=tuple(result["above_thresholds"]),
        by_factor=result["by_factor"],
        largest_increases=tuple(result["largest_increases"]),
        capping=result["capping"],
        cautions=tuple(sides.proposed.cautions),
    )


def _impact_groups(frame: pd.DataFrame, tables: list[RatingTable]) -> pd.DataFrame:
    """The factor columns the impact is broken down by: every main factor of the tables (the
    proposed first, so a factor the proposed table drops is still shown), a numeric factor cut into
    the bands of the first table that has it, a categorical factor as it is."""
    from rating_tables.table import NumericFactor, band_index

    columns = {}
    for table in tables:
        for f in table.main_factors:
            if f.name in columns:
                continue
            if isinstance(f, NumericFactor):
                values = pd.to_numeric(frame[f.name], errors="coerce").to_numpy(float)
                columns[f.name] = pd.Categorical.from_codes(
                    band_index(f.lower, values), categories=f.labels(), ordered=True
                )
            else:
                columns[f.name] = frame[f.name].to_numpy()
    return pd.DataFrame(columns)


def write_impact(
    result: ImpactResult, out: Path | None, figure: Path | None, force: bool, inputs: tuple[str | Path, ...]
) -> None:
    """Write the impact summary as JSON to `out` and its figure (`figures.plot_impact`) to `figure`,
    both or neither.

    Parameters
    ----------
    result : ImpactResult
        The summary `dislocation` returned.
    out : Path or None
        JSON file for `result.to_dict()` (None: not written).
    figure : Path or None
        PNG file for the figure (None: not drawn); its name must differ from `out`'s.
    force : bool
        Replace existing files at `out` and `figure`.
    inputs : tuple of str or Path
        The command's inputs (tables and book), which neither output may overwrite.

    Raises
    ------
    InputError
        When `figure` is not a .png file, or `out` and `figure` share a name.
    """
    from premiumlab._core.jsonio import write_json
    from premiumlab._core.outputs import atomic_files
    from premiumlab.evaluation.figures import plot_impact

    targets = [t for t in (out, figure) if t is not None]
    if not targets:
        return
    if figure is not None and figure.suffix.lower() != ".png":
        raise InputError(f"{figure}: the figure must be a .png file")
    if out is not None and figure is not None and out.name == figure.name:
        raise InputError(f"{figure}: give the figure and the JSON summary different names")
    with atomic_files(targets, force=force, inputs=inputs) as tmp:
        if out is not None:
            write_json(tmp / out.name, result.to_dict())
        if figure is not None:
            plot_impact(result.to_dict(), tmp / figure.name)


def parse_thresholds(thresholds: str | Sequence[float]) -> tuple[float, ...]:
    """'0.05,0.1' or (0.05, 0.1) -> (0.05, 0.1): the increases whose shares `impact` reports; at
    least one, every one finite.

    Parameters
    ----------
    thresholds : str or sequence of float
        Premium increases as shares of the current premium (0.1 = 10 %): numbers separated by
        commas (blank entries skipped), or the numbers themselves.

    Returns
    -------
    tuple of float
        The thresholds in the order given.

    Raises
    ------
    InputError
        When an entry is not a number, no entry is given, or one is not finite.
    """
    try:
        values = tuple(
            float(t)
            for t in (thresholds.split(",") if isinstance(thresholds, str) else thresholds)
            if not isinstance(t, str) or t.strip()
        )
    except (TypeError, ValueError):
        raise InputError(f"--thresholds: '{thresholds}' must be numbers separated by commas, e.g. 0.05,0.10") from None
    if not values or not all(np.isfinite(values)):
        raise InputError(f"--thresholds: '{thresholds}' must name at least one finite number")
    return values
