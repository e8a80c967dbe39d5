"""Reading a book: its files, their sha256, its columns, and its rows in chunks (CSV values as text).

Row numbers in messages are 0-based data rows (the header is not counted), the same index that
`predictions.parquet` calls `row`.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterator
from pathlib import Path
from typing import cast

import pandas as pd

import rating_tables.books
from premiumlab._core.errors import InputError
from rating_tables.errors import TableError

CHUNK_ROWS = 500_000


def book_parts(path: Path) -> tuple[str, list[Path]]:
    """(kind, files in name order) of the book at `path`: `csv` or `parquet`, and the book file itself
    or the parts of a book folder, by the one set of rules in `rating_tables.books` (`.csv`,
    `.parquet` and `.pq`; a folder's parts of one kind, hidden entries skipped).

    Parameters
    ----------
    path : Path
        A book file or a folder of book parts.

    Returns
    -------
    tuple of (str, list of Path)
        The kind, "csv" or "parquet", and the files to read in order.

    Raises
    ------
    InputError
        When `path` is not a book by those rules (the `TableError` message, unchanged).
    """
    try:
        return rating_tables.books.book_parts(path)
    except TableError as e:
        raise InputError(str(e)) from None


def book_sha256(path: str | Path) -> str:
    """sha256 over the bytes of the book file (or its parts in name order).

    Parameters
    ----------
    path : str or Path
        A book file or a folder of book parts (`book_parts`).

    Returns
    -------
    str
        The hex digest of the bytes of every file, one after the other.
    """
    h = hashlib.sha256()
    for part in book_parts(Path(path))[1]:
        with open(part, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                h.update(block)
    return h.hexdigest()


def unreadable_parquet(path: str | Path, error: Exception) -> InputError:
    """The error for a Parquet file pyarrow cannot read (it raises several types for damaged files).

    Parameters
    ----------
    path : str or Path
        The Parquet file.
    error : Exception
        What pyarrow raised; its type and message go into the line.

    Returns
    -------
    InputError
        The error to raise, one line naming the file.
    """
    return InputError(f"{path}: not a readable Parquet file ({type(error).__name__}: {error})")


def read_columns(path: str | Path) -> list[str]:
    """The column names of a book, read from the header or Parquet schema of its first file.

    Parameters
    ----------
    path : str or Path
        A book file or a folder of book parts (`book_parts`).

    Returns
    -------
    list of str
        The column names in file order.
    """
    kind, files = book_parts(Path(path))
    return _part_columns(kind, files[0])


def _part_columns(kind: str, part: Path) -> list[str]:
    """The column names of one part, refused when one repeats or (Parquet) a column is nested
    (`rating_tables.books.check_columns`, `check_flat`)."""
    if kind == "csv":
        names = list(cast(pd.DataFrame, _read_csv(part, nrows=0)).columns)  # no chunksize: one frame
        try:
            rating_tables.books.check_columns(part, rating_tables.books.csv_header(part))
        except TableError as e:
            raise InputError(str(e)) from None
        return names
    import pyarrow.parquet as pq

    try:
        schema = pq.read_schema(part)
    except Exception as e:  # pyarrow raises several types for damaged files
        raise unreadable_parquet(part, e) from None
    try:
        rating_tables.books.check_flat(part, schema)
    except TableError as e:
        raise InputError(str(e)) from None
    return list(schema.names)


def _read_csv(path: Path, **kwargs) -> pd.DataFrame | Iterator[pd.DataFrame]:
    try:
        return pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8-sig", **kwargs)
    except UnicodeDecodeError as e:
        raise InputError(f"{path}: not UTF-8 text (byte {e.start})") from None
    except pd.errors.EmptyDataError:
        raise InputError(f"{path}: empty file, no header row") from None
    except pd.errors.ParserError as e:
        raise InputError(f"{path}: malformed CSV ({str(e).strip().splitlines()[-1]})") from None


def iter_book(path: str | Path, columns: list[str], chunk_rows: int = CHUNK_ROWS) -> Iterator[tuple[int, pd.DataFrame]]:
    """Yield (first row index, chunk) over the book; CSV values come as strings. A file (or part of
    a book folder) that lacks one of `columns` is refused by name.

    Parameters
    ----------
    path : str or Path
        A book file or a folder of book parts (`book_parts`).
    columns : list of str
        The columns to keep, in this order.
    chunk_rows : int
        Most rows in a chunk (CHUNK_ROWS by default); a chunk never spans two files.

    Yields
    ------
    tuple of (int, pandas.DataFrame)
        The 0-based book row of the chunk's first row, and the chunk with `columns` only and a
        fresh 0-based index.

    Raises
    ------
    InputError
        For a missing column, a file that is not UTF-8 or malformed CSV, or an unreadable Parquet
        file.
    """
    offset = 0
    kind, parts = book_parts(Path(path))
    for part in parts:
        absent = [c for c in columns if c not in _part_columns(kind, part)]
        if absent:
            raise InputError(f"{part}: missing column '{absent[0]}'")
        if kind == "csv":
            # every column is read: with `usecols` pandas drops the extra fields of a ragged row silently
            reader = _read_csv(part, chunksize=chunk_rows)
            try:
                for chunk in reader:
                    yield offset, chunk[columns].reset_index(drop=True)
                    offset += len(chunk)
            except UnicodeDecodeError as e:
                raise InputError(f"{part}: not UTF-8 text (byte {e.start})") from None
            except pd.errors.ParserError as e:
                raise InputError(f"{part}: malformed CSV ({str(e).strip().splitlines()[-1]})") from None
        else:
            import pyarrow.parquet as pq

            try:
                pf = pq.ParquetFile(part, pre_buffer=False)  # pre-buffering would keep every row group read
                for batch in pf.iter_batches(batch_size=chunk_rows, columns=columns):
                    chunk = batch.to_pandas()
                    yield offset, chunk
                    offset += len(chunk)
            except InputError:
                raise
            except Exception as e:
                raise unreadable_parquet(part, e) from None
