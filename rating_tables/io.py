"""Reading and writing the rating-table folder of docs/rating-table.md (`table.json` + `factors/NAME.csv`).

Numbers are written as Python's shortest exact repr (`-inf`/`inf` for open band ends), so that
save then load gives an equal table; output bytes depend only on the table (no timestamps).
Every problem found on reading raises TableError naming the table folder, the file, the factor
and the 1-based CSV data row or the JSON key.
"""

from __future__ import annotations

import csv
import io
import json
import os
import re
from pathlib import Path
from typing import Any, TypeVar

import numpy as np
import numpy.typing as npt

from rating_tables.errors import TableError
from rating_tables.table import (
    OPTIONAL_COLUMNS,
    TABLE_JSON,
    Bands,
    CategoricalFactor,
    Cells,
    Factor,
    InteractionFactor,
    Loadings,
    MissingRow,
    NumericFactor,
    RatingTable,
    Rounding,
    check_file,
    data_row,
    missing_row,
)

FORMAT = "premiumlab.rating-table"
VERSION = 2
_TOP_KEYS = (
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
)
_REQUIRED_TOP = {"format", "version", "table_id", "effective_date", "base_rate", "factors", "loadings"}
_ENTRY_KEYS = {
    "numeric": ("name", "type", "monotone", "file"),
    "categorical": ("name", "type", "monotone", "file", "fallback", "base"),
    "interaction": ("name", "type", "of", "file"),
}
_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?|[+-]?inf|nan")
_MISSING = object()


# ----------------------------------------------------------------------------------------- reading


def load(path: str | os.PathLike[str]) -> RatingTable:
    """Read the rating table in folder `path` (docs/rating-table.md); TableError on any problem.

    Parameters
    ----------
    path : str or os.PathLike
        The table folder, holding `table.json` and the factor files it names.

    Returns
    -------
    RatingTable
        The table, with the defaults of the format filled in: `exposure_unit` `policy-year`,
        rounding 3 relativity and 2 premium decimals, `target` and `provenance` `{}`, and the
        draft caution first among the cautions when the file leaves it out. Numbers are read as
        float64 exactly as written (`inf` and `-inf` included). A factor file's last row with
        empty key fields (`lower` and `upper`, or `level`) is the factor's `missing` row.

    Raises
    ------
    TableError
        For any rule of docs/rating-table.md (Validation rules) the folder breaks; the one-line
        message starts with the folder and names the file, the factor and the 1-based CSV data
        row or the JSON key; `check` classifies it (`format`, `bands`, `relativity`, `file_path`).
    """
    root = Path(path)
    try:
        return _load(root)
    except TableError as e:
        raise e.prefixed(str(root)) from None


def _load(root: Path) -> RatingTable:
    meta = _read_json(root / TABLE_JSON)
    unknown = [k for k in meta if k not in _TOP_KEYS]
    if unknown:
        raise TableError(f"{TABLE_JSON}: unknown key {unknown[0]!r}", where=unknown[0])
    missing = sorted(_REQUIRED_TOP - set(meta))
    if missing:
        raise TableError(f"{TABLE_JSON}: missing key {missing[0]!r}", where=missing[0])
    if meta["format"] != FORMAT:
        raise TableError(f"{TABLE_JSON}: key 'format' is {meta['format']!r}, expected {FORMAT!r}", where="format")
    if meta["version"] != VERSION or isinstance(meta["version"], bool):
        hint = (
            " (version 1 charged the minimum premium per row; make the table again with this release)"
            if meta["version"] == 1 and not isinstance(meta["version"], bool)
            else ""
        )
        raise TableError(
            f"{TABLE_JSON}: key 'version' is {meta['version']!r}; this reader knows version {VERSION}{hint}",
            where="version",
        )
    entries = _typed(meta, "factors", list, "factors")
    factors: list[Factor] = []
    kinds: dict[str, str] = {}
    for i, entry in enumerate(entries):
        factor = _read_factor(root, entry, f"factors[{i}]", kinds)
        factors.append(factor)
        if not isinstance(factor, InteractionFactor):
            kinds[factor.name] = "numeric" if isinstance(factor, NumericFactor) else "categorical"
    loadings = _typed(meta, "loadings", dict, "loadings")
    rounding = _typed(meta, "rounding", dict, "rounding", default={})
    return RatingTable(
        table_id=meta["table_id"],
        effective_date=meta["effective_date"],
        base_rate=meta["base_rate"],
        exposure_unit=meta.get("exposure_unit", "policy-year"),
        factors=tuple(factors),
        loadings=_build(Loadings, loadings, "loadings"),
        rounding=_build(Rounding, rounding, "rounding"),
        target=meta.get("target", {}),
        provenance=meta.get("provenance", {}),
        cautions=tuple(_typed(meta, "cautions", list, "cautions", default=[])),
        stage=meta.get("stage", "indicated"),
        book_columns=meta.get("book_columns", {}),
        selections=_typed(meta, "selections", list, "selections", default=[]),
    )


