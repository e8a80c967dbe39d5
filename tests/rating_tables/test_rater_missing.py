"""The rater on missing values and unknown levels (docs/rating-table.md, Rating algorithm).

Hand calculations on the invented example table (tests/_builders.py) with a missing row of 1.3 on
`age` and 1.1 on `region`; the premium formula is the page's, the figures are written out below.
"""

from __future__ import annotations

import dataclasses
import hashlib

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from rating_tables import LevelCounts, MissingRow, TableError, rate, rate_file
from rating_tables.rate import rating_columns

from _builders import example_table

# Hand figures, base 200, loadings lae 0.10, fixed 30, variable 0.15 + profit 0.05, minimum 120:
# M1: age missing 1.3; Coast 1.5; bonus 03 1.25; age__region 1.0 (age missing); exposure 1
#     pure = 200 x 1.3 x 1.5 x 1.25 = 487.5; gross = (536.25 + 30) / 0.8 = 707.8125 -> 707.81
# M2: age 22 1.5; region missing 1.1; bonus 01 0.75; age__region 1.0 (region missing); exposure 0.5
#     pure = 200 x 1.5 x 1.1 x 0.75 x 0.5 = 123.75; gross = (136.125 + 15) / 0.8 = 188.90625 -> 188.91
# M3: age 45 1.0; region missing (empty text) 1.1; bonus 02 1.0; 1.0; exposure 1
#     pure = 220; gross = (242 + 30) / 0.8 = 340
# M4: age 23 1.5; 'Islands' is no level: fallback North 1.0; bonus 02; age < 30 and North 1.0; exposure 1
#     pure = 300; gross = (330 + 30) / 0.8 = 450
# M5: age 24 1.5; Coast 1.5; 02 1.0; age < 30 and Coast 1.125; exposure 1
#     pure = 200 x 1.5 x 1.5 x 1.125 = 506.25; gross = (556.875 + 30) / 0.8 = 733.59375 -> 733.59
PURE = [487.5, 123.75, 220.0, 300.0, 506.25]
GROSS = [707.81, 188.91, 340.0, 450.0, 733.59]
REL = {
    "rel_age": [1.3, 1.5, 1.0, 1.5, 1.5],
    "rel_region": [1.5, 1.1, 1.1, 1.0, 1.5],
    "rel_bonus": [1.25, 0.75, 1.0, 1.0, 1.0],
    "rel_age__region": [1.0, 1.0, 1.0, 1.0, 1.125],
}


def table_with_missing_rows():
    table = example_table()
    age = dataclasses.replace(table.factor("age"), missing=MissingRow(1.3, 40.0))
    region = dataclasses.replace(table.factor("region"), missing=MissingRow(1.1, 25.5))
    return dataclasses.replace(table, factors=(age, region, *table.factors[2:]))


def book_with_missing_values() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "policy": ["M1", "M2", "M3", "M4", "M5"],
            "age": [np.nan, 22.0, 45.0, 23.0, 24.0],
            "region": ["Coast", None, "", "Islands", "Coast"],
            "bonus": ["03", "01", "02", "02", "02"],
            "exposure": [1.0, 0.5, 1.0, 1.0, 1.0],
        }
    )


def check_hand_figures(rated: pd.DataFrame) -> None:
    assert rated["pure_premium"].tolist() == pytest.approx(PURE, rel=1e-12)
    assert rated["gross_premium"].tolist() == GROSS
    for column, values in REL.items():
        assert rated[column].tolist() == values, column


@pytest.mark.parametrize("age_missing", [np.nan, None, ""])
def test_missing_values_take_the_missing_row_and_one_from_two_way_tables(age_missing):
    """NaN, None and empty text are all missing, for a numeric and for a categorical factor."""
    book = book_with_missing_values().astype({"age": object})
    book.loc[0, "age"] = age_missing
    check_hand_figures(rate(table_with_missing_rows(), book, "exposure"))


def test_missing_values_in_a_pandas_categorical_and_a_nan_text():
    book = book_with_missing_values()
    book["region"] = pd.Categorical(book["region"].replace({None: np.nan}), categories=["Coast", "", "Islands"])
    book["age"] = ["nan", "22", "45", "23", "24"]  # text read as a number: `nan` is missing
    check_hand_figures(rate(table_with_missing_rows(), book, "exposure"))


