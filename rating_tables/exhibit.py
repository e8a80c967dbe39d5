"""The rating-table exhibit: an `.xlsx` workbook for reviewers (openpyxl, imported when called).

Sheet "Summary": table id, effective date, exposure unit, base rate, loadings, rounding, target,
provenance, cautions, the factor list, and how each factor rates a missing value and a level the
table does not list. Then one sheet per factor: band or level, indicated relativity (when the
table carries it), selected relativity, exposure and credibility, and the missing row last,
labelled `MISSING_LABEL`; a two-way table as grids (rows: first factor's cells, columns: second
factor's cells).

The bytes depend only on the table: the workbook's created and modified properties are the table's
effective date (midnight), and every zip member carries the zip format's first date, 1980-01-01.
"""

from __future__ import annotations

import io
import json
import math
import os
import re
import zipfile
from datetime import date, datetime, time
from typing import Any

from rating_tables.table import (
    MISSING_LABEL,
    Bands,
    CategoricalFactor,
    Cells,
    Factor,
    InteractionFactor,
    MainFactor,
    NumericFactor,
    RatingTable,
    edge_text,
)

_FORBIDDEN = set("[]:*?/\\")
#: The characters an .xlsx cell cannot hold (openpyxl's ILLEGAL_CHARACTERS_RE, written out here so
#: that openpyxl stays imported only when a workbook is written).
_ILLEGAL = re.compile(r"[\x00-\x08\x0b-\x0c\x0e-\x1f]")
_ZIP_DATE = (1980, 1, 1, 0, 0, 0)
_CORE_PART = "docProps/core.xml"


def write_exhibit(table: RatingTable, path: str | os.PathLike[str]) -> None:
    """Write the exhibit workbook of `table` to `path` (.xlsx).

    Needs openpyxl, imported here. The sheets are listed in the module docstring; relativities are
    shown with `relativity_decimals` decimals, exposure and credibility with 2; infinite
    band edges as the text `-inf` and `inf`.

    Parameters
    ----------
    table : RatingTable
        The table to show.
    path : str or os.PathLike
        The workbook file to write (a file already there is replaced); its bytes depend only on
        `table`.
    """
    from openpyxl import Workbook
    from openpyxl.styles import Font, PatternFill

    style = _Style(
        Font(bold=True),
        PatternFill("solid", fgColor="DDE4EE"),
        "0." + "0" * table.rounding.relativity_decimals if table.rounding.relativity_decimals else "0",
    )
    book = Workbook()
    summary = book.active
    summary.title = "Summary"
    _summary(summary, table, style)
    used = {"summary"}
    for factor in table.factors:
        sheet = book.create_sheet(_sheet_name(factor.name, used))
        if isinstance(factor, InteractionFactor):
            _grids(sheet, factor, style)
        else:
            _main(sheet, factor, style)
    _save_fixed(book, datetime.combine(date.fromisoformat(table.effective_date), time()), path)


def _save_fixed(book: Any, stamp: datetime, path: str | os.PathLike[str]) -> None:
    """Save `book` with `stamp` as created and modified time and fixed zip member dates.

    openpyxl stamps `modified` with the clock while saving, so the document-properties part is
    serialised again after the stamp is set back, the way openpyxl's own writer serialises it.
    """
    from openpyxl.xml.functions import tostring

    book.properties.created = stamp
    buffer = io.BytesIO()
    book.save(buffer)
    book.properties.modified = stamp
    core = tostring(book.properties.to_tree())
    with zipfile.ZipFile(buffer) as source, zipfile.ZipFile(os.fspath(path), "w", zipfile.ZIP_DEFLATED) as out:
        for member in source.infolist():
            fixed = zipfile.ZipInfo(member.filename, date_time=_ZIP_DATE)
            fixed.external_attr = 0o600 << 16
            out.writestr(
                fixed,
                core if member.filename == _CORE_PART else source.read(member),
                compress_type=zipfile.ZIP_DEFLATED,
            )