def _read_json(path: Path) -> dict[str, Any]:
    try:
        meta = json.loads(path.read_bytes().decode("utf-8-sig"))
    except FileNotFoundError:
        raise TableError(f"{TABLE_JSON}: not found; this is not a rating-table folder") from None
    except (OSError, ValueError) as e:  # UnicodeDecodeError and JSONDecodeError are ValueErrors
        raise TableError(f"{TABLE_JSON}: cannot be read as JSON: {e}") from None
    if not isinstance(meta, dict):
        raise TableError(f"{TABLE_JSON}: must hold a JSON object")
    return meta


def _typed(obj: dict[str, Any], key: str, kind: type, where: str, default: Any = _MISSING) -> Any:
    if key not in obj:
        if default is _MISSING:
            raise TableError(f"{TABLE_JSON}: missing key {where!r}", where=where)
        return default
    value = obj[key]
    if not isinstance(value, kind):
        raise TableError(f"{TABLE_JSON}: key {where!r} must be a {kind.__name__}, got {value!r}", where=where)
    return value


_Settings = TypeVar("_Settings", Loadings, Rounding)


def _build(cls: type[_Settings], values: dict[str, Any], where: str) -> _Settings:
    allowed = {name for name in cls.__dataclass_fields__}
    unknown = [k for k in values if k not in allowed]
    if unknown:
        raise TableError(f"{TABLE_JSON}: unknown key '{where}.{unknown[0]}'", where=f"{where}.{unknown[0]}")
    missing = sorted(allowed - set(values)) if cls is Loadings else []
    if missing:
        raise TableError(f"{TABLE_JSON}: missing key '{where}.{missing[0]}'", where=f"{where}.{missing[0]}")
    return cls(**values)


