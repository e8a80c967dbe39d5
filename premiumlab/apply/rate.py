"""`rate`: price a book with a filed table into a CSV or Parquet file."""

from __future__ import annotations

from pathlib import Path

from premiumlab.results import RateResult


def rate_book(
    table_dir: str | Path,
    book: str | Path,
    out: str | Path,
    exposure: str | None,
    annual: bool,
    force: bool = False,
    strict_levels: bool = False,
) -> RateResult:
    """Rate `book` with the table into `out` (CSV or Parquet by extension), atomically.

    Parameters
    ----------
    table_dir : str or Path
        Rating table folder.
    book : str or Path
        Book to rate (.csv, .parquet or a folder of parts).
    out : str or Path
        Priced file to write; it gets the book's columns and `rating_tables.rate`'s.
    exposure : str or None
        The book's exposure column (years); ignored with `annual`. None: the column the table
        remembers, else `exposure`.
    annual : bool
        Price one full term per policy instead of the exposure's share of it.
    force : bool
        Replace an existing `out`.
    strict_levels : bool
        Refuse a level the table does not list even when the factor has a fallback or base level.

    Returns
    -------
    RateResult
        The priced file, the rows priced, the per-factor counts of rows rated at a missing row or
        a fallback level, and the table's cautions.
    """
    import rating_tables
    from premiumlab._core.outputs import atomic_files
    from premiumlab.apply.impact import book_column

    table = rating_tables.load(table_dir)
    exposure = book_column(table, "exposure", exposure)
    out = Path(out)
    with atomic_files([out], force=force, inputs=(book, table_dir)) as tmp:
        rated = rating_tables.rate_file(
            table,
            book,
            tmp / out.name,
            exposure_column=None if annual else exposure,
            annual=annual,
            strict_levels=strict_levels,
        )
    return RateResult(priced=out, rows=rated.rows, counts=rated.counts, cautions=tuple(rated.cautions))
