"""The audit finds and names injected violations, with the size of each, and passes a clean table."""

from __future__ import annotations

import dataclasses
import os
import shutil

import numpy as np
import pytest

from rating_tables import (
    Bands,
    CategoricalFactor,
    InteractionFactor,
    NumericFactor,
    TableError,
    audit,
    audit_path,
    flattened,
    save,
)

from _builders import example_table

INF = np.inf


def _replace(table, **factors):
    return dataclasses.replace(table, factors=tuple(factors.get(f.name, f) for f in table.factors))


def _age(relativity, monotone="none"):
    return NumericFactor("age", monotone, [-INF, 25, 60], [25, 60, INF], relativity, [120.0, 800.0, 300.0])


def test_clean_table_passes(tmp_path):
    save(example_table(), tmp_path / "T")
    assert audit(example_table()) == []
    assert audit_path(tmp_path / "T") == []
    assert audit(example_table(), promises={"bonus": "increasing", "age": "none"}, bounds={"*": (0.5, 2.0)}) == []


def test_reversed_promise_is_found_band_to_band():
    """Promised decreasing, age goes 1.5 -> 1.0 -> 1.25: one step up by 25 %, seen for all three regions
    (the two-way table is 1 for age >= 30, so main effect x two-way = main effect there)."""
    found = audit(example_table(), promises={"age": "decreasing"})
    assert len(found) == 1
    v = found[0]
    assert (v.check, v.factor, v.where) == ("monotone", "age", "[30, 60) to [60, inf)")
    assert v.amount == pytest.approx(0.25, rel=1e-12)
    assert "promised decreasing, the relativity goes from 1 to 1.25 (3 combinations" in str(v)


def test_reversal_inside_a_two_way_table_is_found():
    """Main effect 1.5, 1.0, 0.9 is decreasing, but for Coast at age >= 30 the two-way relativity 1.3 makes
    [25, 30) -> [30, 60) go from 1.0 x 1.0 to 1.0 x 1.3: up by 30 % for region 'Coast' only."""
    table = example_table()
    two_way = InteractionFactor(
        "age__region",
        ("age", "region"),
        table.factor("age__region").a_cells,
        ("North", "South", "Coast"),
        [[1.0, 1.0, 1.0], [1.0, 1.0, 1.3]],
    )
    found = audit(_replace(table, age=_age([1.5, 1.0, 0.9], "decreasing"), age__region=two_way))
    assert [(v.check, v.factor, v.where) for v in found] == [("monotone", "age", "[25, 30) to [30, 60)")]
    assert found[0].amount == pytest.approx(0.3, rel=1e-12)
    assert "region='Coast'" in found[0].detail


def test_ordered_categorical_promise_is_checked_in_file_order():
    """bonus promised increasing: 0.75, 1.0, 0.95 falls from 02 to 03 by 5 %."""
    bonus = CategoricalFactor("bonus", "increasing", ("01", "02", "03"), [0.75, 1.0, 0.95], [1.0, 1.0, 1.0])
    found = audit(_replace(example_table(), bonus=bonus))
    assert [(v.check, v.factor, v.where) for v in found] == [("monotone", "bonus", "02 to 03")]
    assert found[0].amount == pytest.approx(0.05, rel=1e-12)


def test_missing_base_level_is_found():
    """No age band at 1 (closest 1.1, off by 0.1); region's named base North at 1.05 (off by 0.05).
    1.0004 rounds to 1.000 at 3 decimals and counts as the base; 1.0006 does not."""
    region = CategoricalFactor(
        "region", "none", ("North", "South", "Coast"), [1.05, 0.875, 1.5], [1.0] * 3, fallback="North", base="North"
    )
    found = audit(_replace(example_table(), age=_age([1.5, 1.1, 1.25]), region=region))
    assert [(v.check, v.factor) for v in found] == [("base_level", "age"), ("base_level", "region")]
    assert [v.amount for v in found] == pytest.approx([0.1, 0.05], rel=1e-9)
    assert audit(_replace(example_table(), age=_age([1.5, 1.0004, 1.25]))) == []
    assert [v.factor for v in audit(_replace(example_table(), age=_age([1.5, 1.0006, 1.25])))] == ["age"]


def test_two_way_table_needs_a_base_row_and_column():
    table = example_table()
    two_way = InteractionFactor(
        "age__region",
        ("age", "region"),
        table.factor("age__region").a_cells,
        ("North", "South", "Coast"),
        [[1.1, 1.0, 1.125], [1.2, 1.0, 1.05]],
    )
    found = audit(_replace(table, age__region=two_way))
    assert [(v.check, v.where) for v in found] == [("base_level", "row")]
    assert found[0].amount == pytest.approx(0.125, rel=1e-9)  # row [1.1, 1.0, 1.125] is closest: max gap 0.125


