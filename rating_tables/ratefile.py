"""Rating a book file in row batches so that memory stays flat: CSV or Parquet in and out.

The input is a book as `rating_tables.books` defines it (a `.csv`, `.parquet` or `.pq` file or a
folder of parts of one kind, read in name order); the output format follows `out_path`'s extension.
The rated file is the same, byte for byte, whatever `batch_rows` is: CSV columns are read as text
and passed through unchanged; Parquet columns keep their types (dictionary-encoded columns are
written decoded), and the output's Parquet row groups hold a fixed `row_group_rows` rows. A
Parquet output carries the table's cautions as JSON under the schema metadata key
`premiumlab.cautions`; for CSV the caller prints the returned cautions. The counts of rows rated
at a missing row or a fallback level (`RatedFile.counts`) do not depend on `batch_rows` either.
"""

from __future__ import annotations

import json
import os
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.csv as pa_csv
import pyarrow.parquet as pq

from rating_tables.books import book_parts, check_columns, check_flat, csv_header, output_kind
from rating_tables.errors import TableError
from rating_tables.rate import AT_MINIMUM, LevelCounts, added_columns, check_no_clash, rating_columns
from rating_tables.table import RatingTable

CAUTIONS_KEY = b"premiumlab.cautions"
ROW_GROUP_ROWS = 262_144


@dataclass(frozen=True)
class RatedFile:
    """What `rate_file` did: the rows rated, the table's cautions, and the counts of the factors
    where some rows were rated at the missing row or at the fallback (or base) level, in table
    order (factors without such rows left out)."""

    rows: int
    cautions: tuple[str, ...]
    counts: tuple[LevelCounts, ...]


def rate_file(
    table: RatingTable,
    in_path: str | os.PathLike[str],
    out_path: str | os.PathLike[str],
    exposure_column: str | None = None,
    annual: bool = False,
    batch_rows: int = 500_000,
    *,
    row_group_rows: int = ROW_GROUP_ROWS,
    strict_levels: bool = False,
) -> RatedFile:
    """Rate the book at `in_path` into `out_path` (columns as `rate` adds them); returns the rows
    rated, the cautions and the counts of rows rated at a missing row or a fallback level.

    Errors name the input and the 0-based row counted over the whole book; a failed call removes
    what it had written of the output. A book with no rows is refused.

    The output holds the book's columns in order, then the columns `rate` adds, as float64. CSV
    text columns are passed through unchanged; Parquet columns keep their types (dictionary
    columns are written decoded).

    Parameters
    ----------
    table : RatingTable
        The table to rate with.
    in_path : str or os.PathLike
        The book: a `.csv`, `.parquet` or `.pq` file, or a folder of parts of one kind read in
        name order (`rating_tables.books.book_parts`). CSV columns are read as text: an empty
        field is a missing value (the factor's missing row applies; a missing exposure is
        refused), and so is `nan` where a number is read; no other text is (`NA` is a level, or
        not a number). Parquet columns keep
        their types and are read as `rate` reads a DataFrame's columns (a null, a NaN or an
        empty text is a missing value).
    out_path : str or os.PathLike
        The rated book to write, CSV for `.csv`, Parquet for `.parquet` or `.pq`; it must not be
        the input file. A file already there is replaced.
    exposure_column : str or None
        The column of earned exposure, in the table's exposure unit; needed unless `annual`.
    annual : bool
        Rate every row for one full term (exposure 1.0).
    batch_rows : int
        Rows read and rated at a time, >= 1; the output does not depend on it.
    row_group_rows : int
        Rows per row group of a Parquet output (the last may hold fewer), >= 1; not used for CSV.
    strict_levels : bool
        Refuse a categorical value that is no level even when the factor has a fallback or base.

    Returns
    -------
    RatedFile
        `rows`, the rows rated; `cautions`, the table's, for the caller to show with a CSV
        output (a Parquet output also carries them as a JSON list under the schema metadata key
        `premiumlab.cautions`); `counts`, a `LevelCounts` for each factor with rows rated at its
        missing row or at its fallback (or base) level, in table order, whatever `batch_rows`.

    Raises
    ------
    TableError
        For `batch_rows` or `row_group_rows` not a positive integer, an output suffix other than
        those above, or an output that is the input; then, with the input path in front of the
        message, for a book that cannot be read, parts whose columns or types differ, a missing
        factor or exposure column, a column the rater would add, a bad row (as
        `rating_tables.rate.rating_columns` says, the row counted over the whole book) or no rows.
        After an error raised past the checks of the arguments, nothing is left at `out_path`,
        not even a file that was there before the call.
    """
    source_path, target = Path(in_path), Path(out_path)
    for name, value in (("batch_rows", batch_rows), ("row_group_rows", row_group_rows)):
        if isinstance(value, bool) or not isinstance(value, int) or value < 1:
            raise TableError(f"{name}: must be a positive integer, got {value!r}", where=name)
    out_kind = output_kind(target)
    if target.exists() and os.path.realpath(target) == os.path.realpath(source_path):
        raise TableError(f"{target}: the output would overwrite the input book", where=str(target))
    try:
        source = _Source(source_path, batch_rows)
        needed = [f.name for f in table.main_factors]
        if not annual and exposure_column is not None:
            needed.append(exposure_column)
        absent = [c for c in dict.fromkeys(needed) if c not in source.schema.names]
        if absent:
            raise TableError(f"the book has no column {absent[0]!r}", check="book", where=absent[0])
        check_no_clash(source.schema.names, added_columns(table), "book")
        schema = _output_schema(source.schema, table)
        rows = 0
        counts = {f.name: LevelCounts(f.name) for f in table.main_factors}
        with (
            _ParquetSink(target, schema, row_group_rows) if out_kind == "parquet" else _CsvSink(target, schema)
        ) as sink:
            for chunk in source.tables():
                frame = chunk.select(list(dict.fromkeys(needed))).to_pandas()
                added, chunk_counts = rating_columns(
                    table, frame, exposure_column, annual, row_offset=rows, strict_levels=strict_levels
                )
                counts = {name: counts[name].merged(chunk_counts[name]) for name in counts}
                out = source.plain(chunk)
                for name, values in added.items():
                    out = out.append_column(name, pa.array(values, type=schema.field(name).type))
                sink.write(out.replace_schema_metadata(schema.metadata))
                rows += chunk.num_rows
        if rows == 0:
            raise TableError("the book has no rows", check="book")
    except TableError as e:
        target.unlink(missing_ok=True)  # a failed call leaves no partly written output
        raise e.prefixed(str(source_path)) from None
    return RatedFile(rows, table.cautions, tuple(c for c in counts.values() if c))