def _read_factor(root: Path, entry: Any, where: str, kinds: dict[str, str]) -> Factor:
    if not isinstance(entry, dict):
        raise TableError(f"{TABLE_JSON}: {where} must be an object", where=where)
    kind = _typed(entry, "type", str, f"{where}.type")
    if kind not in _ENTRY_KEYS:
        raise TableError(
            f"{TABLE_JSON}: key '{where}.type' is {kind!r}; expected numeric, categorical or interaction",
            where=f"{where}.type",
        )
    unknown = [k for k in entry if k not in _ENTRY_KEYS[kind]]
    if unknown:
        raise TableError(f"{TABLE_JSON}: unknown key '{where}.{unknown[0]}'", where=f"{where}.{unknown[0]}")
    name = _typed(entry, "name", str, f"{where}.name")
    file = check_file(_typed(entry, "file", str, f"{where}.file"), f"{TABLE_JSON}: {where}", name)
    header, rows = _read_csv(root, file, name)
    if kind == "interaction":
        of = _typed(entry, "of", list, f"{where}.of")
        if len(of) != 2 or not all(isinstance(x, str) and x in kinds for x in of):
            raise TableError(
                f"{TABLE_JSON}: key '{where}.of' {of!r} must name two factors listed before it",
                factor=name,
                where=f"{where}.of",
            )
        return _interaction(name, (of[0], of[1]), (kinds[of[0]], kinds[of[1]]), header, rows, file)
    monotone = _typed(entry, "monotone", str, f"{where}.monotone", default="none")
    if kind == "numeric":
        cols = _columns(header, ("lower", "upper", "relativity", "exposure"), file, name)
        rows, values, missing = _split_missing(rows, cols, ("lower", "upper"), file, name)
        return NumericFactor(
            name=name,
            monotone=monotone,
            lower=_numbers(rows, cols, "lower", file, name),
            upper=_numbers(rows, cols, "upper", file, name),
            file=file,
            missing=missing,
            **values,
        )
    fallback, base = (entry.get(k) for k in ("fallback", "base"))
    for key, value in (("fallback", fallback), ("base", base)):
        if value is not None and not isinstance(value, str):
            raise TableError(f"{TABLE_JSON}: key '{where}.{key}' must be a string", factor=name, where=f"{where}.{key}")
    cols = _columns(header, ("level", "relativity", "exposure"), file, name)
    rows, values, missing = _split_missing(rows, cols, ("level",), file, name)
    return CategoricalFactor(
        name=name,
        monotone=monotone,
        levels=tuple(row[cols["level"]] for row in rows),
        file=file,
        fallback=fallback,
        base=base,
        missing=missing,
        **values,
    )


def _split_missing(
    rows: list[list[str]], cols: dict[str, int], keys: tuple[str, ...], file: str, factor: str
) -> tuple[list[list[str]], dict[str, npt.NDArray[np.float64]], MissingRow | None]:
    """The band or level rows, their value columns, and the missing row: the one row whose key
    fields (`keys`) are all empty, which must be the last data row."""
    empty = [i for i, row in enumerate(rows) if all(row[cols[k]] == "" for k in keys)]
    values = _value_columns(rows, cols, file, factor)
    if not empty:
        return rows, values, None
    fields = " and ".join(keys)
    prefix = f"{file}: factor {factor!r}"
    if len(empty) > 1:
        raise TableError(
            f"{prefix}, {data_row(empty[1])}: a second row with empty {fields} ({data_row(empty[0])} is the "
            "first); only the missing row leaves them empty, and a factor has at most one",
            factor=factor,
            where=data_row(empty[1]),
        )
    i = empty[0]
    if i != len(rows) - 1:
        raise TableError(
            f"{prefix}, {data_row(i)}: the missing row (empty {fields}) must be the last data row",
            factor=factor,
            where=data_row(i),
        )
    row = missing_row(
        {column: float(v[i]) for column, v in values.items()}, prefix, factor, f"{data_row(i)}, the missing row"
    )
    return rows[:i], {column: v[:i] for column, v in values.items()}, row


def _inside(root: Path, file: str, factor: str) -> Path:
    """The factor file's path, refused when it resolves (through symlinks) outside `root`."""
    target = root / file
    if not Path(os.path.realpath(target)).is_relative_to(os.path.realpath(root)):
        raise TableError(
            f"{file}: factor {factor!r}: the path resolves outside the table folder (symbolic link?)",
            check="file_path",
            factor=factor,
            where=file,
        )
    return target


