"""The rating-table exhibit: a fileable `.xlsx` workbook for reviewers (openpyxl, imported when called).

Sheets, in order:

- "Cover", in words: the table's identity and stage, the base rate and the loadings with their
  units (money as `#,##0.00`, shares as percentages), the rounding, the rating algorithm as a
  formula in words, how each factor rates a missing value and a level the table does not list,
  one worked example policy, the factor list, target and provenance, and the cautions. The worked
  example is the only place with formulas: its relativities are numbers, and each premium step is
  a formula on the cover's own cells (base rate, loadings, relativities, exposure) written by this
  module, with the value the rater computes beside it for a reader that does not recalculate.
- one sheet per factor: band (in words, its label `[lower, upper)`, bounds as numbers with an
  empty cell for an open end) or level, indicated, selected, current and change (when the table has them), exposure, credibility,
  the missing row last labelled `MISSING_LABEL`, and note rows (how credibility is computed, where
  the one-way statistics are); a two-way table as grids (rows: first factor's cells, columns:
  second factor's cells).
- "Selections": every selection of the table's `selections`, or a line saying there are none.

Every sheet has its header rows frozen, fitted column widths, a print area, landscape pages fitted
to the width, and a header and footer with the table id, the word DRAFT and the page number.
Text from the table (levels, names, reasons) is always stored as text, never as a formula (`_cell`).

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
from dataclasses import dataclass
from datetime import date, datetime, time
from typing import Any

import numpy as np
import pandas as pd

from rating_tables.rate import added_columns, premium_build_up, pure_premium, rate
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
COVER_SHEET = "Cover"
SELECTIONS_SHEET = "Selections"
#: The first cell of the worked example's header row on the cover (its column A text).
WORKED_EXAMPLE = "Worked example"
_PERCENT = "0.0%"
_CHANGE = "+0.0%;-0.0%;0.0%"
_OFF_BALANCE = "+0.00%;-0.00%;0.00%"
_EXPOSURE = "#,##0.00"
_CREDIBILITY = "0.00"
_WIDEST = 90  # characters: a column holding longer text is this wide and wraps
_CREDIBILITY_NOTE = (
    "Credibility: for the levels of an unordered categorical factor and the cells of a two-way table of a "
    "distilled (boosted) source, the Buhlmann-Straub credibility Z of the level's or cell's own claim frequency "
    "that was applied (the level's effect weighted towards the factor's mean effect, the cell's relativity "
    "towards 1); for numeric and ordered factors, and for a GLM source, the Buhlmann-Straub credibility of the "
    "band's or level's own experience towards its neighbouring bands (or the overall level), shown for the "
    "reviewer and not applied. Z = m / (m + v / a): m the exposure, v and a the within and between variance of "
    "the pure premium, estimated from the book."
)
_ONE_WAY_NOTE = (
    "Claims and observed loss cost per band or level are not part of the table folder (it holds the exposure "
    "only): the book's one-way tables are in the run's report (premiumlab report RUN --table TABLE)."
)


def write_exhibit(table: RatingTable, path: str | os.PathLike[str]) -> None:
    """Write the exhibit workbook of `table` to `path` (.xlsx).

    Needs openpyxl, imported here. The sheets are listed in the module docstring: a cover in words
    with a worked example policy (the only formulas of the workbook, written by this function on
    the cover's own cells), one sheet per factor, and the selections. Relativities are shown with
    `relativity_decimals` decimals, money with `premium_decimals`, exposure and credibility with 2,
    shares and changes as percentages; the cells hold the full values.

    Parameters
    ----------
    table : RatingTable
        The table to show.
    path : str or os.PathLike
        The workbook file to write (a file already there is replaced); its bytes depend only on
        `table`.
    """
    from openpyxl import Workbook
    from openpyxl.styles import Alignment, Font, PatternFill

    decimals = table.rounding.relativity_decimals
    money = "#,##0." + "0" * table.rounding.premium_decimals if table.rounding.premium_decimals else "#,##0"
    style = _Style(
        Font(bold=True),
        PatternFill("solid", fgColor="DDE4EE"),
        Alignment(wrap_text=True, vertical="top"),
        "0." + "0" * decimals if decimals else "0",
        money,
    )
    book = Workbook()
    cover = book.active
    cover.title = COVER_SHEET
    _cover(cover, table, style)
    notes: dict[str, list[int]] = {COVER_SHEET: []}  # per sheet, its rows of one text across the columns
    used = {COVER_SHEET.lower(), SELECTIONS_SHEET.lower()}
    for factor in table.factors:
        sheet = book.create_sheet(_sheet_name(factor.name, used))
        if isinstance(factor, InteractionFactor):
            notes[sheet.title] = _grids(sheet, factor, table, style)
        else:
            notes[sheet.title] = _main(sheet, factor, table, style)
    notes[SELECTIONS_SHEET] = _selections(book.create_sheet(SELECTIONS_SHEET), table, style)
    for sheet in book.worksheets:
        _fit_columns(sheet, style, skip={1} if sheet.title == COVER_SHEET else set(notes[sheet.title]))
        _spread_notes(sheet, notes[sheet.title], style)
        _page_setup(sheet, table.table_id)
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


@dataclass(frozen=True)
class _Style:
    bold: Any
    fill: Any
    wrap: Any
    relativity_format: str
    money_format: str

    def header(self, sheet: Any, row: int, values: list[Any]) -> None:
        for col, value in enumerate(values, start=1):
            cell = _cell(sheet, row, col, value)
            cell.font, cell.fill = self.bold, self.fill


def _cell(sheet: Any, row: int, column: int, value: Any, number_format: str | None = None) -> Any:
    """Put `value` in a cell; text is always stored as text, never as a formula: a label from the
    book that begins with `=`, `+`, `-`, `@`, a tab or a carriage return does not execute when the
    workbook is opened, and the control characters that a workbook cannot hold are shown escaped
    (`\\x07`) rather than refused (`_as_text`). The cover's worked example writes its own formulas
    with `_formula`, the one other way into a cell."""
    if not isinstance(value, str):
        cell = sheet.cell(row=row, column=column, value=value)
    else:
        cell = sheet.cell(row=row, column=column)
        cell.value = _as_text(value)  # openpyxl takes a text beginning with "=" for a formula ...
        cell.data_type = "s"  # ... so the type is set to text afterwards: no <f> element is written
    if number_format is not None:
        cell.number_format = number_format
    return cell


def _formula(sheet: Any, row: int, column: int, formula: str, number_format: str) -> Any:
    """Put a formula this module wrote (never text from the table) in a cell."""
    cell = sheet.cell(row=row, column=column, value=formula)
    cell.number_format = number_format
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


def band_words(lower: float, upper: float) -> str:
    """A band [lower, upper) in words, its open ends as words rather than infinities.

    Parameters
    ----------
    lower : float
        The band's lower edge, included (`-inf` for the first band), in the factor's unit.
    upper : float
        The band's upper edge, excluded (`inf` for the last band), same unit.

    Returns
    -------
    str
        `below 25` for [-inf, 25), `25 to below 60` for [25, 60), `60 and over` for [60, inf),
        `all values` for [-inf, inf); edges as exact text (`edge_text`).
    """
    if math.isinf(lower) and math.isinf(upper):
        return "all values"
    if math.isinf(lower):
        return f"below {edge_text(upper)}"
    if math.isinf(upper):
        return f"{edge_text(lower)} and over"
    return f"{edge_text(lower)} to below {edge_text(upper)}"


def _number(x: float) -> float | None:
    """A cell for a float: None when missing or infinite (an open band end is said in words)."""
    return float(x) if math.isfinite(x) else None


# ------------------------------------------------------------------ cover


class _Cover:
    """Writes the cover row by row: A item, B figure, C computed value, D policy value, E words."""

    def __init__(self, sheet: Any, style: _Style) -> None:
        self.sheet, self.style, self.row = sheet, style, 1

    def section(self, title: str, columns: tuple[str, ...] = ("", "", "", "")) -> None:
        self.row += 1
        self.style.header(self.sheet, self.row, [title, *columns])
        self.row += 1

    def line(self, item: str, figure: Any = None, number_format: str | None = None, words: str | None = None) -> int:
        _cell(self.sheet, self.row, 1, item)
        if figure is not None:
            _cell(self.sheet, self.row, 2, figure, number_format)
        if words is not None:
            _cell(self.sheet, self.row, 5, words)
        self.row += 1
        return self.row - 1


def _cover(sheet: Any, table: RatingTable, style: _Style) -> None:
    loadings, unit = table.loadings, table.exposure_unit
    cover = _Cover(sheet, style)
    _cell(sheet, 1, 1, f"Rating table exhibit: {table.table_id} (DRAFT)").font = style.bold
    cover.section("Rating table")
    cover.line("Table id", table.table_id, words="the table's identifier (table.json, table_id)")
    stage = (
        "selected: an actuary's selections applied to the indicated relativities (sheet Selections)"
        if table.stage == "selected"
        else "indicated: the relativities as the model indicated them, rounded; no selections applied"
    )
    cover.line("Stage", table.stage, words=stage)
    cover.line(
        "Effective date", date.fromisoformat(table.effective_date), "yyyy-mm-dd", "the date the rates take effect"
    )
    cover.line("Exposure unit", unit, words=f"one full term is 1.0 {unit}")
    base = cover.line(
        "Base rate",
        table.base_rate,
        style.money_format,
        f"money per exposure unit ({unit}): the pure premium of one full term of a risk at relativity 1 on "
        f"every factor (the cell holds the full value, {table.base_rate!r})",
    )
    cover.section("Loadings")
    lae = cover.line("LAE ratio", loadings.lae_ratio, _PERCENT, "loss adjustment expense, a share of the pure premium")
    fixed = cover.line("Fixed expense", loadings.fixed_expense, style.money_format, f"money per exposure unit ({unit})")
    variable = cover.line("Variable expense", loadings.variable_expense, _PERCENT, "a share of the gross premium")
    profit = cover.line("Profit", loadings.profit, _PERCENT, "a share of the gross premium")
    minimum = cover.line(
        "Minimum premium",
        loadings.minimum_premium,
        style.money_format,
        f"money per full term (one {unit}), earned with the exposure: a policy of exposure e pays at least "
        "the minimum premium x e",
    )
    cover.section("Rounding")
    cover.line("Relativities", table.rounding.relativity_decimals, "0", "decimals the relativities were rounded to")
    cover.line(
        "Premiums",
        table.rounding.premium_decimals,
        "0",
        "decimals of every money amount; the rater rounds half to even",
    )
    _algorithm(cover, table)
    cover.section("Missing values and unknown levels")
    for name, rule in _stand_in_rules(table):
        cover.line(name, words=rule)
    _worked_example(cover, table, {"base": base, "lae": lae, "fixed": fixed, "variable": variable}, profit, minimum)
    cover.section("Factors")
    for factor in table.factors:
        cover.line(factor.name, words=_kind(factor))
    for title, items in (("Target", table.target), ("Provenance", table.provenance)):
        cover.section(title)
        for key, value in items.items():
            if isinstance(value, (int, float)) and not isinstance(value, bool):
                cover.line(key, value, "#,##0.00####")
            else:
                cover.line(key, words=str(_plain(value)))
    cover.section("Cautions")
    for i, caution in enumerate(table.cautions):
        cover.line(str(i + 1), words=caution)
    sheet.freeze_panes = "A2"


def _algorithm(cover: _Cover, table: RatingTable) -> None:
    decimals = table.rounding.premium_decimals
    names = " x ".join(f"rel_{f.name}" for f in table.factors) or "(no factors)"
    cover.section("Rating algorithm")
    cover.line("Relativities", words="one relativity per factor, from the factor's sheet, in table order")
    cover.line("Rate", words=f"rate per exposure unit = base rate x {names}, multiplied in this order")
    cover.line(
        "Term premium",
        words="term premium = (rate x (1 + LAE ratio) + fixed expense) / (1 - variable expense - profit): "
        "the gross premium of one full term",
    )
    cover.line(
        "Gross premium",
        words=f"gross premium = max(minimum premium, term premium) x exposure, rounded to {decimals} decimals",
    )


@dataclass(frozen=True)
class _PolicyValue:
    factor: MainFactor
    value: float | str
    words: str


def _base_index(factor: MainFactor) -> int:
    """The base band or level: the named `base` level, else the first relativity closest to 1."""
    if isinstance(factor, CategoricalFactor) and factor.base is not None:
        return factor.levels.index(factor.base)
    return int(np.argmin(np.abs(np.log(factor.relativity))))


def _band_value(lower: float, upper: float) -> float:
    """A value inside [lower, upper): the lower edge, else one below the upper edge, else 0."""
    if math.isfinite(lower):
        return float(lower)
    return float(upper) - 1.0 if math.isfinite(upper) else 0.0


def example_policy(table: RatingTable) -> list[_PolicyValue]:
    """The cover's worked example policy: every main factor at its base band or level, but the
    first main factor at its non-base band or level of most exposure (the first on a tie).

    Parameters
    ----------
    table : RatingTable
        The table the exhibit shows.

    Returns
    -------
    list of _PolicyValue
        Per main factor in table order: the value of the policy (a number inside the band, its
        lower edge when finite; or the level as text) and its description in words.
    """
    policy = []
    for n, factor in enumerate(table.main_factors):
        i = base = _base_index(factor)
        if n == 0 and len(factor.relativity) > 1:
            exposure = np.where(np.arange(len(factor.relativity)) == base, -np.inf, factor.exposure)
            i = int(np.argmax(exposure))
        kind = "band" if isinstance(factor, NumericFactor) else "level"
        role = "base" if i == base else f"the {kind} of most exposure other than the base"
        if isinstance(factor, NumericFactor):
            lo, hi = float(factor.lower[i]), float(factor.upper[i])
            value: float | str = _band_value(lo, hi)
            words = f"value {edge_text(float(value))}: band {band_words(lo, hi)} ({role})"
        else:
            value = factor.levels[i]
            words = f"level {value} ({role})"
        policy.append(_PolicyValue(factor, value, words))
    return policy


def _exposure_column(table: RatingTable) -> str:
    taken = {f.name for f in table.factors} | set(added_columns(table))
    name = "exposure"
    while name in taken:
        name += "_"
    return name


def example_book(table: RatingTable, policy: list[_PolicyValue], exposures: tuple[float, ...]) -> pd.DataFrame:
    """The worked example policy as a book for `rating_tables.rate`, one row per exposure.

    Parameters
    ----------
    table : RatingTable
        The table the exhibit shows.
    policy : list of _PolicyValue
        `example_policy(table)`.
    exposures : tuple of float
        The exposures to rate the policy for, in the table's exposure unit.

    Returns
    -------
    pandas.DataFrame
        A column per main factor (numbers as float64, levels as text) and the exposure column
        (`exposure`, with underscores added when a factor or rated column has that name).
    """
    columns: dict[str, Any] = {
        p.factor.name: pd.Series([p.value] * len(exposures), dtype=object if isinstance(p.value, str) else float)
        for p in policy
    }
    columns[_exposure_column(table)] = np.array(exposures, dtype=float)
    return pd.DataFrame(columns)


_EXPOSURES = (1.0, 0.5)


def _worked_example(cover: _Cover, table: RatingTable, rows: dict[str, int], profit: int, minimum: int) -> None:
    """The worked example: relativities as numbers, each premium step a formula on the cover's
    cells with the rater's value beside it (column C), the policy's values in column D."""
    sheet, style = cover.sheet, cover.style
    policy = example_policy(table)
    book = example_book(table, policy, _EXPOSURES)
    rated = rate(table, book, _exposure_column(table))
    per_unit = float(pure_premium(table, book.iloc[:1], annual=True)[0])
    # the rater's own build-up, kept to 12 decimals, gives the term premium before and after the minimum
    one = (np.array([per_unit]), np.ones(1), table.loadings, 12)
    term = float(premium_build_up(*one, apply_minimum=False)["gross_premium"][0])
    charged = float(premium_build_up(*one)["gross_premium"][0])
    first = policy[0].words if policy else "no factors"
    cover.section(WORKED_EXAMPLE, ("Figure", "Computed", "Policy value", "Working"))
    cover.line(
        "Policy",
        words=f"every factor at its base band or level but {policy[0].factor.name if policy else '-'}, {first}. "
        "Column B holds numbers and formulas on this sheet's cells, column C the value the rater computes.",
    )
    values = {p.factor.name: p for p in policy}
    rel_rows = []
    for factor in table.factors:
        rel = float(rated[f"rel_{factor.name}"].iloc[0])
        if isinstance(factor, InteractionFactor):
            a, b = factor.of
            words = f"two-way table: the cell of {a} {_shown(values[a].value)} and {b} {_shown(values[b].value)}"
            row = cover.line(f"rel_{factor.name}", rel, style.relativity_format, words)
        else:
            row = cover.line(f"rel_{factor.name}", rel, style.relativity_format, values[factor.name].words)
            _cell(sheet, row, 4, values[factor.name].value)
        rel_rows.append(row)
    product = "*".join(f"B{r}" for r in [rows["base"], *rel_rows])
    at = cover.row
    steps = [
        ("Rate per exposure unit", f"={product}", per_unit, "base rate x the relativities above, in this order"),
        (
            "Term premium",
            f"=(B{at}*(1+B{rows['lae']})+B{rows['fixed']})/(1-B{rows['variable']}-B{profit})",
            term,
            "(rate x (1 + LAE ratio) + fixed expense) / (1 - variable expense - profit)",
        ),
        (
            "Term premium after the minimum",
            f"=MAX(B{minimum},B{at + 1})",
            charged,
            "at the minimum premium" if term < table.loadings.minimum_premium else "above the minimum premium",
        ),
    ]
    for item, formula, value, words in steps:
        row = cover.line(item, words=words)
        _formula(sheet, row, 2, formula, style.money_format)
        _cell(sheet, row, 3, value, style.money_format)
    decimals = table.rounding.premium_decimals
    for k, exposure in enumerate(_EXPOSURES):
        share = "one full term" if exposure == 1 else f"{exposure:g} of a term"
        exposure_row = cover.line(f"Exposure {k + 1}", exposure, "0.00", f"{share} ({table.exposure_unit})")
        row = cover.line(
            f"Gross premium {k + 1}",
            words=f"max(minimum premium, term premium) x exposure {k + 1}, rounded to {decimals} decimals "
            "(the sheet's ROUND takes a tie away from zero, the rater to even: they differ only at an exact tie)",
        )
        _formula(sheet, row, 2, f"=ROUND(B{at + 2}*B{exposure_row},{decimals})", style.money_format)
        _cell(sheet, row, 3, float(rated["gross_premium"].iloc[k]), style.money_format)


def _shown(value: float | str) -> str:
    return value if isinstance(value, str) else edge_text(value)


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


# ------------------------------------------------------------------ factor sheets


def _value_columns(factor: Factor, table: RatingTable, style: _Style) -> list[tuple[str, str, str]]:
    """(header, attribute, number format) of the value columns the factor has, in sheet order;
    `change` (selected / current - 1) follows `current` when the factor has it."""
    candidates = [
        ("Indicated relativity", "indicated", style.relativity_format),
        (_relativity_title(table), "relativity", style.relativity_format),
        ("Current relativity", "current", style.relativity_format),
        ("Change", "change", _CHANGE),
        (f"Exposure ({table.exposure_unit})", "exposure", _EXPOSURE),
        ("Credibility", "credibility", _CREDIBILITY),
    ]
    has = {name: name == "change" or getattr(factor, name) is not None for _, name, _ in candidates}
    has["change"] = has["current"]
    return [c for c in candidates if has[c[1]]]


def _relativity_title(table: RatingTable) -> str:
    """The heading of the `relativity` column: selected, or the indicated one rounded."""
    return "Selected relativity" if table.stage == "selected" else "Relativity (indicated, rounded)"


def _change(selected: float, current: float) -> float:
    """selected / current - 1, NaN without a current relativity."""
    return selected / current - 1 if math.isfinite(current) else math.nan


def _main(sheet: Any, factor: NumericFactor | CategoricalFactor, table: RatingTable, style: _Style) -> list[int]:
    """Write the sheet of a main factor; returns the rows of its notes."""
    keys: list[list[Any]]
    if isinstance(factor, NumericFactor):
        head = ["Band", "Band label", "Lower (included)", "Upper (excluded)"]
        keys = [
            [band_words(lo, hi), label, _number(lo), _number(hi)]
            for label, lo, hi in zip(factor.labels(), factor.lower.tolist(), factor.upper.tolist())
        ]
    else:
        head = ["Level"]
        keys = [[level] for level in factor.levels]
    columns = _value_columns(factor, table, style)
    names = [name for _, name, _ in columns]
    rows: list[Any] = [{name: getattr(factor, name)[i] for name in names if name != "change"} for i in range(len(keys))]
    if factor.missing is not None:
        keys.append([MISSING_LABEL] + [None] * (len(head) - 1))
        rows.append({name: getattr(factor.missing, name) for name in names if name != "change"})
    style.header(sheet, 1, head + [title for title, _, _ in columns])
    for i, (key, row) in enumerate(zip(keys, rows), start=2):
        if "change" in names:
            row["change"] = _change(row["relativity"], row["current"])
        for j, value in enumerate(key, start=1):
            _cell(sheet, i, j, value)
        for j, (_, name, number_format) in enumerate(columns, start=len(key) + 1):
            _cell(sheet, i, j, _number(row[name]), number_format)
    notes = []
    if isinstance(factor, NumericFactor):
        notes.append(
            "A band holds the values from its lower edge (included) to its upper edge (excluded); its label "
            "[lower, upper) is the one `premiumlab select` and the Selections sheet use."
        )
    if "change" in names:
        notes.append("Change = selected relativity / current relativity - 1.")
    if "credibility" in names:
        notes.append(_CREDIBILITY_NOTE)
    notes.append(_ONE_WAY_NOTE)
    sheet.freeze_panes = "B2"
    sheet.print_title_rows = "1:1"
    return _notes(sheet, len(keys) + 3, notes)


def _notes(sheet: Any, row: int, notes: list[str]) -> list[int]:
    """Write one note per row from `row` on, in column A; returns their rows."""
    for i, note in enumerate(notes):
        _cell(sheet, row + i, 1, note)
    return list(range(row, row + len(notes)))


def _headings(cells: Cells) -> list[str]:
    if isinstance(cells, Bands):
        return [band_words(lo, hi) for lo, hi in zip(cells.lower.tolist(), cells.upper.tolist())]
    return list(cells)


def _grids(sheet: Any, factor: InteractionFactor, table: RatingTable, style: _Style) -> list[int]:
    """Write the grids of a two-way table; returns the rows of the grids' titles and of the notes."""
    a, b = factor.of
    rows, cols = _headings(factor.a_cells), _headings(factor.b_cells)
    grids = [
        (_relativity_title(table), factor.relativity, style.relativity_format),
        ("Indicated relativity", factor.indicated, style.relativity_format),
        ("Current relativity", factor.current, style.relativity_format),
        ("Exposure", factor.exposure, _EXPOSURE),
        ("Credibility", factor.credibility, _CREDIBILITY),
    ]
    top, titles = 1, []
    for title, matrix, number_format in grids:
        if matrix is None:
            continue
        style.header(sheet, top, [f"{title}: {a} (rows) by {b} (columns)"])
        titles.append(top)
        style.header(sheet, top + 1, [f"{a} \\ {b}", *cols])
        for i, label in enumerate(rows):
            _cell(sheet, top + 2 + i, 1, label).font = style.bold
            for j in range(len(cols)):
                _cell(sheet, top + 2 + i, 2 + j, _number(matrix[i, j]), number_format)
        top += len(rows) + 3
    notes = ["A two-way table has no missing cell: a row missing on either side takes 1.0 from it."]
    if factor.credibility is not None:
        notes.append(_CREDIBILITY_NOTE)
    sheet.freeze_panes = "B3"
    return titles + _notes(sheet, top, notes)


# ------------------------------------------------------------------ selections

_SELECTION_KEYS = ("factor", "rule", "detail", "applies_to", "off_balance", "reason")


def _selections(sheet: Any, table: RatingTable, style: _Style) -> list[int]:
    """Write the Selections sheet; returns the rows of its notes."""
    head = ["No.", "Factor", "Rule", "Detail", "Bands or levels changed", "Off-balance", "Reason"]
    other = sorted({k for s in table.selections for k in s if k not in _SELECTION_KEYS})
    style.header(sheet, 1, head + (["Other keys"] if other else []))
    sheet.freeze_panes = "A2"
    sheet.print_title_rows = "1:1"
    if not table.selections:
        none = "no selections: indicated relativities" if table.stage == "indicated" else "no selections recorded"
        return _notes(sheet, 2, [none])
    for i, selection in enumerate(table.selections, start=2):
        changed = selection.get("applies_to")
        row = [
            i - 1,
            selection.get("factor"),
            selection.get("rule"),
            selection.get("detail"),
            ("; ".join(map(str, changed)) or "(none)") if isinstance(changed, list) else changed,
            selection.get("off_balance"),
            selection.get("reason"),
        ]
        for j, value in enumerate(row, start=1):
            if value is not None:
                _cell(sheet, i, j, _plain(value), _OFF_BALANCE if j == 6 else None)
        if other:
            extra = {k: selection[k] for k in other if k in selection}
            _cell(sheet, i, len(head) + 1, json.dumps(extra, ensure_ascii=False) if extra else None)
    return _notes(
        sheet,
        len(table.selections) + 3,
        [
            "Selections in the order applied; bands as [lower, upper), lower included, upper excluded.",
            "Off-balance: the change the selection made to the total pure premium of the training rows at the "
            "indicated base rate (total after / total before - 1); the base rate corrects their sum.",
        ],
    )


# ------------------------------------------------------------------ layout and print


def _fit_columns(sheet: Any, style: _Style, skip: set[int]) -> None:
    """Each column as wide as its widest text (numbers count 12 characters), 8 to `_WIDEST`
    characters; text wider than that wraps. Rows in `skip` (notes, the cover's title) do not count."""
    from openpyxl.utils import get_column_letter

    widths: dict[int, int] = {}
    for row in sheet.iter_rows():
        for cell in row:
            if cell.value is None or cell.row in skip:
                continue
            width = 12
            if isinstance(cell.value, str) and cell.data_type == "s":
                width = max(len(line) for line in cell.value.split("\n"))
                if width > _WIDEST:
                    cell.alignment = style.wrap
            widths[cell.column] = max(widths.get(cell.column, 0), width)
    for column, width in widths.items():
        sheet.column_dimensions[get_column_letter(column)].width = min(max(width + 2, 8), _WIDEST)


def _spread_notes(sheet: Any, rows: list[int], style: _Style) -> None:
    """Merge each row of one text (a note, a grid's title) across the sheet's columns and wrap it,
    the row tall enough for its lines (about one character per unit of column width), so that it
    prints inside the page."""
    from openpyxl.utils import get_column_letter

    columns = max(sheet.max_column, 1)
    width = sum(sheet.column_dimensions[get_column_letter(c)].width or 8 for c in range(1, columns + 1))
    for row in rows:
        cell = sheet.cell(row=row, column=1)
        cell.alignment = style.wrap
        if columns > 1:
            sheet.merge_cells(start_row=row, start_column=1, end_row=row, end_column=columns)
        sheet.row_dimensions[row].height = 15 * math.ceil(len(str(cell.value)) / max(width - 2, 1))


def _page_setup(sheet: Any, table_id: str) -> None:
    """Print area, landscape fitted to the page width, and the header and footer with the table
    id, DRAFT and the page number (`&` doubled in header text, which Excel reads as a code)."""
    sheet.print_area = f"A1:{sheet.cell(row=sheet.max_row, column=sheet.max_column).coordinate}"
    sheet.page_setup.orientation = "landscape"
    sheet.page_setup.fitToWidth = 1
    sheet.page_setup.fitToHeight = 0
    sheet.sheet_properties.pageSetUpPr.fitToPage = True
    shown = _as_text(table_id)[:120].replace("&", "&&")
    sheet.oddHeader.left.text = "DRAFT"
    sheet.oddHeader.center.text = shown
    sheet.oddHeader.right.text = "&A"
    sheet.oddFooter.left.text = f"{shown}: DRAFT for review by a qualified actuary"
    sheet.oddFooter.right.text = "Page &P of &N"
