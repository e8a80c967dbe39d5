"""The rating-table folder of docs/rating-table.md: exact round trip, the files as specified, refusals, exhibit."""

from __future__ import annotations

import dataclasses
import json
import os
import shutil
from pathlib import Path

import numpy as np
import pytest

from rating_tables import CategoricalFactor, NumericFactor, TableError, load, rate, save, write_exhibit

from _builders import edit_text, example_book, example_table

INF = np.inf


def _with_exhibit_columns():
    """The example table with `indicated` and `credibility` columns on two factors."""
    table = example_table()
    age = table.factor("age")
    age = NumericFactor(
        age.name,
        age.monotone,
        age.lower,
        age.upper,
        age.relativity,
        age.exposure,
        indicated=[1.4871, 0.9994, 1.2627],
        credibility=[0.6, 1.0, 0.85],
    )
    region = table.factor("region")
    region = CategoricalFactor(
        region.name,
        region.monotone,
        region.levels,
        region.relativity,
        region.exposure,
        fallback=region.fallback,
        base=region.base,
        indicated=[1.0, 0.8712, np.nan],
    )
    factors = (age, region, *table.factors[2:])
    return dataclasses.replace(table, factors=factors)


@pytest.fixture
def saved(tmp_path) -> Path:
    folder = tmp_path / "TABLE"
    save(_with_exhibit_columns(), folder)
    return folder


def test_round_trip_gives_an_equal_table_identical_premiums_and_identical_bytes(saved, tmp_path):
    table = _with_exhibit_columns()
    loaded = load(saved)
    assert loaded == table
    assert loaded.factor("region").indicated[2] != loaded.factor("region").indicated[2]  # NaN kept as missing
    a, b = rate(table, example_book(), "exposure"), rate(loaded, example_book(), "exposure")
    assert a["pure_premium"].tolist() == b["pure_premium"].tolist()
    assert a["gross_premium"].tolist() == b["gross_premium"].tolist()
    again = tmp_path / "AGAIN"
    save(loaded, again)
    files = sorted(p.relative_to(saved).as_posix() for p in saved.rglob("*") if p.is_file())
    assert files == [
        "factors/age.csv",
        "factors/age__region.csv",
        "factors/bonus.csv",
        "factors/region.csv",
        "table.json",
    ]
    for name in files:
        assert (saved / name).read_bytes() == (again / name).read_bytes()


def test_floats_survive_the_round_trip_exactly(tmp_path):
    """Edges and relativities that are not short decimals (0.1 + 0.2, 1/3) come back bit for bit."""
    odd = NumericFactor(
        "age",
        "none",
        [-INF, 1e-300, 0.1 + 0.2],
        [1e-300, 0.1 + 0.2, INF],
        [1 / 3, 2 / 3, 1.0000000000000002],
        [1e-9, 0.0, 123456789.123],
    )
    table = example_table()
    table = dataclasses.replace(table, factors=(odd, *table.factors[1:]))
    save(table, tmp_path / "T")
    back = load(tmp_path / "T").factor("age")
    assert back.lower.tobytes() == odd.lower.tobytes()
    assert back.relativity.tobytes() == odd.relativity.tobytes()
    assert back.exposure.tobytes() == odd.exposure.tobytes()


def test_files_follow_the_contract(saved):
    meta = json.loads((saved / "table.json").read_text())
    assert list(meta) == [
        "format",
        "version",
        "table_id",
        "stage",
        "effective_date",
        "base_rate",
        "exposure_unit",
        "book_columns",
        "factors",
        "loadings",
        "rounding",
        "target",
        "provenance",
        "selections",
        "cautions",
    ]
    assert meta["format"] == "premiumlab.rating-table" and meta["version"] == 2
    assert meta["factors"][1] == {
        "name": "region",
        "type": "categorical",
        "monotone": "none",
        "file": "factors/region.csv",
        "fallback": "North",
        "base": "North",
    }
    assert meta["factors"][3] == {
        "name": "age__region",
        "type": "interaction",
        "of": ["age", "region"],
        "file": "factors/age__region.csv",
    }
    assert meta["loadings"] == {
        "lae_ratio": 0.1,
        "fixed_expense": 30.0,
        "variable_expense": 0.15,
        "profit": 0.05,
        "minimum_premium": 120.0,
    }
    assert meta["cautions"][0].startswith("Draft for review by a qualified actuary")
    assert (saved / "factors/age.csv").read_text().splitlines() == [
        "lower,upper,relativity,exposure,indicated,credibility",
        "-inf,25.0,1.5,120.0,1.4871,0.6",
        "25.0,60.0,1.0,800.0,0.9994,1.0",
        "60.0,inf,1.25,300.0,1.2627,0.85",
    ]
    assert (saved / "factors/region.csv").read_text().splitlines() == [
        "level,relativity,exposure,indicated",
        "North,1.0,600.0,1.0",
        "South,0.875,400.0,0.8712",
        "Coast,1.5,220.0,",
    ]
    assert (saved / "factors/age__region.csv").read_text().splitlines()[:3] == [
        "age_lower,age_upper,region_level,relativity",
        "-inf,30.0,North,1.0",
        "-inf,30.0,South,1.0",
    ]