def test_bounds_and_unknown_promises():
    """Bounds 0.8 to 1.4 on every factor: age 1.5 and Coast 1.5 exceed by 0.1, bonus 01 at 0.75 is 0.05 short."""
    found = audit(example_table(), promises={"vehicle_use": "increasing"}, bounds={"*": (0.8, 1.4)})
    assert [(v.check, v.factor, v.where) for v in found] == [
        ("promise", "vehicle_use", None),
        ("bounds", "age", "[-inf, 25)"),
        ("bounds", "region", "Coast"),
        ("bounds", "bonus", "01"),
    ]
    assert [v.amount for v in found[1:]] == pytest.approx([0.1, 0.1, 0.05], rel=1e-9)
    with pytest.raises(TableError, match="direction 'upward' for 'age' must be one of"):
        audit(example_table(), promises={"age": "upward"})


@pytest.mark.parametrize(
    "name, old, new, check, text",
    [
        ("factors/age.csv", "25.0,60.0,1.0", "26.0,60.0,1.0", "bands", "gap between the previous band's upper 25"),
        ("factors/age.csv", "25.0,60.0,1.0", "20.0,60.0,1.0", "bands", "overlap"),
        ("factors/age.csv", "25.0,60.0,1.0,", "25.0,60.0,0.0,", "relativity", "relativity 0 must be finite and > 0"),
        ("table.json", '"file": "factors/bonus.csv"', '"file": "../bonus.csv"', "file_path", "uses '..'"),
        ("table.json", '"file": "factors/bonus.csv"', '"file": "/tmp/bonus.csv"', "file_path", "absolute path"),
    ],
)
def test_structural_violations_of_a_folder_are_reported(tmp_path, name, old, new, check, text):
    folder = tmp_path / "T"
    save(example_table(), folder)
    path = folder / name
    path.write_text(path.read_text().replace(old, new, 1))
    found = audit_path(folder)
    assert len(found) == 1
    assert found[0].check == check
    assert text in str(found[0]) and str(folder) in str(found[0])
    if check in ("bands", "relativity"):
        assert found[0].factor == "age" and found[0].where == "data row 2 (1-based)"


def test_symlink_out_of_the_folder_is_reported(tmp_path):
    folder = tmp_path / "T"
    save(example_table(), folder)
    shutil.move(folder / "factors/bonus.csv", tmp_path / "bonus.csv")
    os.symlink(tmp_path / "bonus.csv", folder / "factors/bonus.csv")
    found = audit_path(folder)
    assert [(v.check, v.factor) for v in found] == [("file_path", "bonus")]
    assert "resolves outside the table folder" in str(found[0])


def test_flattening_looks_through_the_two_way_tables():
    """age promised decreasing; main effect x the age x region table (cut at age 30 or 60) along the
    cells [-inf, 25), [25, 30 or 60), ...: a run is flat only when every region is."""
    table = example_table()

    def flat(main: list[float], lower: float, rows: list[list[float]]):
        age = NumericFactor("age", "decreasing", [-np.inf, 25, 60], [25, 60, np.inf], main, [1.0] * 3)
        two_way = InteractionFactor(
            "age__region",
            ("age", "region"),
            Bands([-np.inf, lower], [lower, np.inf]),
            ("North", "South", "Coast"),
            rows,
        )
        return flattened(dataclasses.replace(table, factors=(age, *table.factors[1:3], two_way)))

    same = [[1.0, 1.0, 1.0], [1.0, 1.0, 1.0]]
    # [25, 30) and [30, 60) are one band cut by the two-way side: no remark on their own
    assert flat([1.5, 1.0, 0.8], 30, same) == []
    # [25, 60) and [60, inf) are equal for every region: flagged, with their one value
    found = flat([1.5, 1.0, 1.0], 60, same)
    assert [(f.factor, f.kind, f.levels, f.relativity) for f in found] == [
        ("age", "bands", ("[25, 60)", "[60, inf)"), 1.0)
    ]
    # Coast at 1.1 from age 60 separates them
    assert flat([1.5, 1.0, 1.0], 60, [[1.0, 1.0, 1.0], [1.0, 1.0, 1.1]]) == []
    # equal along age for every region, but South differs from the others: flat, with no one value
    found = flat([1.5, 1.0, 1.0], 60, [[1.0, 1.2, 1.0], [1.0, 1.2, 1.0]])
    assert [(f.levels, f.relativity) for f in found] == [(("[25, 60)", "[60, inf)"), None)]
    assert "one relativity in each combination of the other factors' cells" in str(found[0])