class _Style:
    def __init__(self, bold: Any, fill: Any, relativity_format: str) -> None:
        self.bold, self.fill, self.relativity_format = bold, fill, relativity_format

    def header(self, sheet: Any, row: int, values: list[Any]) -> None:
        for col, value in enumerate(values, start=1):
            cell = _cell(sheet, row, col, value)
            cell.font, cell.fill = self.bold, self.fill


def _cell(sheet: Any, row: int, column: int, value: Any) -> Any:
    """Put `value` in a cell; text is always stored as text, never as a formula: a label from the
    book that begins with `=`, `+`, `-`, `@`, a tab or a carriage return does not execute when the
    workbook is opened, and the control characters that a workbook cannot hold are shown escaped
    (`\\x07`) rather than refused (`_as_text`)."""
    if not isinstance(value, str):
        return sheet.cell(row=row, column=column, value=value)
    cell = sheet.cell(row=row, column=column)
    cell.value = _as_text(value)  # openpyxl takes a text beginning with "=" for a formula ...
    cell.data_type = "s"  # ... so the type is set to text afterwards: no <f> element is written
    return cell


def _as_text(value: str) -> str:
    """`value` with each character a workbook cannot hold (the C0 controls but tab, line feed and
    carriage return) written as the visible escape `\\xNN`."""
    return _ILLEGAL.sub(lambda m: f"\\x{ord(m.group()):02x}", value)


def _sheet_name(name: str, used: set[str]) -> str:
    base = "".join("_" if ch in _FORBIDDEN else ch for ch in _as_text(name))[:28].strip("'") or "factor"
    candidate, n = base, 1
    while candidate.lower() in used:
        n += 1
        candidate = f"{base}~{n}"
    used.add(candidate.lower())
    return candidate


def _plain(value: Any) -> Any:
    """A cell value: numbers and text as they are, other JSON values as compact JSON text."""
    if isinstance(value, (str, int, float)) and not isinstance(value, bool):
        return value
    return json.dumps(value, ensure_ascii=False)


def _summary(sheet: Any, table: RatingTable, style: _Style) -> None:
    sections: list[tuple[str, list[tuple[str, Any]]]] = [
        (
            "Rating table",
            [
                ("Table id", table.table_id),
                ("Effective date", table.effective_date),
                ("Exposure unit", table.exposure_unit),
                ("Base rate", table.base_rate),
            ],
        ),
        ("Loadings", [(k, getattr(table.loadings, k)) for k in table.loadings.__dataclass_fields__]),
        ("Rounding", [(k, getattr(table.rounding, k)) for k in table.rounding.__dataclass_fields__]),
        ("Target", list(table.target.items())),
        ("Provenance", list(table.provenance.items())),
        ("Cautions", [(str(i + 1), c) for i, c in enumerate(table.cautions)]),
        ("Factors", [(f.name, _kind(f)) for f in table.factors]),
        ("Missing values and unknown levels", _stand_in_rules(table)),
    ]
    row = 1
    for title, items in sections:
        style.header(sheet, row, [title, ""])
        row += 1
        for key, value in items:
            _cell(sheet, row, 1, key)
            _cell(sheet, row, 2, _plain(value))
            row += 1
        row += 1
    sheet.column_dimensions["A"].width = 24
    sheet.column_dimensions["B"].width = 100


def _stand_in_rules(table: RatingTable) -> list[tuple[str, str]]:
    """Per main factor, how the rater treats a missing value and a level the table does not list
    (docs/rating-table.md, Rating algorithm); then the rule of the two-way tables."""
    rules = [(f.name, _stand_in_rule(f)) for f in table.main_factors]
    if table.interactions:
        rules.append(("two-way tables", "a row whose value is missing on either side takes 1.0 from the two-way table"))
    return rules


