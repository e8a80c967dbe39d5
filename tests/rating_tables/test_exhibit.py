"""The exhibit workbook (rating_tables.write_exhibit; docs/rating-table.md, Files beside the format).

The worked example on the cover is checked three ways: against figures worked by hand from the
rating algorithm of docs/rating-table.md, against `rating_tables.rate` on the policy read back from
the sheet, and by evaluating the cover's own formulas with the small evaluator below (cell
references, numbers, + - * /, parentheses, ROUND with a tie away from zero as a spreadsheet rounds,
MAX). Tables are the invented ones of tests/_builders.py.
"""

from __future__ import annotations

import dataclasses
import math
import re

import numpy as np
import pandas as pd
import pytest

from rating_tables import CategoricalFactor, Loadings, NumericFactor, RatingTable, rate, write_exhibit
from rating_tables.exhibit import COVER_SHEET, SELECTIONS_SHEET, WORKED_EXAMPLE, band_words

from _builders import example_table

openpyxl = pytest.importorskip("openpyxl")

STEPS = (
    "Rate per exposure unit",
    "Term premium",
    "Term premium after the minimum",
    "Gross premium 1",
    "Gross premium 2",
)


def selected_table(minimum_premium: float = 120.0) -> RatingTable:
    """The example table as a selected table: current relativities on age and region, two selections."""
    table = example_table(minimum_premium)
    age = dataclasses.replace(table.factor("age"), current=[1.4, 1.0, 1.3])
    region = dataclasses.replace(table.factor("region"), current=[1.0, np.nan, 1.2], indicated=[1.0, 0.88, 1.46])
    return dataclasses.replace(
        table,
        factors=(age, region, *table.factors[2:]),
        stage="selected",
        selections=(
            {
                "factor": "age",
                "rule": "cap",
                "detail": "within +-10% of the current relativity",
                "reason": "Limit each band's change.",
                "applies_to": ["[-inf, 25)"],
                "off_balance": -0.0125,
            },
            {"factor": "region", "rule": "override Coast", "reason": "Repair costs.", "applies_to": [], "memo": "x"},
        ),
    )


def formula_table() -> RatingTable:
    """One categorical factor whose most exposed level besides the base is named `=1+1`."""
    kind = CategoricalFactor(
        "kind", "none", levels=("plain", "=1+1"), relativity=[1.0, 1.2], exposure=[10.0, 50.0], base="plain"
    )
    return RatingTable("formula-levels", "2027-01-01", 100.0, "policy-year", (kind,), Loadings(minimum_premium=50.0))


def _evaluate(sheet, coordinate: str, seen: tuple[str, ...] = ()) -> float:
    """The value of a cell, evaluating a formula of the forms the exhibit writes."""
    value = sheet[coordinate].value
    if not (isinstance(value, str) and sheet[coordinate].data_type == "f"):
        return float(value)
    assert coordinate not in seen, "circular reference"
    tokens = re.findall(r"[A-Z]+\d+|[A-Z]+(?=\()|\d+(?:\.\d+)?|[-+*/(),]", value[1:])
    assert "".join(tokens) == value[1:].replace(" ", ""), value
    position = 0

    def take() -> str:
        nonlocal position
        position += 1
        return tokens[position - 1]

    def atom() -> float:
        token = take()
        if token == "(":
            result = expression()
            assert take() == ")"
            return result
        if token == "-":
            return -atom()
        if token in ("ROUND", "MAX"):
            assert take() == "("
            args = [expression()]
            while take() == ",":
                args.append(expression())
            if token == "MAX":
                return max(args)
            x, digits = args
            scaled = abs(x) * 10 ** int(digits)
            return math.copysign(math.floor(scaled + 0.5), x) / 10 ** int(digits)
        if re.fullmatch(r"[A-Z]+\d+", token):
            return _evaluate(sheet, token, (*seen, coordinate))
        return float(token)

    def term() -> float:
        result = atom()
        while position < len(tokens) and tokens[position] in "*/":
            result = result * atom() if take() == "*" else result / atom()
        return result

    def expression() -> float:
        result = term()
        while position < len(tokens) and tokens[position] in "+-":
            result = result + term() if take() == "+" else result - term()
        return result

    result = expression()
    assert position == len(tokens), value
    return result


