"""The missing row of a factor (docs/rating-table.md, Factor files): round trip, files and refusals.

Invented tables (tests/_builders.py) with a missing row added by hand; the expected file lines are
the format's rules written out.
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from rating_tables import (
    MISSING_LABEL,
    CategoricalFactor,
    MissingRow,
    NumericFactor,
    TableError,
    audit,
    impact,
    load,
    save,
    write_exhibit,
)

from _builders import edit_text, example_table


def with_missing_rows(age_row: MissingRow | None = None, region_row: MissingRow | None = None):
    """The example table with missing rows on `age` (numeric) and `region` (categorical)."""
    table = example_table()
    age = dataclasses.replace(table.factor("age"), missing=age_row or MissingRow(1.3, 40.0))
    region = dataclasses.replace(table.factor("region"), missing=region_row or MissingRow(1.1, 25.5))
    return dataclasses.replace(table, factors=(age, region, *table.factors[2:]))


@pytest.fixture
def saved(tmp_path) -> Path:
    folder = tmp_path / "TABLE"
    save(with_missing_rows(), folder)
    return folder


def test_missing_row_label_and_values():
    assert MISSING_LABEL == "(missing)"
    row = MissingRow(1, 2)
    assert (row.relativity, row.exposure) == (1.0, 2.0) and isinstance(row.relativity, float)
    assert math.isnan(row.indicated) and math.isnan(row.credibility)
    assert row == MissingRow(1.0, 2.0, math.nan, math.nan)  # NaN equals NaN
    assert row != MissingRow(1.0, 2.5)


def test_the_missing_row_is_not_a_band_or_level():
    table = with_missing_rows()
    age, region = table.factor("age"), table.factor("region")
    assert age.labels() == ["[-inf, 25)", "[25, 60)", "[60, inf)"]
    assert region.labels() == ["North", "South", "Coast"]
    assert age.relativity.tolist() == [1.5, 1.0, 1.25] and region.exposure.tolist() == [600.0, 400.0, 220.0]
    assert age.missing == MissingRow(1.3, 40.0)


def test_the_missing_row_is_written_last_with_empty_keys(saved):
    assert (saved / "factors/age.csv").read_text().splitlines() == [
        "lower,upper,relativity,exposure",
        "-inf,25.0,1.5,120.0",
        "25.0,60.0,1.0,800.0",
        "60.0,inf,1.25,300.0",
        ",,1.3,40.0",
    ]
    assert (saved / "factors/region.csv").read_text().splitlines() == [
        "level,relativity,exposure",
        "North,1.0,600.0",
        "South,0.875,400.0",
        "Coast,1.5,220.0",
        ",1.1,25.5",
    ]


def test_round_trip_with_missing_rows_gives_an_equal_table_and_the_same_bytes(saved, tmp_path):
    loaded = load(saved)
    assert loaded == with_missing_rows()
    assert loaded != example_table()
    save(loaded, tmp_path / "AGAIN")
    for name in ("table.json", "factors/age.csv", "factors/region.csv", "factors/bonus.csv"):
        assert (saved / name).read_bytes() == (tmp_path / "AGAIN" / name).read_bytes()


def test_round_trip_keeps_the_optional_columns_of_a_missing_row(tmp_path):
    """indicated and credibility of a missing row are written in the factor's columns (empty when NaN)."""
    table = example_table()
    age = dataclasses.replace(
        table.factor("age"),
        indicated=[1.49, 0.99, 1.26],
        credibility=[0.5, 1.0, 0.8],
        missing=MissingRow(1.3, 40.0, 1.27),
    )
    region = dataclasses.replace(
        table.factor("region"), credibility=[1.0, 0.9, 0.4], missing=MissingRow(1.1, 2.0, math.nan, 0.25)
    )
    table = dataclasses.replace(table, factors=(age, region, *table.factors[2:]))
    save(table, tmp_path / "T")
    assert (tmp_path / "T/factors/age.csv").read_text().splitlines()[-1] == ",,1.3,40.0,1.27,"
    assert (tmp_path / "T/factors/region.csv").read_text().splitlines()[-1] == ",1.1,2.0,0.25"
    assert load(tmp_path / "T") == table


