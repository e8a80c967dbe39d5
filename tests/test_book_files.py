"""Which files make up a book: one set of rules (`rating_tables.books`) for every command reading books.

Each rule is checked on the three readers: `validate` (the whole-book scan), `fit` (`load_book`) and
`rate` (`rating_tables.rate_file`). Accepted layouts must give each reader the same rows as the
book in one CSV file; refused layouts must give each reader the same one-line message naming the
path.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from pathlib import Path

import pandas as pd
import pytest

from premiumlab._core.errors import InputError
from premiumlab.book.scan import load_book
from premiumlab.book.spec import load_spec
from premiumlab.book.validate import validate_book
from rating_tables import TableError, rate_file

from _builders import SPEC_TEXT, example_table, small_book, write_book

BOOK = small_book(90)
SPLITS = ((0, 40), (40, 70), (70, 90))


def _spec(folder: Path) -> Path:
    path = folder / "spec.toml"
    path.write_text(SPEC_TEXT)
    return path


def _validate(book: Path, folder: Path) -> object:
    report = validate_book(book, _spec(folder))
    assert not report.errors, report.errors
    return report.rows


def _fit(book: Path, folder: Path) -> object:
    loaded = load_book(book, load_spec(_spec(folder)))
    return loaded.exposure.tolist(), loaded.claim_amount.tolist(), loaded.frame["bonus"].tolist()


def _rate(book: Path, folder: Path) -> object:
    out = folder / "rated.csv"
    out.unlink(missing_ok=True)
    rate_file(example_table(), book, out, "exposure")
    return pd.read_csv(out)["gross_premium"].tolist()


READERS: dict[str, Callable[[Path, Path], object]] = {"validate": _validate, "fit": _fit, "rate": _rate}
ERRORS = (InputError, TableError)


def _parts(folder: Path, suffixes: tuple[str, ...]) -> Path:
    """The book written as a folder of parts, part k with suffix suffixes[k]."""
    folder.mkdir()
    for k, ((start, stop), suffix) in enumerate(zip(SPLITS, suffixes)):
        write_book(BOOK.iloc[start:stop], folder / f"part-{k}{suffix}")
    return folder


@pytest.fixture(params=list(READERS))
def reader(request, tmp_path) -> Callable[[Path], object]:
    work = tmp_path / "work"
    work.mkdir()
    return lambda book: READERS[request.param](book, work)


@pytest.fixture
def whole(tmp_path, reader) -> object:
    """What the reader gives for the book in one CSV file."""
    path = tmp_path / "whole.csv"
    BOOK.to_csv(path, index=False)
    return reader(path)


def test_a_pq_file_is_a_parquet_book(tmp_path, reader, whole):
    write_book(BOOK, tmp_path / "book.pq")
    assert reader(tmp_path / "book.pq") == whole


@pytest.mark.parametrize(
    "suffixes",
    [(".csv",) * 3, (".parquet",) * 3, (".pq", ".parquet", ".pq")],
    ids=["csv-parts", "parquet-parts", "pq-and-parquet-parts"],
)
def test_a_folder_of_parts_of_one_kind_is_read_in_name_order(tmp_path, reader, whole, suffixes):
    assert reader(_parts(tmp_path / "book", suffixes)) == whole


def test_hidden_entries_of_a_folder_are_skipped(tmp_path, reader, whole):
    """Names starting with '.' or '_' are not parts, whatever they hold (here bytes of no book)."""
    folder = _parts(tmp_path / "book", (".parquet",) * 3)
    for name in ("._part-0.parquet", ".part-3.csv", "_SUCCESS", "_part-4.parquet"):
        (folder / name).write_bytes(b"\x00not a book\n")
    (folder / "notes").mkdir()
    assert reader(folder) == whole


def exactly(message: str) -> str:
    """A pattern matching the whole of `message`."""
    return f"^{re.escape(message)}$"


def test_a_folder_mixing_csv_and_parquet_parts_is_refused_by_name(tmp_path, reader):
    folder = _parts(tmp_path / "book", (".parquet", ".csv", ".pq"))
    with pytest.raises(
        ERRORS,
        match=exactly(
            f"{folder}: the folder mixes CSV and Parquet parts (part-1.csv and "
            "part-0.parquet); a book folder holds parts of one kind"
        ),
    ):
        reader(folder)


def test_a_folder_without_parts_is_refused_by_name(tmp_path, reader):
    folder = tmp_path / "empty"
    folder.mkdir()
    (folder / "readme.txt").write_text("no parts here")
    with pytest.raises(ERRORS, match=exactly(f"{folder}: is a directory with no .csv, .parquet or .pq parts")):
        reader(folder)


def test_an_unsupported_suffix_or_a_missing_book_is_refused_by_name(tmp_path, reader):
    path = tmp_path / "book.txt"
    BOOK.to_csv(path, index=False)
    with pytest.raises(
        ERRORS,
        match=exactly(
            f"{path}: unsupported book format '.txt'; a book is a .csv, .parquet or .pq file or a folder of such parts"
        ),
    ):
        reader(path)
    with pytest.raises(ERRORS, match=exactly(f"{tmp_path / 'nothing.csv'}: the book does not exist")):
        reader(tmp_path / "nothing.csv")


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_a_part_without_a_needed_column_is_refused_by_name(tmp_path, reader, suffix):
    """fit and validate say which column the part lacks; rate, which keeps every column, says that
    the part's columns differ from the first part's (after the book folder's name)."""
    folder = _parts(tmp_path / "book", (suffix,) * 3)
    part = folder / f"part-1{suffix}"
    write_book(BOOK.iloc[40:70].drop(columns="bonus"), part)
    with pytest.raises(
        ERRORS,
        match=rf"{re.escape(str(part))}: (missing column 'bonus'|its columns or types "
        r"differ from part-0)",
    ):
        reader(folder)


def test_the_rated_output_may_end_in_pq_and_is_parquet(tmp_path):
    book = tmp_path / "book.csv"
    BOOK.to_csv(book, index=False)
    rate_file(example_table(), book, tmp_path / "rated.csv", "exposure")
    rate_file(example_table(), book, tmp_path / "rated.pq", "exposure")
    assert (
        pd.read_parquet(tmp_path / "rated.pq")["gross_premium"].tolist()
        == pd.read_csv(tmp_path / "rated.csv")["gross_premium"].tolist()
    )
    with pytest.raises(
        TableError,
        match=exactly(f"{tmp_path / 'rated.txt'}: the output must end in .csv or .parquet (or .pq, also Parquet)"),
    ):
        rate_file(example_table(), book, tmp_path / "rated.txt", "exposure")
