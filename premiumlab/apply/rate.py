"""`rate`: price a book with a filed table into a CSV or Parquet file, or, on a Dask cluster, a
Parquet dataset (a folder of parts) part by part into a folder of parts."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from premiumlab.results import RateResult


def rate_book(
    table_dir: str | Path,
    book: str | Path,
    out: str | Path,
    exposure: str | None,
    annual: bool,
    force: bool = False,
    strict_levels: bool = False,
    cluster: str | None = None,
) -> RateResult:
    """Rate `book` with the table into `out` (CSV or Parquet by extension; a folder of Parquet
    parts with `cluster`), atomically.

    Parameters
    ----------
    table_dir : str or Path
        Rating table folder.
    book : str or Path
        Book to rate (.csv, .parquet or a folder of parts; with `cluster`, a folder of Parquet parts).
    out : str or Path
        Priced file to write; it gets the book's columns and `rating_tables.rate`'s. With
        `cluster`, the folder to write: one Parquet part per part of the book, of the same name.
    exposure : str or None
        The book's exposure column (years); ignored with `annual`. None: the column the table
        remembers, else `exposure`.
    annual : bool
        Price one full term per policy instead of the exposure's share of it.
    force : bool
        Replace an existing `out`.
    strict_levels : bool
        Refuse a level the table does not list even when the factor has a fallback or base level.
    cluster : str or None
        Rate the parts as tasks on a Dask cluster (premiumlab._core.cluster: local:N or a
        scheduler address); the workers read the parts and write the output's parts into the
        hidden temporary folder beside `out`, so they must share the file system with this
        process. None: rate here into one file.

    Returns
    -------
    RateResult
        The priced file (or folder), the rows priced, the per-factor counts of rows rated at a
        missing row or a fallback level (over the whole book, in book order), and the table's
        cautions.
    """
    import rating_tables
    from premiumlab._core.outputs import atomic_files, atomic_output
    from premiumlab.apply.impact import book_column

    table = rating_tables.load(table_dir)
    exposure = book_column(table, "exposure", exposure)
    exposure_column = None if annual else exposure
    out = Path(out)
    if cluster is not None:
        from premiumlab._core.cluster import dataset_parts, parse_cluster, tasks_on

        parse_cluster(cluster)
        parts = dataset_parts(Path(book), "rate")
        with (
            atomic_output(out, force=force, kind="dir", inputs=(book, table_dir)) as tmp,
            tasks_on(cluster) as runner,
        ):
            job = (table, exposure_column, annual, strict_levels)
            pieces = [(str(part), str(tmp / part.name)) for part in parts]
            rated = runner.map(_rate_part, job, pieces, lambda: None)
        counts: dict[str, rating_tables.LevelCounts] = {}
        for part in rated:
            for c in part.counts:
                counts[c.factor] = counts[c.factor].merged(c) if c.factor in counts else c
        order = [f.name for f in table.main_factors]
        return RateResult(
            priced=out,
            rows=sum(part.rows for part in rated),
            counts=tuple(counts[name] for name in order if name in counts),
            cautions=tuple(table.cautions),
        )
    with atomic_files([out], force=force, inputs=(book, table_dir)) as tmp:
        rated_file = rating_tables.rate_file(
            table,
            book,
            tmp / out.name,
            exposure_column=exposure_column,
            annual=annual,
            strict_levels=strict_levels,
        )
    return RateResult(priced=out, rows=rated_file.rows, counts=rated_file.counts, cautions=tuple(rated_file.cautions))


def _rate_part(job: tuple[Any, str | None, bool, bool], piece: tuple[str, str]) -> Any:
    """Rate one part of the book into one part of the output (here or on a Dask worker) with the
    reference rater `rating_tables.rate_file`; returns its `RatedFile`."""
    import rating_tables

    table, exposure_column, annual, strict_levels = job
    source, target = piece
    return rating_tables.rate_file(
        table, source, target, exposure_column=exposure_column, annual=annual, strict_levels=strict_levels
    )