@pytest.mark.parametrize(
    "name, old, new, message",
    [
        (
            "factors/region.csv",
            ",1.1,25.5\n",
            ",1.1,25.5\n,1.2,3.0\n",
            r"TABLE: factors/region.csv: factor 'region', data row 5 \(1-based\): a second row with empty level "
            r"\(data row 4 \(1-based\) is the first\); only the missing row leaves them empty, and a factor has at "
            r"most one$",
        ),
        (
            "factors/age.csv",
            ",,1.3,40.0\n",
            ",,1.3,40.0\n,,1.0,1.0\n",
            r"TABLE: factors/age.csv: factor 'age', data row 5 \(1-based\): a second row with empty lower and upper "
            r"\(data row 4 \(1-based\) is the first\)",
        ),
        (
            "factors/region.csv",
            "South,0.875",
            ",0.875",
            r"TABLE: factors/region.csv: factor 'region', data row 4 \(1-based\): a second row with empty level "
            r"\(data row 2 \(1-based\) is the first\)",
        ),
        (
            "factors/bonus.csv",
            "02,1.0",
            ",1.0",
            r"TABLE: factors/bonus.csv: factor 'bonus', data row 2 \(1-based\): the missing row \(empty level\) must be "
            r"the last data row$",
        ),
        (
            "factors/age.csv",
            "25.0,60.0,1.0",
            ",60.0,1.0",
            r"TABLE: factors/age.csv: factor 'age', data row 2 \(1-based\): column 'lower' holds '', not a number$",
        ),
        (
            "factors/age.csv",
            ",,1.3,40.0",
            "60.0,,1.3,40.0",
            r"TABLE: factors/age.csv: factor 'age', data row 4 \(1-based\): column 'upper' holds '', not a number$",
        ),
        (
            "factors/age.csv",
            ",,1.3,40.0",
            ",,0.0,40.0",
            r"TABLE: factors/age.csv: factor 'age', data row 4 \(1-based\), the missing row: relativity 0 must be finite "
            r"and > 0$",
        ),
        (
            "factors/region.csv",
            ",1.1,25.5",
            ",inf,25.5",
            r"TABLE: factors/region.csv: factor 'region', data row 4 \(1-based\), the missing row: relativity inf must be "
            r"finite and > 0$",
        ),
        (
            "factors/region.csv",
            ",1.1,25.5",
            ",1.1,-2",
            r"factor 'region', data row 4 \(1-based\), the missing row: exposure -2 must be finite and >= 0$",
        ),
        (
            "factors/region.csv",
            ",1.1,25.5",
            ",,25.5",
            r"factor 'region', data row 4 \(1-based\): column 'relativity' holds '', not a number$",
        ),
        (
            "factors/region.csv",
            "Coast,1.5",
            "(missing),1.5",
            r"factor 'region', data row 3 \(1-based\): level '\(missing\)' is the label of the missing row",
        ),
    ],
)
def test_bad_missing_rows_are_refused_naming_file_factor_and_row(saved, name, old, new, message):
    edit_text(saved, name, old, new)
    with pytest.raises(TableError, match=message) as caught:
        load(saved)
    assert str(caught.value).startswith(str(saved))


def test_an_interaction_key_stays_required(saved):
    """Two-way tables have no missing cell: an empty key field there is refused as before."""
    edit_text(saved, "factors/age__region.csv", "-inf,30.0,North", ",,North")
    with pytest.raises(TableError, match=r"age__region.csv: factor 'age__region', data row 1 \(1-based\): column "):
        load(saved)


@pytest.mark.parametrize(
    "values, message",
    [
        ({"relativity": 0.0, "exposure": 1.0}, r"^missing row: relativity 0 must be finite and > 0$"),
        ({"relativity": math.nan, "exposure": 1.0}, r"^missing row: relativity nan must be finite and > 0$"),
        ({"relativity": 1.0, "exposure": math.inf}, r"^missing row: exposure inf must be finite and >= 0$"),
        ({"relativity": 1.0, "exposure": 1.0, "indicated": -1.0}, r"^missing row: indicated -1 must be empty or"),
        ({"relativity": 1.0, "exposure": 1.0, "credibility": 1.5}, r"^missing row: credibility 1.5 must be empty or"),
        ({"relativity": "1.0", "exposure": 1.0}, r"^missing row: relativity '1.0' is not a number$"),
        ({"relativity": True, "exposure": 1.0}, r"^missing row: relativity True is not a number$"),
    ],
)
def test_missing_row_refuses_bad_values(values, message):
    with pytest.raises(TableError, match=message):
        MissingRow(**values)


def test_factors_refuse_what_load_refuses():
    with pytest.raises(TableError, match=r"factor 'age': missing must be a MissingRow or None, got 1.2"):
        NumericFactor("age", "none", [-np.inf], [np.inf], [1], [1], missing=1.2)
    with pytest.raises(TableError, match=r"the missing row: indicated is given but the factor has no indicated column"):
        CategoricalFactor("region", "none", ("A",), [1], [1], missing=MissingRow(1.0, 1.0, indicated=1.1))
    with pytest.raises(TableError, match=r"level '\(missing\)' is the label of the missing row"):
        CategoricalFactor("region", "none", ("A", MISSING_LABEL), [1, 1], [1, 1])