def _read_csv(root: Path, file: str, factor: str) -> tuple[list[str], list[list[str]]]:
    path = _inside(root, file, factor)
    try:
        text = path.read_bytes().decode("utf-8-sig")
    except FileNotFoundError:
        raise TableError(f"{file}: factor {factor!r}: file not found", factor=factor, where=file) from None
    except (OSError, ValueError) as e:
        raise TableError(f"{file}: factor {factor!r}: cannot be read: {e}", factor=factor, where=file) from None
    try:
        rows = list(csv.reader(io.StringIO(text, newline=""), strict=True))
    except csv.Error as e:
        raise TableError(f"{file}: factor {factor!r}: not valid CSV: {e}", factor=factor, where=file) from None
    if not rows:
        raise TableError(f"{file}: factor {factor!r}: empty file, expected a header row", factor=factor)
    header, data = rows[0], rows[1:]
    if not data:
        raise TableError(f"{file}: factor {factor!r}: no data rows", factor=factor)
    for i, row in enumerate(data):
        if len(row) != len(header):
            raise TableError(
                f"{file}: factor {factor!r}, {data_row(i)}: {len(row)} fields, the header has {len(header)}",
                factor=factor,
                where=data_row(i),
            )
    return header, data


def _columns(
    header: list[str], required: tuple[str, ...], file: str, factor: str, optional: tuple[str, ...] = OPTIONAL_COLUMNS
) -> dict[str, int]:
    cols: dict[str, int] = {}
    for j, column in enumerate(header):
        if column not in required and column not in optional:
            raise TableError(
                f"{file}: factor {factor!r}: unknown column {column!r} (expected "
                f"{', '.join(required)}; optional {', '.join(optional)})",
                factor=factor,
                where=column,
            )
        if column in cols:
            raise TableError(f"{file}: factor {factor!r}: column {column!r} appears twice", factor=factor, where=column)
        cols[column] = j
    for column in required:
        if column not in cols:
            raise TableError(f"{file}: factor {factor!r}: missing column {column!r}", factor=factor, where=column)
    return cols


def _numbers(
    rows: list[list[str]], cols: dict[str, int], column: str, file: str, factor: str, optional: bool = False
) -> npt.NDArray[np.float64]:
    j = cols[column]
    values = np.empty(len(rows))
    for i, row in enumerate(rows):
        text = row[j]
        if optional and text == "":
            values[i] = np.nan
        elif _NUMBER.fullmatch(text):
            values[i] = float(text)
        else:
            raise TableError(
                f"{file}: factor {factor!r}, {data_row(i)}: column {column!r} holds {text!r}, not a number",
                factor=factor,
                where=data_row(i),
            )
    return values


def _value_columns(
    rows: list[list[str]], cols: dict[str, int], file: str, factor: str
) -> dict[str, npt.NDArray[np.float64]]:
    values: dict[str, npt.NDArray[np.float64]] = {
        c: _numbers(rows, cols, c, file, factor) for c in ("relativity", "exposure") if c in cols
    }
    for column in OPTIONAL_COLUMNS:
        if column in cols:
            values[column] = _numbers(rows, cols, column, file, factor, optional=True)
    return values


def _interaction(
    name: str, of: tuple[str, str], kinds: tuple[str, str], header: list[str], rows: list[list[str]], file: str
) -> InteractionFactor:
    key_columns = [
        c
        for side, kind in zip(of, kinds)
        for c in ((f"{side}_lower", f"{side}_upper") if kind == "numeric" else (f"{side}_level",))
    ]
    cols = _columns(header, (*key_columns, "relativity"), file, name, optional=("exposure", *OPTIONAL_COLUMNS))
    (a_cells, a_index), (b_cells, b_index) = (
        _side_cells(rows, cols, side, kind, file, name) for side, kind in zip(of, kinds)
    )
    shape = (len(a_cells), len(b_cells))
    row_of = np.full(shape, -1)
    for r, (i, j) in enumerate(zip(a_index, b_index)):
        if row_of[i, j] >= 0:
            raise TableError(
                f"{file}: interaction {name!r}, {data_row(r)}: the cell repeats {data_row(int(row_of[i, j]))}",
                factor=name,
                where=data_row(r),
            )
        row_of[i, j] = r
    if (row_of < 0).any():
        i, j = (int(x[0]) for x in np.nonzero(row_of < 0))
        a_label, b_label = (_key_text(cells, k) for cells, k in ((a_cells, i), (b_cells, j)))
        raise TableError(
            f"{file}: interaction {name!r}: no row for cell ({of[0]}={a_label}, {of[1]}={b_label})",
            factor=name,
            where=f"{a_label}, {b_label}",
        )
    values = _value_columns(rows, cols, file, name)
    matrices = {column: v[row_of] for column, v in values.items()}
    return InteractionFactor(name=name, of=of, a_cells=a_cells, b_cells=b_cells, file=file, **matrices)