def _worked_rows(sheet) -> dict[str, int]:
    """Row number of each item of the worked example, by its column-A text."""
    rows = [row[0].value for row in sheet.iter_rows(max_col=1)]
    start = rows.index(WORKED_EXAMPLE)
    end = rows.index(None, start)
    return {rows[i]: i + 1 for i in range(start + 1, end)}


def _write(table: RatingTable, tmp_path, name: str = "exhibit.xlsx"):
    path = tmp_path / name
    write_exhibit(table, path)
    return path, openpyxl.load_workbook(path)


@pytest.mark.parametrize(
    ("minimum", "hand"),
    [
        # age 60: band [60, inf) at 1.25 (the band of most exposure besides the base [25, 60));
        # region North 1.0, bonus 02 1.0, age__region cell ([30, inf), North) 1.0. Rate 200 x 1.25 =
        # 250; term premium (250 x 1.10 + 30) / (1 - 0.15 - 0.05) = 381.25 (381.25000000000006 in
        # double precision, as in docs/rating-table.md's policy P2), so 381.25 and 190.625 -> 190.63.
        (120.0, (250.0, 381.25, 381.25, 381.25, 190.63)),
        # the same policy under a minimum premium of 400 per full term: 400 and 200.
        (400.0, (250.0, 381.25, 400.0, 400.0, 200.0)),
    ],
)
def test_the_worked_example_is_the_raters_to_the_cent(tmp_path, minimum, hand):
    table = selected_table(minimum)
    _, book = _write(table, tmp_path)
    sheet = book[COVER_SHEET]
    rows = _worked_rows(sheet)
    policy = {
        item[len("rel_") :]: sheet.cell(row=row, column=4).value
        for item, row in rows.items()
        if item.startswith("rel_") and sheet.cell(row=row, column=4).value is not None
    }
    assert policy == {"age": 60, "region": "North", "bonus": "02"}
    exposures = [sheet.cell(row=rows[f"Exposure {k}"], column=2).value for k in (1, 2)]
    assert exposures == [1.0, 0.5]
    rated = rate(table, pd.DataFrame({**{k: [v, v] for k, v in policy.items()}, "exposure": exposures}), "exposure")
    for factor in table.factors:
        assert sheet.cell(row=rows[f"rel_{factor.name}"], column=2).value == rated[f"rel_{factor.name}"].iloc[0]
    computed = [sheet.cell(row=rows[step], column=3).value for step in STEPS]
    evaluated = [_evaluate(sheet, sheet.cell(row=rows[step], column=2).coordinate) for step in STEPS]
    assert computed == pytest.approx(hand, abs=1e-9)
    assert evaluated == pytest.approx(hand, abs=1e-9)
    assert computed[3:] == rated["gross_premium"].tolist()  # to the cent: the same rounded amounts


def test_only_the_worked_example_holds_formulas(tmp_path):
    _, book = _write(selected_table(), tmp_path)
    formulas = {
        (sheet.title, cell.coordinate)
        for sheet in book.worksheets
        for row in sheet.iter_rows()
        for cell in row
        if cell.data_type == "f"
    }
    rows = _worked_rows(book[COVER_SHEET])
    assert formulas == {(COVER_SHEET, f"B{rows[step]}") for step in STEPS}


def test_a_level_named_like_a_formula_stays_text_on_the_cover_and_the_factor_sheet(tmp_path):
    _, book = _write(formula_table(), tmp_path)
    cover = book[COVER_SHEET]
    policy_cell = cover.cell(row=_worked_rows(cover)["rel_kind"], column=4)
    assert (policy_cell.value, policy_cell.data_type) == ("=1+1", "s")
    level = book["kind"]["A3"]
    assert (level.value, level.data_type) == ("=1+1", "s")
    rows = _worked_rows(cover)
    assert _evaluate(cover, f"B{rows['Gross premium 1']}") == pytest.approx(120.0, abs=1e-9)  # 100 x 1.2, no loadings


def test_the_bytes_depend_only_on_the_table(tmp_path):
    a, _ = _write(selected_table(), tmp_path, "a.xlsx")
    b, _ = _write(selected_table(), tmp_path, "b.xlsx")
    assert a.read_bytes() == b.read_bytes()