def test_the_exhibit_shows_the_missing_row_and_states_the_rules(tmp_path):
    openpyxl = pytest.importorskip("openpyxl")
    table = with_missing_rows()
    age = dataclasses.replace(
        table.factor("age"), credibility=[0.6, 1.0, 0.85], missing=MissingRow(1.3, 40.0, credibility=0.35)
    )
    table = dataclasses.replace(table, factors=(age, *table.factors[1:]))
    write_exhibit(table, tmp_path / "exhibit.xlsx")
    book = openpyxl.load_workbook(tmp_path / "exhibit.xlsx")
    age_rows = list(book["age"].iter_rows(values_only=True))
    assert age_rows[0] == (
        "Band",
        "Band label",
        "Lower (included)",
        "Upper (excluded)",
        "Relativity (indicated, rounded)",
        "Exposure (policy-year)",
        "Credibility",
    )
    assert age_rows[3] == ("60 and over", "[60, inf)", 60.0, None, 1.25, 300.0, 0.85)
    assert age_rows[4] == (MISSING_LABEL, None, None, None, 1.3, 40.0, 0.35)
    assert age_rows[5] == (None,) * 7  # then the note rows
    region_rows = list(book["region"].iter_rows(values_only=True))
    assert region_rows[4] == (MISSING_LABEL, 1.1, 25.5)
    assert list(book["bonus"].iter_rows(values_only=True))[3] == ("03", 1.25, 220.0)  # no missing row
    rows = [(row[0], row[4]) for row in book["Cover"].iter_rows(values_only=True)]
    start = rows.index(("Missing values and unknown levels", None))
    assert rows[start + 1 : start + 5] == [
        ("age", "a missing value is rated at the missing row, relativity 1.3"),
        (
            "region",
            "a missing value is rated at the missing row, relativity 1.1; a level not in the table is rated at "
            "the fallback level 'North', or refused with strict levels",
        ),
        (
            "bonus",
            "a missing value is refused (no missing row); a level not in the table is refused (no fallback or "
            "base level)",
        ),
        ("two-way tables", "a row whose value is missing on either side takes 1.0 from the two-way table"),
    ]


def test_impact_shows_missing_values_under_the_one_label():
    """None, NaN and empty text fall in one `(missing)` level, listed last, in a column of text and
    in a pandas categorical alike; premiums 100 -> 110 (+10 %) and 200 -> 180 (-10 %)."""
    book = pd.DataFrame({"region": ["North", None, "", "South", np.nan, "North"]})
    current = np.array([100.0, 100.0, 200.0, 100.0, 100.0, 200.0])
    proposed = np.array([110.0, 110.0, 180.0, 110.0, 110.0, 180.0])
    for column in (book["region"], book["region"].astype("category")):
        levels = impact(current, proposed, pd.DataFrame({"region": column}), ["region"])["by_factor"]["region"]
        assert [(x["level"], x["count"]) for x in levels] == [("North", 2), ("South", 1), (MISSING_LABEL, 3)]
        assert levels[2]["current_premium"] == 400.0 and levels[2]["proposed_premium"] == 400.0
        assert levels[2]["change"] == pytest.approx(0.0, abs=1e-15)


def test_the_audit_bounds_the_missing_row_but_leaves_it_out_of_order_and_base():
    """bonus is promised increasing (0.75, 1.0, 1.25) and its missing row 0.2 breaks neither the promise
    nor the base at 1; the bounds (0.5, 2) find it, 0.3 below the minimum. A factor whose only
    relativity at 1 is its missing row has no base level."""
    table = with_missing_rows(region_row=MissingRow(1.0, 25.5))
    bonus = dataclasses.replace(table.factor("bonus"), missing=MissingRow(0.2, 10.0))
    table = dataclasses.replace(table, factors=tuple(bonus if f.name == "bonus" else f for f in table.factors))
    assert audit(table) == []
    found = audit(table, bounds={"*": (0.5, 2.0)})
    assert [(v.check, v.factor, v.where) for v in found] == [("bounds", "bonus", MISSING_LABEL)]
    assert found[0].amount == pytest.approx(0.3, rel=1e-12)
    assert found[0].detail == "factor 'bonus', (missing): relativity 0.2 is below the minimum 0.5"
    no_base = dataclasses.replace(table.factor("age"), relativity=[1.5, 1.1, 1.25], missing=MissingRow(1.0, 1.0))
    table = dataclasses.replace(table, factors=(no_base, *table.factors[1:]))
    assert [(v.check, v.factor) for v in audit(table)] == [("base_level", "age")]