def test_the_counts_of_a_book(tmp_path):
    _, counts = rating_columns(table_with_missing_rows(), book_with_missing_values(), "exposure")
    assert counts == {
        "age": LevelCounts("age", missing_rows=1),
        "region": LevelCounts("region", 2, 1, "North", ("Islands",)),
        "bonus": LevelCounts("bonus"),
    }
    assert not counts["bonus"] and counts["age"]


def test_a_csv_book_with_empty_fields(tmp_path):
    """In a CSV book an empty field is a missing value; the text columns pass through unchanged."""
    (tmp_path / "book.csv").write_text(
        "policy,age,region,bonus,exposure\nM1,,Coast,03,1.0\nM2,22,,01,0.5\nM3,45,,02,1\nM4,23,Islands,02,1\n"
        "M5,24,Coast,02,1\n"
    )
    result = rate_file(table_with_missing_rows(), tmp_path / "book.csv", tmp_path / "rated.csv", "exposure")
    rated = pd.read_csv(tmp_path / "rated.csv", dtype={"bonus": str}, keep_default_na=False)
    check_hand_figures(rated)
    assert rated["age"].tolist()[:2] == ["", "22"] and rated["region"].tolist()[1] == ""
    assert result.rows == 5
    assert result.counts == (LevelCounts("age", 1), LevelCounts("region", 2, 1, "North", ("Islands",)))


@pytest.mark.parametrize("dictionary", [False, True])
def test_a_parquet_book_with_nulls_nan_and_empty_text(tmp_path, dictionary):
    region = pa.array(["Coast", None, "", "Islands", "Coast"])
    book = pa.table(
        {
            "policy": ["M1", "M2", "M3", "M4", "M5"],
            "age": pa.array([None, 22.0, 45.0, 23.0, 24.0]),
            "region": region.dictionary_encode() if dictionary else region,
            "bonus": ["03", "01", "02", "02", "02"],
            "exposure": [1.0, 0.5, 1.0, 1.0, 1.0],
        }
    )
    pq.write_table(book, tmp_path / "book.parquet")
    result = rate_file(table_with_missing_rows(), tmp_path / "book.parquet", tmp_path / "rated.parquet", "exposure")
    rated = pd.read_parquet(tmp_path / "rated.parquet")
    check_hand_figures(rated)
    assert rated["age"].isna().tolist() == [True, False, False, False, False]  # the null passes through
    assert result.counts[1] == LevelCounts("region", 2, 1, "North", ("Islands",))
    nan_age = book.set_column(1, "age", pa.array([np.nan, 22.0, 45.0, 23.0, 24.0]))  # a NaN, not a null
    pq.write_table(nan_age, tmp_path / "nan.parquet")
    rate_file(table_with_missing_rows(), tmp_path / "nan.parquet", tmp_path / "nan-rated.parquet", "exposure")
    check_hand_figures(pd.read_parquet(tmp_path / "nan-rated.parquet"))


@pytest.mark.parametrize(
    "column, value, message",
    [
        (
            "age",
            np.nan,
            r"^factor 'age': missing value at book row 2 \(0-based\) and the table has no missing row for it$",
        ),
        (
            "region",
            "",
            r"^factor 'region': missing value at book row 2 \(0-based\) and the table has no missing row for it$",
        ),
        ("region", None, r"^factor 'region': missing value at book row 2 \(0-based\)"),
    ],
)
def test_a_missing_value_without_a_missing_row_is_refused(column, value, message):
    book = book_with_missing_values().iloc[[3, 4, 0]].reset_index(drop=True).astype({column: object})
    book.loc[2, "age"] = 30.0
    book.loc[2, column] = value
    with pytest.raises(TableError, match=message):
        rate(example_table(), book, "exposure")


def test_a_missing_exposure_stays_an_error(tmp_path):
    book = book_with_missing_values()
    book.loc[3, "exposure"] = np.nan
    with pytest.raises(TableError, match=r"^exposure column 'exposure': missing value at book row 3 \(0-based\)$"):
        rate(table_with_missing_rows(), book, "exposure")
    (tmp_path / "book.csv").write_text("policy,age,region,bonus,exposure\nM1,30,Coast,03,\n")
    with pytest.raises(TableError, match=r"book.csv: exposure column 'exposure': missing value at book row 0"):
        rate_file(table_with_missing_rows(), tmp_path / "book.csv", tmp_path / "out.csv", "exposure")


