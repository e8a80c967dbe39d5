"""Which files make up a book of policies: the one set of rules every reader of books follows.

A book is one `.csv` file, one `.parquet` or `.pq` file, or a folder of parts of one kind, read in
name order. In a folder, the parts are the files whose suffix is one of those; entries whose name
starts with `.` or `_` are skipped (hidden files, `._` resource forks, `_SUCCESS` and `_metadata`
markers), as are sub-folders and files with other suffixes. A folder holding both CSV and Parquet
parts is refused: its rows would be read under two sets of typing rules. A part whose header names
a column twice, or (Parquet) holds a nested column (struct, list, map), is refused: readers would
silently take one copy, rename the other or fail deep inside.
"""

from __future__ import annotations

import csv
from pathlib import Path
from typing import Any

from rating_tables.errors import TableError

#: The file kind of each accepted suffix (compared in lower case).
KIND_OF_SUFFIX = {".csv": "csv", ".parquet": "parquet", ".pq": "parquet"}
#: Entries of a book folder whose name starts with one of these are not parts.
SKIPPED_PREFIXES = (".", "_")


def _file_kind(path: Path) -> str | None:
    """`csv` or `parquet` from the suffix of `path`, or None for any other suffix."""
    return KIND_OF_SUFFIX.get(path.suffix.lower())


def output_kind(path: Path) -> str:
    """The kind of book file to write at `path`; TableError naming `path` for another suffix.

    Parameters
    ----------
    path : pathlib.Path
        The output file; only its suffix is read, in any case.

    Returns
    -------
    str
        `csv` for `.csv`, `parquet` for `.parquet` or `.pq`.
    """
    kind = _file_kind(path)
    if kind is None:
        raise TableError(f"{path}: the output must end in .csv or .parquet (or .pq, also Parquet)", where=str(path))
    return kind


def book_parts(path: Path) -> tuple[str, list[Path]]:
    """(kind, parts in name order) of the book at `path`: the file itself, or a folder's parts.

    Parameters
    ----------
    path : pathlib.Path
        A book file or a folder of parts (rules in the module docstring).

    Returns
    -------
    tuple of (str, list of pathlib.Path)
        The kind (`csv` or `parquet`) and the part files, at least one, in name order.

    Raises
    ------
    TableError
        Naming `path` when it does not exist, has an unsupported suffix, is a folder without
        parts, or is a folder mixing CSV and Parquet parts.
    """
    if not path.exists():
        raise TableError(f"{path}: the book does not exist", where=str(path))
    if not path.is_dir():
        kind = _file_kind(path)
        if kind is None:
            raise TableError(
                f"{path}: unsupported book format '{path.suffix}'; a book is a .csv, .parquet "
                "or .pq file or a folder of such parts",
                where=str(path),
            )
        return kind, [path]
    parts = sorted(
        p
        for p in path.iterdir()
        if not p.name.startswith(SKIPPED_PREFIXES) and _file_kind(p) is not None and p.is_file()
    )
    if not parts:
        raise TableError(f"{path}: is a directory with no .csv, .parquet or .pq parts", where=str(path))
    first_of_kind: dict[str, Path] = {}
    for part in parts:
        first_of_kind.setdefault(KIND_OF_SUFFIX[part.suffix.lower()], part)
    if len(first_of_kind) > 1:
        raise TableError(
            f"{path}: the folder mixes CSV and Parquet parts ({first_of_kind['csv'].name} and "
            f"{first_of_kind['parquet'].name}); a book folder holds parts of one kind",
            where=str(path),
        )
    return next(iter(first_of_kind)), parts


def csv_header(part: Path) -> list[str]:
    """The names of a CSV part's header row as written (pandas renames a repeated `x` to `x.1`).

    Parameters
    ----------
    part : pathlib.Path
        A CSV file, UTF-8 with or without a byte-order mark.

    Returns
    -------
    list of str
        The header's fields, unquoted; empty for an empty file.
    """
    with open(part, encoding="utf-8-sig", newline="") as fh:
        return next(csv.reader(fh), [])


def check_columns(part: Path, names: list[str]) -> None:
    """Refuse a part whose header names one column more than once.

    Parameters
    ----------
    part : pathlib.Path
        The part, for the message.
    names : list of str
        Its column names as written (`csv_header`, or the Parquet schema's names).

    Raises
    ------
    TableError
        Naming the part, the column and its two positions (1-based).
    """
    first: dict[str, int] = {}
    for i, name in enumerate(names, start=1):
        if name in first:
            raise TableError(
                f"{part}: column '{name}' appears twice in the header (columns {first[name]} and {i}); "
                "give each column its own name",
                where=str(part),
            )
        first[name] = i


def check_flat(part: Path, schema: Any) -> None:
    """Refuse a Parquet part with a repeated column name or a nested column (struct, list, map).

    Parameters
    ----------
    part : pathlib.Path
        The part, for the message.
    schema : pyarrow.Schema
        Its schema (`pyarrow.parquet.read_schema`).

    Raises
    ------
    TableError
        Naming the part and the column.
    """
    check_columns(part, list(schema.names))
    for field in schema:
        if field.type.num_fields > 0:  # struct, list, map, union: a value made of values
            raise TableError(
                f"{part}: column '{field.name}' is nested ({field.type}); a book holds flat columns of numbers or text",
                where=str(part),
            )
