"""Properties of the table format and rater on random tables (hypothesis).

Random valid tables and books (missing values where a factor has a missing row) rate to the
product formula, computed independently here with plain Python loops; every valid table survives write and read unchanged; mutated files are refused with
TableError and never with another exception.
"""

from __future__ import annotations

import csv
import io
import json
import math
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rating_tables import (
    Bands,
    CategoricalFactor,
    InteractionFactor,
    Loadings,
    MissingRow,
    NumericFactor,
    RatingTable,
    Rounding,
    TableError,
    load,
    rate,
    save,
)

INF = math.inf
SETTINGS = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
RELATIVITY = st.floats(0.05, 20.0)
EXPOSURE = st.floats(0.0, 1e5)
LEVEL = st.text(st.characters(codec="utf-8", exclude_categories=("Cs",)), min_size=1, max_size=6)
EDGE = st.floats(-1e6, 1e6, allow_nan=False, allow_infinity=False)
UNKNOWN = "\u2603 not a level"


def _edges(draw, max_size: int = 5) -> list[float]:
    return sorted(set(draw(st.lists(EDGE, max_size=max_size))))


def _values(draw, strategy, n):
    return draw(st.lists(strategy, min_size=n, max_size=n))


def _missing_row(draw, indicated: bool, credibility: bool) -> MissingRow | None:
    """No missing row, or one with the optional values the factor has columns for (NaN allowed)."""
    if not draw(st.booleans()):
        return None
    return MissingRow(
        draw(RELATIVITY),
        draw(EXPOSURE),
        draw(RELATIVITY | st.just(math.nan)) if indicated else math.nan,
        draw(st.floats(0, 1) | st.just(math.nan)) if credibility else math.nan,
    )


@st.composite
def tables(draw) -> RatingTable:
    factors: list = []
    for k in range(draw(st.integers(1, 2))):
        edges = _edges(draw)
        n = len(edges) + 1
        indicated = draw(st.none() | st.just(_values(draw, RELATIVITY, n)))
        factors.append(
            NumericFactor(
                f"x{k}",
                draw(st.sampled_from(["none", "increasing", "decreasing"])),
                [-INF, *edges],
                [*edges, INF],
                _values(draw, RELATIVITY, n),
                _values(draw, EXPOSURE, n),
                indicated=indicated,
                missing=_missing_row(draw, indicated is not None, False),
            )
        )
    for k in range(draw(st.integers(1, 2))):
        levels = draw(st.lists(LEVEL, min_size=1, max_size=5, unique=True).filter(lambda ls: UNKNOWN not in ls))
        n = len(levels)
        credibility = draw(st.none() | st.just(_values(draw, st.floats(0, 1), n)))
        factors.append(
            CategoricalFactor(
                f"c{k}",
                "none",
                tuple(levels),
                _values(draw, RELATIVITY, n),
                _values(draw, EXPOSURE, n),
                fallback=draw(st.none() | st.sampled_from(levels)),
                base=draw(st.none() | st.sampled_from(levels)),
                credibility=credibility,
                missing=_missing_row(draw, False, credibility is not None),
            )
        )
    if draw(st.booleans()):
        edges = _edges(draw, 3)
        levels = draw(st.permutations(factors[-1].levels))
        shape = (len(edges) + 1, len(levels))
        matrix = np.array(_values(draw, RELATIVITY, shape[0] * shape[1])).reshape(shape)
        factors.append(
            InteractionFactor(
                f"x0__{factors[-1].name}",
                ("x0", factors[-1].name),
                Bands([-INF, *edges], [*edges, INF]),
                tuple(levels),
                matrix,
            )
        )
    variable = draw(st.floats(0, 0.6))
    loadings = Loadings(
        draw(st.floats(0, 0.3)), draw(st.floats(0, 100)), variable, draw(st.floats(0, 0.3)), draw(st.floats(0, 200))
    )
    return RatingTable(
        "random-table",
        "2027-01-01",
        draw(st.floats(0.01, 1e4)),
        "policy-year",
        tuple(factors),
        loadings,
        Rounding(draw(st.integers(0, 6)), draw(st.integers(0, 4))),
        target={"basis": "experience", "total_pure_premium": draw(st.floats(1, 1e9))},
    )


