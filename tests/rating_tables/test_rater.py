"""The rater against a hand calculation, its refusals, the base-rate solver and batch rating of files.

The hand calculation applies the premium formula of docs/rating-table.md to an invented table (figures
written out below); batch rating is checked against one-piece rating byte for byte.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest

from rating_tables import (
    LevelCounts,
    NumericFactor,
    TableError,
    pure_premium,
    rate,
    rate_file,
    solve_base_rate,
)
from rating_tables.ratefile import CAUTIONS_KEY

from _builders import INF, example_book, example_table


def test_rater_matches_hand_calculation():
    """rate = 200 x rel_age x rel_region x rel_bonus x rel_age__region (per exposure unit);
    term = (rate x 1.10 + 30) / (1 - 0.15 - 0.05); gross = max(minimum, term) x exposure, rounded to
    cents; every money column rounded to cents. Hand figures below (docs/rating-table.md's rule)."""
    rated = rate(example_table(), example_book(), "exposure")
    # P1: age 22 -> [-inf, 25) 1.5; Coast 1.5; bonus 03 1.25; age < 30 and Coast 1.125; exposure 1
    #     rate = 200 x 1.5 x 1.5 x 1.25 x 1.125 = 632.8125 -> pure 632.81
    #     term = (632.8125 x 1.1 + 30) / 0.8 = 726.09375 / 0.8 = 907.6171875 -> 907.62
    # P2: age 45 -> 1.0; South 0.875; 01 0.75; age >= 30 -> 1.0; exposure 0.5
    #     rate = 131.25, pure 65.625 -> 65.62 (half to even); term (144.375 + 30) / 0.8 = 217.96875
    #     >= 120, gross 217.96875 x 0.5 = 108.984375 -> 108.98
    # P3: age 70 -> 1.25; North 1.0; 02 1.0; 1.0; pure = 250; gross = (275 + 30) / 0.8 = 381.25
    # P4: age 27 -> 1.0; 'Atlantis' is no level: fallback North 1.0; 02; age < 30, North 1.0; exposure 0.25
    #     rate 200, pure 50; term (220 + 30) / 0.8 = 312.5 (312.50000000000006 in double precision,
    #     the divisor being 0.7999999999999999), gross x 0.25 = 78.12500000000001 -> 78.13
    # P5: age 35 -> 1.0; Coast 1.5; 01 0.75; age >= 30 -> 1.0; exposure 0.1
    #     rate 225, pure 22.5; term (247.5 + 30) / 0.8 = 346.875, gross x 0.1 = 34.6875 -> 34.69
    assert rated["pure_premium"].tolist() == [632.81, 65.62, 250.0, 50.0, 22.5]
    assert rated["gross_premium"].tolist() == [907.62, 108.98, 381.25, 78.13, 34.69]
    assert not rated["at_minimum"].any()
    assert rated["rel_age"].tolist() == [1.5, 1.0, 1.25, 1.0, 1.0]
    assert rated["rel_region"].tolist() == [1.5, 0.875, 1.0, 1.0, 1.5]
    assert rated["rel_age__region"].tolist() == [1.125, 1.0, 1.0, 1.0, 1.0]
    assert list(rated.columns) == [
        "policy",
        "age",
        "region",
        "bonus",
        "exposure",
        "rel_age",
        "rel_region",
        "rel_bonus",
        "rel_age__region",
        "pure_premium",
        "lae_load",
        "fixed_expense_load",
        "variable_expense_load",
        "profit_load",
        "minimum_premium_adjustment",
        "gross_premium",
        "at_minimum",
    ]


def test_the_minimum_premium_is_per_full_term_and_earned():
    """With a minimum of 250 per full term, P2's term premium 217.96875 is raised to 250 and earned
    with its exposure 0.5: gross 125.00, adjustment (250 - 217.96875) x 0.5 = 16.015625 -> 16.02.
    P5 (term 346.875, exposure 0.1) is above the minimum and keeps 34.69, where the old per-row rule
    charged it 250 in full."""
    rated = rate(example_table(minimum_premium=250.0), example_book(), "exposure")
    assert rated["gross_premium"].tolist() == [907.62, 125.0, 381.25, 78.13, 34.69]
    assert rated["at_minimum"].tolist() == [False, True, False, False, False]
    assert rated["minimum_premium_adjustment"].tolist() == [0.0, 16.02, 0.0, 0.0, 0.0]
    assert (rated["gross_premium"] <= np.maximum(250.0 * rated["exposure"], 1e9 * ~rated["at_minimum"])).all()


def test_annual_rates_one_full_term():
    """With annual=True the exposure is 1 and the exposure column is not needed."""
    rated = rate(example_table(), example_book().drop(columns="exposure"), annual=True)
    # P2: 200 x 0.875 x 0.75 = 131.25; gross (131.25 x 1.1 + 30) / 0.8 = 217.96875 -> 217.97
    # P4: 200; gross (220 + 30) / 0.8 = 312.5.  P5: 200 x 1.5 x 0.75 = 225; its gross 346.875 lies on a
    # half cent, where the rounding depends on the binary value, so only its pure premium is checked.
    assert rated["pure_premium"].tolist() == [632.81, 131.25, 250.0, 200.0, 225.0]
    assert rated["gross_premium"].tolist()[:4] == [907.62, 217.97, 381.25, 312.5]


def test_band_edges_are_lower_inclusive():
    """25 is in [25, 60), 24.999 in [-inf, 25); 60 in [60, inf); -inf and inf in the end bands."""
    book = pd.DataFrame(
        {"age": [24.999, 25.0, 59.999, 60.0, -INF, INF], "region": "North", "bonus": "02", "exposure": 1.0}
    )
    assert rate(example_table(), book, "exposure")["rel_age"].tolist() == [1.5, 1.0, 1.0, 1.25, 1.5, 1.25]


def test_many_bands_follow_the_same_rule():
    """300 bands (edges 0, 1, ..., 298) take the binary-search path: 0 -> band 1, 0.5 -> band 1, 298 -> band 299."""
    edges = np.arange(299.0)
    wide = NumericFactor("age", "none", [-INF, *edges], [*edges, INF], np.linspace(0.5, 2.0, 300), np.ones(300))
    table = dataclasses.replace(example_table(), factors=(wide,))
    book = pd.DataFrame({"age": [-1.0, 0.0, 0.5, 1.0, 297.9, 298.0, 1e9]})
    expected = wide.relativity[[0, 1, 1, 2, 298, 299, 299]]
    np.testing.assert_array_equal(rate(table, book, annual=True)["rel_age"].to_numpy(), expected)


def test_levels_are_compared_as_strings():
    """An integer column 1 is the text '1', not the level '01'; a categorical column rates like text."""
    table = example_table()
    book = example_book()
    categorical = book.assign(
        region=pd.Categorical(book["region"], categories=["South", "Coast", "North", "Atlantis", "Unused"])
    )
    pd.testing.assert_frame_equal(
        rate(table, categorical, "exposure").drop(columns="region"),
        rate(table, book, "exposure").drop(columns="region"),
    )
    with pytest.raises(TableError, match=r"factor 'bonus': level '1' at book row 0 \(0-based\)"):
        rate(table, book.assign(bonus=[1, 2, 3, 2, 1]), "exposure")


def test_unknown_level_without_fallback_names_value_and_row():
    book = example_book().assign(bonus=["03", "01", "02", "04", "05"])
    with pytest.raises(TableError, match=r"factor 'bonus': level '04' at book row 3 \(0-based\) is not in the table"):
        rate(example_table(), book, "exposure")


@pytest.mark.parametrize(
    "column, value, message",
    [
        ("age", np.nan, r"factor 'age': missing value at book row 2 \(0-based\)"),
        ("age", "old", r"factor 'age': value 'old' at book row 2 \(0-based\) is not a number"),
        ("region", None, r"factor 'region': missing value at book row 2"),
        ("exposure", -1.0, r"exposure column 'exposure': value -1.0 at book row 2 \(0-based\) must be finite and >= 0"),
    ],
)
def test_bad_book_values_are_refused_with_the_row(column, value, message):
    book = example_book().astype({column: object})
    book.loc[2, column] = value
    with pytest.raises(TableError, match=message):
        rate(example_table(), book, "exposure")


def test_missing_columns_and_clashes_are_refused():
    with pytest.raises(TableError, match="the book has no column 'bonus'"):
        rate(example_table(), example_book().drop(columns="bonus"), "exposure")
    with pytest.raises(TableError, match="name the book's exposure column"):
        rate(example_table(), example_book())
    with pytest.raises(TableError, match="already has a column 'pure_premium'"):
        rate(example_table(), example_book().assign(pure_premium=1.0), "exposure")


def test_solve_base_rate_meets_the_target_and_states_the_minimum_premium_effect():
    """The example book's pure premiums sum to 1,020.9375 at base 200; a target of 2,041.875 needs an
    off-balance factor of exactly 2 (base 400). At base 400 the term premiums (one full term) are
    (1265.625 x 1.1 + 30) / 0.8 = 1777.734375, (262.5 x 1.1 + 30) / 0.8 = 398.4375, (500 x 1.1 + 30)
    / 0.8 = 725, (400 x 1.1 + 30) / 0.8 = 587.5 and (450 x 1.1 + 30) / 0.8 = 656.25; earned with the
    exposures 1, 0.5, 1, 0.25, 0.1 they total 2,914.453125. With a minimum of 600 per full term two
    rows (P2, P4) are lifted, by (600 - 398.4375) x 0.5 + (600 - 587.5) x 0.25 = 100.78125 + 3.125
    = 103.90625 (effect about +3.6 %). Hand figures."""
    table = example_table(minimum_premium=600.0)
    solved, report = solve_base_rate(table, example_book(), "exposure", 2041.875)
    assert report["total_pure_premium_before"] == pytest.approx(1020.9375, rel=1e-12)
    assert report["off_balance_factor"] == pytest.approx(2.0, rel=1e-12)
    assert solved.base_rate == pytest.approx(400.0, rel=1e-12)
    assert pure_premium(solved, example_book(), "exposure").sum() == pytest.approx(2041.875, rel=1e-12)
    assert solved.target == {"basis": "experience", "total_pure_premium": 2041.875}
    minimum = report["minimum_premium"]
    assert minimum["rows_at_minimum"] == 2
    assert minimum["gross_without_minimum"] == pytest.approx(2914.453125, abs=0.02)
    assert minimum["gross_with_minimum"] - minimum["gross_without_minimum"] == pytest.approx(103.90625, abs=0.02)
    assert minimum["effect"] == pytest.approx(103.90625 / 2914.453125, abs=1e-5)
    assert "minimum_premium" not in solve_base_rate(example_table(0.0), example_book(), "exposure", 2041.875)[1]


def _big_book(n: int) -> pd.DataFrame:
    rng = np.random.default_rng(2027)
    return pd.DataFrame(
        {
            "policy": [f"F{i:07d}" for i in range(n)],
            "age": rng.integers(17, 95, n).astype(float),
            "region": pd.Categorical(rng.choice(["North", "South", "Coast", "Islands"], n)),
            "bonus": rng.choice(["01", "02", "03"], n),
            "exposure": np.round(rng.uniform(0.05, 1.0, n), 4),
        }
    )


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def big_books(tmp_path_factory) -> tuple[pd.DataFrame, Path, Path]:
    """200,000 invented policies as one CSV and as a folder of three Parquet parts."""
    folder = tmp_path_factory.mktemp("books")
    book = _big_book(200_000)
    book.to_csv(folder / "book.csv", index=False)
    parts = folder / "parts"
    parts.mkdir()
    for k, start in enumerate((0, 90_000, 150_000)):
        stop = {0: 90_000, 1: 150_000, 2: 200_000}[k]
        book.iloc[start:stop].to_parquet(parts / f"part-{k}.parquet", index=False, row_group_size=40_000)
    return book, folder / "book.csv", parts


@pytest.mark.parametrize("source", ["csv", "parquet"])
@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_batches_give_the_same_bytes_as_one_piece(big_books, tmp_path, source, suffix):
    """200,000 rows rated in batches of 65,537 rows equal, byte for byte, the file rated in one piece,
    and give the same counts (the rows of the unknown region Islands at the fallback North)."""
    book, csv_path, parts = big_books
    src = csv_path if source == "csv" else parts
    one, batched = tmp_path / f"one{suffix}", tmp_path / f"batched{suffix}"
    result = rate_file(example_table(), src, one, "exposure", batch_rows=1_000_000, row_group_rows=50_000)
    in_batches = rate_file(example_table(), src, batched, "exposure", batch_rows=65_537, row_group_rows=50_000)
    assert _digest(one) == _digest(batched)
    assert result == in_batches
    islands = int((book["region"] == "Islands").sum())
    assert result.rows == 200_000 and islands > 0
    assert result.counts == (LevelCounts("region", 0, islands, "North", ("Islands",)),)
    cautions = result.cautions
    rated = pd.read_csv(one, dtype={"bonus": str}) if suffix == ".csv" else pd.read_parquet(one)
    expected = rate(example_table(), book.assign(region=book["region"].astype(str)), "exposure")
    assert len(rated) == 200_000
    np.testing.assert_array_equal(rated["gross_premium"].to_numpy(), expected["gross_premium"].to_numpy())
    np.testing.assert_allclose(rated["pure_premium"].to_numpy(), expected["pure_premium"].to_numpy(), rtol=1e-15)
    assert cautions[0].startswith("Draft for review by a qualified actuary")
    if suffix == ".parquet":
        assert json.loads(pq.read_schema(one).metadata[CAUTIONS_KEY]) == list(cautions)
        assert pq.ParquetFile(one).metadata.num_row_groups == 4  # 200,000 rows in groups of 50,000


def test_batch_errors_count_rows_over_the_whole_book(tmp_path):
    book = _big_book(1000)
    book.loc[737, "bonus"] = "09"
    book.to_csv(tmp_path / "book.csv", index=False)
    with pytest.raises(TableError, match=r"book.csv: factor 'bonus': level '09' at book row 737 \(0-based\)"):
        rate_file(example_table(), tmp_path / "book.csv", tmp_path / "out.csv", "exposure", batch_rows=300)


def test_rate_file_refuses_bad_paths_and_columns(tmp_path):
    _big_book(10).to_csv(tmp_path / "book.csv", index=False)
    with pytest.raises(TableError, match=r"out.txt: the output must end in .csv or .parquet"):
        rate_file(example_table(), tmp_path / "book.csv", tmp_path / "out.txt", "exposure")
    with pytest.raises(TableError, match=r"nothing.csv: the book does not exist"):
        rate_file(example_table(), tmp_path / "nothing.csv", tmp_path / "out.csv", "exposure")
    with pytest.raises(TableError, match=r"book.csv: the book has no column 'premium_exposure'"):
        rate_file(example_table(), tmp_path / "book.csv", tmp_path / "out.csv", "premium_exposure")
    with pytest.raises(TableError, match="would overwrite the input"):
        rate_file(example_table(), tmp_path / "book.csv", tmp_path / "book.csv", "exposure")