def _side_cells(
    rows: list[list[str]], cols: dict[str, int], side: str, kind: str, file: str, factor: str
) -> tuple[Cells, list[int]]:
    """The distinct cells of one side (bands sorted by edges, levels in order of first appearance)
    and, for each row, the index of its cell among them."""
    if kind == "categorical":
        levels = [row[cols[f"{side}_level"]] for row in rows]
        distinct_levels = tuple(dict.fromkeys(levels))
        level_position = {level: i for i, level in enumerate(distinct_levels)}
        return distinct_levels, [level_position[level] for level in levels]
    lower = _numbers(rows, cols, f"{side}_lower", file, factor)
    upper = _numbers(rows, cols, f"{side}_upper", file, factor)
    bands: list[tuple[float, float]] = list(zip(lower.tolist(), upper.tolist()))
    distinct_bands = sorted(dict.fromkeys(bands))
    band_position = {band: i for i, band in enumerate(distinct_bands)}
    cells = Bands(lower=np.array([lo for lo, _ in distinct_bands]), upper=np.array([hi for _, hi in distinct_bands]))
    return cells, [band_position[band] for band in bands]


def _key_text(cells: Cells, i: int) -> str:
    return cells.labels()[i] if isinstance(cells, Bands) else repr(cells[i])


# ----------------------------------------------------------------------------------------- writing


def save(table: RatingTable, path: str | os.PathLike[str]) -> None:
    """Write `table` into folder `path` (created if missing): table.json and one CSV per factor.

    The bytes depend only on the table. The caller handles atomic replacement of the folder.

    Parameters
    ----------
    table : RatingTable
        The table to write.
    path : str or os.PathLike
        The table folder. Files of the same names are replaced; other files are left alone.

    Notes
    -----
    `table.json` is UTF-8 JSON (non-ASCII text kept as is), keys in the order of the format,
    indented by two spaces, with a final newline; every key is written, `rounding`, `target`,
    `provenance` and `cautions` included. Each factor's CSV goes to its `file`: UTF-8, lines
    ending in LF, the columns of docs/rating-table.md (`indicated` and `credibility` only when
    the factor has them; a two-way table's `exposure` likewise), numbers as Python's shortest
    exact repr (`25.0`, `1.138`, `-inf`), an empty field for a missing optional value, and a
    field quoted only when it holds a comma, a double quote, a CR or an LF. A main factor's
    missing row comes last, its key fields (`lower` and `upper`, or `level`) empty. A two-way
    table's rows run a-cell by a-cell, then b-cell by b-cell. Loading the folder gives a table
    equal to `table`.
    """
    root = Path(path)
    root.mkdir(parents=True, exist_ok=True)
    for factor in table.factors:
        assert factor.file is not None  # a factor's __post_init__ sets its default file
        target = root / factor.file
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_bytes(_factor_csv(factor).encode("utf-8"))
    text = json.dumps(_table_json(table), indent=2, ensure_ascii=False, allow_nan=False) + "\n"
    (root / TABLE_JSON).write_bytes(text.encode("utf-8"))