@st.composite
def tables_and_books(draw) -> tuple[RatingTable, pd.DataFrame]:
    table = draw(tables())
    n = draw(st.integers(1, 25))
    book = {}
    for f in table.main_factors:
        if isinstance(f, NumericFactor):
            edges = [x for x in f.lower if math.isfinite(x)] or [0.0]
            values = st.sampled_from(edges) | st.floats(-2e6, 2e6)
            book[f.name] = _values(draw, values | st.just(math.nan) if f.missing else values, n)
        else:
            stand_in = f.fallback is not None or f.base is not None
            pool = list(f.levels) + ([UNKNOWN] if stand_in else [])
            book[f.name] = _values(draw, st.sampled_from(pool + ([None, ""] if f.missing else [])), n)
    book["exposure"] = _values(draw, st.floats(0, 10), n)
    return table, pd.DataFrame(book)


def _band(lower, upper, x) -> int:
    for i in range(len(lower)):
        if lower[i] <= x < upper[i] or (x == INF and upper[i] == INF):
            return i
    raise AssertionError(f"no band for {x}")


def _level(factor: CategoricalFactor, value: str) -> int:
    for i, level in enumerate(factor.levels):
        if level == value:
            return i
    return factor.levels.index(factor.fallback if factor.fallback is not None else factor.base)


def _is_missing(value) -> bool:
    return value is None or value == "" or (isinstance(value, float) and math.isnan(value))


def _pure_by_loops(table: RatingTable, book: pd.DataFrame) -> list[float]:
    out = []
    for r in range(len(book)):
        cells, product = {}, table.base_rate
        for f in table.factors:
            if not isinstance(f, InteractionFactor) and _is_missing(book[f.name][r]):
                cells[f.name] = None
                product *= f.missing.relativity
            elif isinstance(f, NumericFactor):
                cells[f.name] = book[f.name][r]
                product *= f.relativity[_band(f.lower, f.upper, book[f.name][r])]
            elif isinstance(f, CategoricalFactor):
                cells[f.name] = f.levels[_level(f, book[f.name][r])]
                product *= f.relativity[_level(f, book[f.name][r])]
            elif cells[f.of[0]] is None or cells[f.of[1]] is None:
                continue  # a two-way table gives 1.0 to a row missing on either side
            else:
                a, b = f.of
                i = _band(f.a_cells.lower, f.a_cells.upper, cells[a])
                j = f.b_cells.index(cells[b])
                product *= f.relativity[i, j]
        out.append(product * book["exposure"][r])
    return out


@SETTINGS
@given(tables_and_books())
def test_random_tables_rate_to_the_product_formula(case):
    table, book = case
    rated = rate(table, book, "exposure")
    expected = _pure_by_loops(table, book)
    half_unit = 0.5 * 10.0**-table.rounding.premium_decimals * (1 + 1e-9)
    for got, want in zip(rated["pure_premium"], expected):
        assert abs(got - want) <= half_unit + 1e-12 * abs(want)
    lo = table.loadings
    for got, pure, e in zip(rated["gross_premium"], expected, book["exposure"]):
        if e == 0:
            assert got == 0.0
            continue
        term = ((pure / e) * (1 + lo.lae_ratio) + lo.fixed_expense) / (1 - lo.variable_expense - lo.profit)
        gross = max(lo.minimum_premium, term) * e  # the minimum is per full term, earned with the exposure
        assert abs(got - gross) <= half_unit + 1e-9 * gross
    categorical = book.astype({f.name: "category" for f in table.main_factors if isinstance(f, CategoricalFactor)})
    np.testing.assert_array_equal(rate(table, categorical, "exposure")["pure_premium"], rated["pure_premium"])


@SETTINGS
@given(tables_and_books())
def test_write_then_read_gives_the_same_table_bytes_and_premiums(case):
    table, book = case
    with tempfile.TemporaryDirectory() as tmp:
        save(table, Path(tmp) / "a")
        loaded = load(Path(tmp) / "a")
        assert loaded == table
        save(loaded, Path(tmp) / "b")
        for path in (Path(tmp) / "a").rglob("*.*"):
            assert path.read_bytes() == (Path(tmp) / "b" / path.relative_to(Path(tmp) / "a")).read_bytes()
    assert (
        rate(loaded, book, "exposure")["gross_premium"].tolist()
        == rate(table, book, "exposure")["gross_premium"].tolist()
    )


