"""Reading a book: its files, their sha256, its columns, and its rows in chunks (CSV values as text).

Row numbers in messages are 0-based data rows (the header is not counted), the same index that
`predictions.parquet` calls `row`.
"""
from __future__ import annotations

import hashlib
from collections.abc import Iterator
from pathlib import Path

import pandas as pd

from premiumlab._core.errors import InputError

CHUNK_ROWS = 500_000


def book_files(path: Path) -> list[Path]:
    if not path.exists():
        raise InputError(f"{path}: book not found")
    if path.is_dir():
        parts = sorted(p for p in path.iterdir() if p.suffix.lower() in (".parquet", ".pq"))
        if not parts:
            raise InputError(f"{path}: is a directory with no .parquet parts; expected a CSV or Parquet book")
        return parts
    if path.suffix.lower() not in (".csv", ".parquet", ".pq"):
        raise InputError(f"{path}: unsupported book format '{path.suffix}'; use .csv or .parquet")
    return [path]


def book_sha256(path: str | Path) -> str:
    """sha256 over the bytes of the book file (or its Parquet parts in name order)."""
    h = hashlib.sha256()
    for part in book_files(Path(path)):
        with open(part, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                h.update(block)
    return h.hexdigest()


def unreadable_parquet(path: str | Path, error: Exception) -> InputError:
    """The error for a Parquet file pyarrow cannot read (it raises several types for damaged files)."""
    return InputError(f"{path}: not a readable Parquet file ({type(error).__name__}: {error})")


def read_columns(path: str | Path) -> list[str]:
    """The column names of a book, read from its header or Parquet schema."""
    files = book_files(Path(path))
    if files[0].suffix.lower() == ".csv":
        return list(_read_csv(files[0], nrows=0).columns)
    import pyarrow.parquet as pq
    try:
        return list(pq.read_schema(files[0]).names)
    except Exception as e:  # pyarrow raises several types for damaged files
        raise unreadable_parquet(files[0], e) from None


def _read_csv(path: Path, **kwargs) -> pd.DataFrame | Iterator[pd.DataFrame]:
    try:
        return pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8-sig", **kwargs)
    except UnicodeDecodeError as e:
        raise InputError(f"{path}: not UTF-8 text (byte {e.start})") from None
    except pd.errors.EmptyDataError:
        raise InputError(f"{path}: empty file, no header row") from None
    except pd.errors.ParserError as e:
        raise InputError(f"{path}: malformed CSV ({str(e).strip().splitlines()[-1]})") from None


def iter_book(path: str | Path, columns: list[str], chunk_rows: int = CHUNK_ROWS
              ) -> Iterator[tuple[int, pd.DataFrame]]:
    """Yield (first row index, chunk) over the book; CSV values come as strings."""
    offset = 0
    for part in book_files(Path(path)):
        if part.suffix.lower() == ".csv":
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