@pytest.mark.parametrize(
    "name, old, new, message",
    [
        (
            "factors/age.csv",
            "25.0,60.0,1.0",
            "26.0,60.0,1.0",
            r"factors/age.csv: factor 'age', data row 2 \(1-based\): gap between the previous band's upper 25 and this "
            r"band's lower 26",
        ),
        ("factors/age.csv", "25.0,60.0,1.0", "24.0,60.0,1.0", r"data row 2 \(1-based\): overlap"),
        (
            "factors/age.csv",
            "60.0,inf,1.25",
            "60.0,70.0,1.25",
            r"data row 3 \(1-based\): the last band must end at inf",
        ),
        ("factors/age.csv", "25.0,60.0,1.0,", "25.0,60.0,0.0,", r"data row 2 \(1-based\): relativity 0 must be finite"),
        ("factors/age.csv", "25.0,60.0,1.0,", "25.0,60.0,-1.5,", r"data row 2 \(1-based\): relativity -1.5"),
        (
            "factors/age.csv",
            "25.0,60.0,1.0,",
            "25.0,60.0,one,",
            r"data row 2 \(1-based\): column 'relativity' holds 'one'",
        ),
        (
            "factors/age.csv",
            "25.0,60.0,1.0,",
            "25.0,60.0,1.0,2,",
            r"data row 2 \(1-based\): 7 fields, the header has 6",
        ),
        ("factors/age.csv", "lower,upper", "low,upper", r"factor 'age': unknown column 'low'"),
        ("factors/region.csv", "Coast,1.5", "South,1.5", r"data row 3 \(1-based\): level 'South' repeats data row 2"),
        (
            "factors/region.csv",
            "South,0.875",
            ",0.875",
            r"data row 2 \(1-based\): the missing row \(empty level\) must be the last data row",
        ),
        ("factors/age__region.csv", "30.0,inf,Coast,1.0\n", "", r"no row for cell \(age=\[30, inf\), region='Coast'\)"),
        ("table.json", '"fallback": "North"', '"fallback": "West"', "fallback level 'West' is not one of"),
        ("table.json", '"version": 2', '"version": 3', "this reader knows version 2"),
        ("table.json", '"version": 2', '"version": 1', "version 1 charged the minimum premium per row"),
        ("table.json", '"format": "premiumlab.rating-table"', '"format": "other"', "key 'format' is 'other'"),
        ("table.json", '"base_rate": 200.0', '"base_rate": "200"', "key 'base_rate' must be a number"),
        ("table.json", '"profit": 0.05', '"profit": 0.9', r"'loadings.variable_expense' \+ 'loadings.profit' = 1.05"),
        ("table.json", '"exposure_unit"', '"exposure_units"', "unknown key 'exposure_units'"),
        (
            "table.json",
            '"file": "factors/bonus.csv"',
            '"file": "factors/none.csv"',
            "factors/none.csv: factor 'bonus': file not found",
        ),
        ("table.json", '"file": "factors/bonus.csv"', '"file": "/etc/passwd"', "is an absolute path"),
        ("table.json", '"file": "factors/bonus.csv"', '"file": "../bonus.csv"', "uses '..' and would leave the table"),
    ],
)
def test_bad_folders_are_refused_naming_file_factor_and_row(saved, name, old, new, message):
    edit_text(saved, name, old, new)
    with pytest.raises(TableError, match=message) as caught:
        load(saved)
    assert str(caught.value).startswith(str(saved))
    assert "\n" not in str(caught.value)


def test_a_symlink_out_of_the_table_is_refused(saved, tmp_path):
    outside = tmp_path / "elsewhere.csv"
    shutil.move(saved / "factors/bonus.csv", outside)
    os.symlink(outside, saved / "factors/bonus.csv")
    with pytest.raises(TableError, match=r"factors/bonus.csv: factor 'bonus': the path resolves outside the table"):
        load(saved)
    inside = saved / "factors/bonus-real.csv"
    shutil.move(outside, inside)
    os.remove(saved / "factors/bonus.csv")
    os.symlink(inside, saved / "factors/bonus.csv")
    assert load(saved) == _with_exhibit_columns()  # a link that stays inside is fine