def _rows(path: Path) -> list[list[str]]:
    return list(csv.reader(io.StringIO(path.read_text(encoding="utf-8"), newline="")))


def _write_rows(path: Path, rows: list[list[str]]) -> None:
    buffer = io.StringIO()
    csv.writer(buffer, lineterminator="\n").writerows(rows)
    path.write_text(buffer.getvalue(), encoding="utf-8")


def _loads_or_table_error(folder: Path) -> None:
    try:
        assert isinstance(load(folder), RatingTable)
    except TableError as e:
        assert "\n" not in str(e) and str(folder) in str(e)


MUTATION = st.sampled_from(["field", "drop", "duplicate", "truncate", "byte"])


@SETTINGS
@given(tables(), st.data())
def test_mutated_factor_files_load_or_raise_table_error(table, data):
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "t"
        save(table, folder)
        path = folder / data.draw(st.sampled_from([f.file for f in table.factors]))
        kind = data.draw(MUTATION)
        raw = path.read_bytes()
        if kind == "truncate":
            path.write_bytes(raw[: data.draw(st.integers(0, len(raw)))])
        elif kind == "byte":
            i = data.draw(st.integers(0, len(raw) - 1))
            path.write_bytes(raw[:i] + bytes([data.draw(st.integers(0, 255))]) + raw[i + 1 :])
        else:
            rows = _rows(path)
            r = data.draw(st.integers(0, len(rows) - 1))
            if kind == "field":
                rows[r][data.draw(st.integers(0, len(rows[r]) - 1))] = data.draw(st.text(max_size=8))
            elif kind == "drop":
                del rows[r]
            else:
                rows.insert(r, list(rows[r]))
            _write_rows(path, rows)
        _loads_or_table_error(folder)


@SETTINGS
@given(tables(), st.data())
def test_invalid_relativities_gaps_and_repeated_levels_are_refused(table, data):
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "t"
        save(table, folder)
        factor = data.draw(st.sampled_from(table.main_factors))
        path = folder / factor.file
        rows = _rows(path)
        r = data.draw(st.integers(1, len(rows) - 1))
        how = data.draw(
            st.sampled_from(
                ["relativity", "repeat"] + (["gap"] if isinstance(factor, NumericFactor) and len(rows) > 3 else [])
            )
        )
        if how == "relativity":
            rows[r][rows[0].index("relativity")] = data.draw(
                st.sampled_from(["0", "-1", "abc", "", "nan", "inf", "1e400"])
            )
        elif how == "repeat":
            rows.insert(r, list(rows[r]))
        else:
            del rows[data.draw(st.integers(2, len(rows) - 2))]
        _write_rows(path, rows)
        try:
            load(folder)
        except TableError as e:
            assert factor.file in str(e)
        else:
            raise AssertionError(f"{how} on {factor.file} was not refused")


JSON_VALUE = st.sampled_from([None, True, -1, 0, 1.5, 1e400, "x", "../x", "/abs", [], {}, ["a", "b"]])


@SETTINGS
@given(tables(), st.data())
def test_mutated_table_json_loads_or_raises_table_error(table, data):
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "t"
        save(table, folder)
        meta = json.loads((folder / "table.json").read_text())
        holder = meta
        for _ in range(data.draw(st.integers(0, 2))):
            children = [
                k
                for k, v in (holder.items() if isinstance(holder, dict) else enumerate(holder))
                if isinstance(v, (dict, list)) and v
            ]
            if not children:
                break
            holder = holder[data.draw(st.sampled_from(children))]
        keys = list(holder.keys()) if isinstance(holder, dict) else list(range(len(holder)))
        if keys:
            key = data.draw(st.sampled_from(keys))
            if data.draw(st.booleans()):
                holder[key] = data.draw(JSON_VALUE)
            else:
                del holder[key]
        (folder / "table.json").write_text(json.dumps(meta))
        _loads_or_table_error(folder)