def _stand_in_rule(factor: MainFactor) -> str:
    if factor.missing is None:
        missing = "a missing value is refused (no missing row)"
    else:
        missing = f"a missing value is rated at the missing row, relativity {edge_text(factor.missing.relativity)}"
    if isinstance(factor, NumericFactor):
        return missing
    if factor.fallback is not None:
        unknown = f"rated at the fallback level {factor.fallback!r}"
    elif factor.base is not None:
        unknown = f"rated at the base level {factor.base!r} (no fallback named)"
    else:
        return f"{missing}; a level not in the table is refused (no fallback or base level)"
    return f"{missing}; a level not in the table is {unknown}, or refused with strict levels"


def _kind(factor: Factor) -> str:
    if isinstance(factor, InteractionFactor):
        return f"two-way table of {factor.of[0]} and {factor.of[1]}"
    kind = "numeric" if isinstance(factor, NumericFactor) else "categorical"
    return f"{kind}, monotone {factor.monotone}"


def _number(x: float) -> float | str | None:
    """A cell for a float: None when missing, text for infinite edges (Excel has no infinity)."""
    if math.isnan(x):
        return None
    return float(x) if math.isfinite(x) else edge_text(x)


def _main(sheet: Any, factor: NumericFactor | CategoricalFactor, style: _Style) -> None:
    keys: list[list[Any]]
    if isinstance(factor, NumericFactor):
        head = ["Band", "Lower", "Upper"]
        keys = [[label, _number(lo), _number(hi)] for label, lo, hi in zip(factor.labels(), factor.lower, factor.upper)]
    else:
        head = ["Level"]
        keys = [[level] for level in factor.levels]
    candidates = [
        ("Indicated relativity", "indicated", style.relativity_format),
        ("Selected relativity", "relativity", style.relativity_format),
        ("Exposure", "exposure", "#,##0.00"),
        ("Credibility", "credibility", "0.00"),
    ]
    columns = [
        (title, name, number_format) for title, name, number_format in candidates if getattr(factor, name) is not None
    ]
    rows = [(key, [getattr(factor, name)[i] for _, name, _ in columns]) for i, key in enumerate(keys)]
    if factor.missing is not None:
        label: list[Any] = [MISSING_LABEL] + [None] * (len(head) - 1)
        rows.append((label, [getattr(factor.missing, name) for _, name, _ in columns]))
    style.header(sheet, 1, head + [title for title, _, _ in columns])
    for i, (key, values) in enumerate(rows):
        for j, value in enumerate(key, start=1):
            _cell(sheet, i + 2, j, value)
        for j, ((_, _, number_format), value) in enumerate(zip(columns, values), start=len(key) + 1):
            cell = _cell(sheet, i + 2, j, _number(value))
            cell.number_format = number_format
    for j in range(1, len(head) + len(columns) + 1):
        sheet.column_dimensions[sheet.cell(row=1, column=j).column_letter].width = 20


def _headings(cells: Cells) -> list[str]:
    return cells.labels() if isinstance(cells, Bands) else list(cells)


def _grids(sheet: Any, factor: InteractionFactor, style: _Style) -> None:
    a, b = factor.of
    rows, cols = _headings(factor.a_cells), _headings(factor.b_cells)
    grids = [
        ("Selected relativity", factor.relativity, style.relativity_format),
        ("Indicated relativity", factor.indicated, style.relativity_format),
        ("Exposure", factor.exposure, "#,##0.00"),
        ("Credibility", factor.credibility, "0.00"),
    ]
    top = 1
    for title, matrix, number_format in grids:
        if matrix is None:
            continue
        style.header(sheet, top, [f"{title}: {a} (rows) by {b} (columns)"])
        style.header(sheet, top + 1, [f"{a} \\ {b}", *cols])
        for i, label in enumerate(rows):
            _cell(sheet, top + 2 + i, 1, label).font = style.bold
            for j in range(len(cols)):
                cell = _cell(sheet, top + 2 + i, 2 + j, _number(matrix[i, j]))
                cell.number_format = number_format
        top += len(rows) + 3
    sheet.column_dimensions["A"].width = 24