def test_unknown_levels_take_the_fallback_else_the_base_else_are_refused():
    """bonus has no fallback: with base 02 an unknown bonus is rated at 02 (1.0); with neither it is refused."""
    table = example_table()
    book = book_with_missing_values().iloc[[3, 4]].assign(bonus=["07", "01"])
    with pytest.raises(
        TableError,
        match=r"^factor 'bonus': level '07' at book row 0 \(0-based\) is not in the table and the factor has no "
        r"fallback or base level$",
    ):
        rate(table, book, "exposure")
    with_base = dataclasses.replace(
        table, factors=tuple(dataclasses.replace(f, base="02") if f.name == "bonus" else f for f in table.factors)
    )
    rated = rate(with_base, book, "exposure")
    assert rated["rel_bonus"].tolist() == [1.0, 0.75]
    _, counts = rating_columns(with_base, book, "exposure")
    assert counts["bonus"] == LevelCounts("bonus", 0, 1, "02", ("07",))
    assert counts["region"] == LevelCounts("region", 0, 1, "North", ("Islands",))


def test_strict_levels_refuse_an_unknown_level_even_with_a_fallback(tmp_path):
    book = book_with_missing_values()
    message = (
        r"factor 'region': level 'Islands' at book row 3 \(0-based\) is not in the table and strict levels refuse "
        r"it \(the fallback would be 'North'\)$"
    )
    with pytest.raises(TableError, match="^" + message):
        rate(table_with_missing_rows(), book, "exposure", strict_levels=True)
    book.iloc[[0, 1, 2, 4]].to_csv(tmp_path / "known.csv", index=False)  # missing values, no unknown level
    rate_file(
        table_with_missing_rows(), tmp_path / "known.csv", tmp_path / "known-rated.csv", "exposure", strict_levels=True
    )
    book.to_csv(tmp_path / "book.csv", index=False)
    with pytest.raises(TableError, match=r"book.csv: " + message):
        rate_file(
            table_with_missing_rows(), tmp_path / "book.csv", tmp_path / "out.csv", "exposure", strict_levels=True
        )
    assert not (tmp_path / "out.csv").exists()


def _digest(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_output_and_counts_do_not_depend_on_the_batch_size(tmp_path, suffix):
    """1,000 rows, a tenth with a missing age, a tenth with a missing region, and eight unknown regions
    met in the order U7, U3, U7, U1, U5, U2, U8, ...: the first five distinct are U7, U3, U1, U5, U2
    whether the book is rated in one batch or in batches of 97 or 7 rows."""
    rng = np.random.default_rng(14)
    n = 1000
    region = rng.choice(["North", "South", "Coast"], n).astype(object)
    unknown_rows = np.sort(rng.choice(np.arange(3, n), 40, replace=False))
    order = ["U7", "U3", "U7", "U1", "U5", "U2", "U8", "U4", "U6"]
    region[unknown_rows] = [order[k] if k < len(order) else f"U{1 + k % 8}" for k in range(40)]
    age = rng.integers(17, 90, n).astype(float)
    age[rng.choice(n, 100, replace=False)] = np.nan
    free = np.setdiff1d(np.arange(n), unknown_rows)
    region[rng.choice(free, 100, replace=False)] = None
    book = pd.DataFrame(
        {
            "policy": [f"B{i:05d}" for i in range(n)],
            "age": age,
            "region": region,
            "bonus": rng.choice(["01", "02", "03"], n),
            "exposure": np.round(rng.uniform(0.1, 1.0, n), 3),
        }
    )
    source = tmp_path / ("book.csv" if suffix == ".csv" else "book.parquet")
    book.to_csv(source, index=False) if suffix == ".csv" else book.to_parquet(source, index=False)
    results, digests = [], []
    for batch_rows in (n, 97, 7):
        out = tmp_path / f"rated-{batch_rows}{suffix}"
        results.append(
            rate_file(table_with_missing_rows(), source, out, "exposure", batch_rows=batch_rows, row_group_rows=500)
        )
        digests.append(_digest(out))
    assert digests[1:] == digests[:1] * 2
    assert results[1:] == results[:1] * 2
    assert results[0].counts == (
        LevelCounts("age", int(np.isnan(age).sum())),
        LevelCounts("region", 100, 40, "North", ("U7", "U3", "U1", "U5", "U2")),
    )