def test_every_sheet_is_set_up_for_print_with_draft_and_the_table_id(tmp_path):
    table = selected_table()
    _, book = _write(table, tmp_path)
    assert book.sheetnames == [COVER_SHEET, "age", "region", "bonus", "age__region", SELECTIONS_SHEET]
    for sheet in book.worksheets:
        assert sheet.freeze_panes in ("A2", "B2", "B3"), sheet.title
        assert sheet.print_area, sheet.title
        assert sheet.page_setup.orientation == "landscape" and sheet.page_setup.fitToWidth == 1
        assert sheet.sheet_properties.pageSetUpPr.fitToPage
        assert sheet.oddHeader.left.text == "DRAFT" and sheet.oddHeader.center.text == table.table_id
        assert "DRAFT" in sheet.oddFooter.left.text and sheet.oddFooter.right.text == "Page &P of &N"
        widths = [d.width for d in sheet.column_dimensions.values()]
        assert widths and all(8 <= w <= 90 for w in widths), sheet.title


def test_the_cover_says_it_in_words_with_formats(tmp_path):
    table = selected_table()
    _, book = _write(table, tmp_path)
    sheet = book[COVER_SHEET]
    cells = {row[0].value: row for row in sheet.iter_rows() if row[0].value}
    assert cells["Base rate"][1].value == 200.0 and cells["Base rate"][1].number_format == "#,##0.00"
    assert "money per exposure unit" in cells["Base rate"][4].value
    assert cells["LAE ratio"][1].number_format == "0.0%" and cells["Profit"][1].value == 0.05
    assert cells["Minimum premium"][1].number_format == "#,##0.00"
    assert "earned with the exposure" in cells["Minimum premium"][4].value
    assert cells["Stage"][1].value == "selected"
    assert "(1 - variable expense - profit)" in cells["Term premium"][4].value
    assert cells["1"][4].value.startswith("Draft for review by a qualified actuary")


def test_factor_sheets_show_bounds_as_numbers_current_and_change(tmp_path):
    _, book = _write(selected_table(), tmp_path)
    age = list(book["age"].iter_rows(values_only=True))
    assert age[0] == (
        "Band",
        "Band label",
        "Lower (included)",
        "Upper (excluded)",
        "Selected relativity",
        "Current relativity",
        "Change",
        "Exposure (policy-year)",
    )
    assert age[1][:6] == ("below 25", "[-inf, 25)", None, 25, 1.5, 1.4)
    assert age[1][6] == pytest.approx(1.5 / 1.4 - 1, rel=1e-12)
    assert age[3][:4] == ("60 and over", "[60, inf)", 60, None)
    assert any("one-way tables are in the run's report" in (row[0] or "") for row in age)
    region = list(book["region"].iter_rows(values_only=True))
    assert region[0][:5] == ("Level", "Indicated relativity", "Selected relativity", "Current relativity", "Change")
    assert region[2][3:5] == (None, None)  # no current relativity: no change
    assert [band_words(-np.inf, np.inf), band_words(25, 60)] == ["all values", "25 to below 60"]


def test_credibility_has_its_note(tmp_path):
    table = example_table()
    age = table.factor("age")
    age = NumericFactor("age", "none", age.lower, age.upper, age.relativity, age.exposure, credibility=[0.6, 1.0, 0.85])
    _, book = _write(dataclasses.replace(table, factors=(age, *table.factors[1:])), tmp_path)
    rows = list(book["age"].iter_rows(values_only=True))
    assert rows[0][-1] == "Credibility" and rows[1][-1] == 0.6
    assert any((row[0] or "").startswith("Credibility: ") and "Buhlmann-Straub" in row[0] for row in rows)


def test_the_selections_sheet_lists_every_selection_or_says_there_are_none(tmp_path):
    _, book = _write(selected_table(), tmp_path)
    rows = list(book[SELECTIONS_SHEET].iter_rows(values_only=True))
    assert rows[0] == (
        "No.",
        "Factor",
        "Rule",
        "Detail",
        "Bands or levels changed",
        "Off-balance",
        "Reason",
        "Other keys",
    )
    assert rows[1] == (
        1,
        "age",
        "cap",
        "within +-10% of the current relativity",
        "[-inf, 25)",
        -0.0125,
        "Limit each band's change.",
        None,
    )
    assert rows[2] == (2, "region", "override Coast", None, "(none)", None, "Repair costs.", '{"memo": "x"}')
    _, indicated = _write(example_table(), tmp_path, "indicated.xlsx")
    assert indicated[SELECTIONS_SHEET]["A2"].value == "no selections: indicated relativities"