def _output_schema(schema: pa.Schema, table: RatingTable) -> pa.Schema:
    fields = [
        *schema,
        *(pa.field(name, pa.bool_() if name == AT_MINIMUM else pa.float64()) for name in added_columns(table)),
    ]
    return pa.schema(fields, metadata={CAUTIONS_KEY: json.dumps(list(table.cautions)).encode("utf-8")})


def _plain_type(field: pa.Field) -> pa.Field:
    return field.with_type(field.type.value_type) if pa.types.is_dictionary(field.type) else field


class _Source:
    """The parts of a book and their common schema (dictionary columns decoded, no metadata)."""

    def __init__(self, path: Path, batch_rows: int) -> None:
        self.batch_rows = batch_rows
        self.kind, self.parts = book_parts(path)
        schemas = [self._schema(p) for p in self.parts]
        for part, schema in zip(self.parts, schemas):
            if not schema.equals(schemas[0]):
                raise TableError(f"{part}: its columns or types differ from {self.parts[0].name}'s", where=str(part))
        self.schema = schemas[0]

    def _schema(self, part: Path) -> pa.Schema:
        try:
            if self.kind == "csv":
                names = pd.read_csv(part, nrows=0, dtype=str).columns
                check_columns(part, csv_header(part))
                return pa.schema([pa.field(str(n), pa.string()) for n in names])
            schema = pq.read_schema(part)
            check_flat(part, schema)
            return pa.schema([_plain_type(f) for f in schema])
        except TableError:
            raise
        except (OSError, ValueError, pd.errors.ParserError) as e:
            raise TableError(f"{part}: cannot be read: {e}", where=str(part)) from None

    def tables(self) -> Iterator[pa.Table]:
        """Batches of at most `batch_rows` rows, raw (dictionary columns as stored)."""
        for part in self.parts:
            try:
                if self.kind == "csv":
                    reader = pd.read_csv(
                        part, dtype=str, keep_default_na=False, na_filter=False, chunksize=self.batch_rows
                    )
                    for chunk in reader:
                        yield pa.Table.from_pandas(chunk, schema=self.schema, preserve_index=False)
                else:
                    # without pre-buffering: with it the reader keeps what it read, growing with the book
                    for batch in pq.ParquetFile(part, pre_buffer=False).iter_batches(batch_size=self.batch_rows):
                        yield pa.Table.from_batches([batch])
            except (OSError, ValueError, pd.errors.ParserError) as e:
                raise TableError(f"{part}: cannot be read: {e}", where=str(part)) from None

    def plain(self, chunk: pa.Table) -> pa.Table:
        """The batch with dictionary columns decoded and no schema metadata."""
        columns = [
            col.cast(field.type) if not col.type.equals(field.type) else col
            for col, field in zip(chunk.columns, self.schema)
        ]
        return pa.Table.from_arrays(columns, schema=self.schema)


class _ParquetSink:
    """Writes row groups of exactly `row_group_rows` rows (the last may be shorter)."""

    def __init__(self, path: Path, schema: pa.Schema, row_group_rows: int) -> None:
        self.writer = pq.ParquetWriter(path, schema)
        self.row_group_rows = row_group_rows
        self.pending: list[pa.Table] = []
        self.rows = 0

    def write(self, table: pa.Table) -> None:
        self.pending.append(table)
        self.rows += table.num_rows
        while self.rows >= self.row_group_rows:
            self._flush(self.row_group_rows)

    def _flush(self, n: int) -> None:
        table = pa.concat_tables(self.pending)
        self.writer.write_table(table.slice(0, n).combine_chunks(), row_group_size=n)
        rest = table.slice(n)
        self.pending = [rest] if rest.num_rows else []
        self.rows -= n

    def __enter__(self) -> _ParquetSink:
        return self

    def __exit__(self, kind: object, *_: object) -> None:
        try:
            if kind is None and self.rows:
                self._flush(self.rows)
        finally:
            self.writer.close()


class _CsvSink:
    """Writes CSV with one header; every value's text depends only on the value."""

    def __init__(self, path: Path, schema: pa.Schema) -> None:
        self.writer = pa_csv.CSVWriter(path, schema)

    def write(self, table: pa.Table) -> None:
        try:
            self.writer.write_table(table)
        except pa.ArrowException as e:
            raise TableError(f"cannot write the rated book as CSV: {e}") from None

    def __enter__(self) -> _CsvSink:
        return self

    def __exit__(self, *_: object) -> None:
        self.writer.close()