def _table_json(table: RatingTable) -> dict[str, Any]:
    return {
        "format": FORMAT,
        "version": VERSION,
        "table_id": table.table_id,
        "stage": table.stage,
        "effective_date": table.effective_date,
        "base_rate": table.base_rate,
        "exposure_unit": table.exposure_unit,
        "book_columns": table.book_columns,
        "factors": [_entry(f) for f in table.factors],
        "loadings": {k: getattr(table.loadings, k) for k in Loadings.__dataclass_fields__},
        "rounding": {k: getattr(table.rounding, k) for k in Rounding.__dataclass_fields__},
        "target": table.target,
        "provenance": table.provenance,
        "selections": list(table.selections),
        "cautions": list(table.cautions),
    }


def _entry(factor: Factor) -> dict[str, Any]:
    if isinstance(factor, InteractionFactor):
        return {"name": factor.name, "type": "interaction", "of": list(factor.of), "file": factor.file}
    kind = "numeric" if isinstance(factor, NumericFactor) else "categorical"
    entry = {"name": factor.name, "type": kind, "monotone": factor.monotone, "file": factor.file}
    if isinstance(factor, CategoricalFactor):
        entry.update({k: getattr(factor, k) for k in ("fallback", "base") if getattr(factor, k) is not None})
    return entry


def _number_text(x: float) -> str:
    return "" if np.isnan(x) else repr(float(x))


def _csv_field(text: str) -> str:
    """A CSV field, quoted when it holds a comma, a quote or a line break (CR or LF)."""
    return f'"{text.replace(chr(34), chr(34) * 2)}"' if any(c in text for c in ',"\r\n') else text


def _factor_csv(factor: Factor) -> str:
    rows = _interaction_rows(factor) if isinstance(factor, InteractionFactor) else _main_rows(factor)
    return "".join(",".join(_csv_field(field) for field in row) + "\n" for row in rows)


def _main_rows(factor: NumericFactor | CategoricalFactor) -> list[list[str]]:
    """Header, one row per band or level, then the missing row (empty key fields) when there is one."""
    optional = [c for c in OPTIONAL_COLUMNS if getattr(factor, c) is not None]
    if isinstance(factor, NumericFactor):
        header = ["lower", "upper", "relativity", "exposure", *optional]
        keys = [[repr(float(lo)), repr(float(hi))] for lo, hi in zip(factor.lower, factor.upper)]
    else:
        header = ["level", "relativity", "exposure", *optional]
        keys = [[level] for level in factor.levels]
    value_columns = ["relativity", "exposure", *optional]
    columns = [getattr(factor, c) for c in value_columns]
    rows = [header] + [[*key, *(_number_text(col[i]) for col in columns)] for i, key in enumerate(keys)]
    if factor.missing is not None:
        empty_keys = [""] * (len(header) - len(value_columns))
        rows.append([*empty_keys, *(_number_text(getattr(factor.missing, c)) for c in value_columns)])
    return rows


def _side_header(side: str, cells: Cells) -> list[str]:
    return [f"{side}_lower", f"{side}_upper"] if isinstance(cells, Bands) else [f"{side}_level"]


def _side_key(cells: Cells, i: int) -> list[str]:
    if isinstance(cells, Bands):
        return [repr(float(cells.lower[i])), repr(float(cells.upper[i]))]
    return [cells[i]]


def _interaction_rows(factor: InteractionFactor) -> list[list[str]]:
    extra = [c for c in ("exposure", *OPTIONAL_COLUMNS) if getattr(factor, c) is not None]
    a, b = factor.of
    rows = [[*_side_header(a, factor.a_cells), *_side_header(b, factor.b_cells), "relativity", *extra]]
    matrices = [factor.relativity, *(getattr(factor, c) for c in extra)]
    for i in range(len(factor.a_cells)):
        for j in range(len(factor.b_cells)):
            rows.append(
                [
                    *_side_key(factor.a_cells, i),
                    *_side_key(factor.b_cells, j),
                    *(_number_text(m[i, j]) for m in matrices),
                ]
            )
    return rows