def test_constructor_refuses_what_load_refuses():
    with pytest.raises(TableError, match="overlap"):
        NumericFactor("age", "none", [-INF, 30, 25], [30, 40, INF], [1, 1, 1], [1, 1, 1])
    with pytest.raises(TableError, match="monotone 'up' must be one of"):
        NumericFactor("age", "up", [-INF], [INF], [1], [1])
    with pytest.raises(TableError, match=r"relativity nan must be finite"):
        CategoricalFactor("region", "none", ("A", "B"), [1, np.nan], [1, 1])
    with pytest.raises(TableError, match=r"uses '..'"):
        CategoricalFactor("region", "none", ("A",), [1], [1], file="factors/../../x.csv")


def test_exhibit_holds_cover_factor_and_selections_sheets(tmp_path):
    openpyxl = pytest.importorskip("openpyxl")
    write_exhibit(_with_exhibit_columns(), tmp_path / "exhibit.xlsx")
    book = openpyxl.load_workbook(tmp_path / "exhibit.xlsx")
    assert book.sheetnames == ["Cover", "age", "region", "bonus", "age__region", "Selections"]
    cover = {row[0]: row for row in book["Cover"].iter_rows(values_only=True) if row[0]}
    assert cover["Base rate"][1] == 200.0
    assert cover["Variable expense"][1] == 0.15
    assert cover["total_pure_premium"][1] == 250000.0
    assert cover["1"][4].startswith("Draft for review by a qualified actuary")
    age = list(book["age"].iter_rows(values_only=True))
    assert age[0] == (
        "Band",
        "Band label",
        "Lower (included)",
        "Upper (excluded)",
        "Indicated relativity",
        "Relativity (indicated, rounded)",
        "Exposure (policy-year)",
        "Credibility",
    )
    assert age[1] == ("below 25", "[-inf, 25)", None, 25.0, 1.4871, 1.5, 120.0, 0.6)
    region = list(book["region"].iter_rows(values_only=True))
    assert region[3] == ("Coast", None, 1.5, 220.0)
    grid = list(book["age__region"].iter_rows(values_only=True))
    assert grid[1] == ("age \\ region", "North", "South", "Coast")
    assert grid[2] == ("below 30", 1.0, 1.0, 1.125)


def test_exhibit_stores_level_names_as_text_never_as_formulas(tmp_path):
    """Issue 11: a level name from the book beginning with `=`, `+`, `-`, `@`, a tab or a carriage
    return is stored as text (no `<f>` formula element outside the cover's worked example), and a control
    character the format cannot hold is shown escaped as `\\xNN` instead of failing the write."""
    openpyxl = pytest.importorskip("openpyxl")
    import zipfile

    table = example_table()
    bonus = table.factor("bonus")
    keep = {bonus.fallback, bonus.base}
    names = iter(["=1+1", "@SUM(A1)", "bell\x07"])
    levels = tuple(level if level in keep else next(names, level) for level in bonus.levels)
    renamed = dataclasses.replace(bonus, levels=levels)
    table = dataclasses.replace(table, factors=tuple(renamed if f.name == "bonus" else f for f in table.factors))
    path = tmp_path / "exhibit.xlsx"
    write_exhibit(table, path)
    cover = "xl/worksheets/sheet1.xml"  # the cover, whose worked example holds the exhibit's own formulas
    with zipfile.ZipFile(path) as z:
        xml = b"".join(z.read(n) for n in z.namelist() if n.endswith(".xml") and n != cover)
        assert z.read(cover).count(b"<f>") == 5
    assert b"<f>" not in xml and b"<f " not in xml
    cells = [row[0] for row in openpyxl.load_workbook(path)["bonus"].iter_rows(min_row=2, max_row=4, values_only=True)]
    assert cells == [level.replace("\x07", "\\x07") for level in levels]
    assert "=1+1" in cells


@pytest.mark.parametrize("text", ["+A1", "-B2", "\t=1", "\r=1", '=HYPERLINK("x")'])
def test_exhibit_cell_text_is_never_a_formula(text):
    """Each of the usual formula-leading characters gives a text cell (openpyxl data type `s`)."""
    openpyxl = pytest.importorskip("openpyxl")
    from rating_tables.exhibit import _cell

    sheet = openpyxl.Workbook().active
    cell = _cell(sheet, 1, 1, text)
    assert cell.data_type == "s" and cell.value == text
