"""`premiumlab rate` on a book with missing values and unknown levels: the counts it prints to stderr,
the counts in `RateResult.to_dict()`, and `--strict-levels` (docs/commands.md, `premiumlab rate`).

The table is the invented example of tests/_builders.py with missing rows added by hand.
"""

from __future__ import annotations

import dataclasses
import json
import re

import pandas as pd

import premiumlab
from rating_tables import LevelCounts, MissingRow, save

from _builders import example_table, run_cli


def _table_and_book(folder):
    table = example_table()
    region = dataclasses.replace(table.factor("region"), missing=MissingRow(1.1, 25.5))
    table = dataclasses.replace(table, factors=(table.factors[0], region, *table.factors[2:]))
    save(table, folder / "table")
    (folder / "book.csv").write_text(
        "policy,age,region,bonus,exposure\n"
        "R1,30,Coast,01,1\n"
        "R2,41,Islands,02,1\n"
        "R3,52,,03,0.5\n"
        "R4,63,Atlantis,01,1\n"
        "R5,24,Islands,02,0.25\n"
        "R6,35,,02,1\n"
    )
    return folder / "table", folder / "book.csv"


def test_the_api_returns_the_counts(tmp_path):
    table, book = _table_and_book(tmp_path)
    result = premiumlab.rate(table, book, out=tmp_path / "priced.csv")
    assert result.rows == 6
    assert result.counts == (LevelCounts("region", 2, 3, "North", ("Islands", "Atlantis")),)
    as_json = json.loads(json.dumps(result.to_dict()))
    assert as_json["rows"] == 6
    assert as_json["counts"] == [
        {
            "factor": "region",
            "missing_rows": 2,
            "fallback_rows": 3,
            "fallback_level": "North",
            "unknown_levels": ["Islands", "Atlantis"],
        }
    ]
    priced = pd.read_csv(tmp_path / "priced.csv", keep_default_na=False)
    assert priced["rel_region"].tolist() == [1.5, 1.0, 1.1, 1.0, 1.0, 1.1]


def test_the_command_states_the_counts_and_refuses_unknown_levels_when_strict(tmp_path):
    table, book = _table_and_book(tmp_path)
    done = run_cli("rate", str(table), str(book), "--out", str(tmp_path / "priced.csv"))
    assert done.returncode == 0, done.stderr
    # the first line names the file; the summary table follows (added with the terminal rework)
    assert done.stdout.splitlines()[0] == f"wrote {tmp_path / 'priced.csv'} (6 rows)"
    assert re.search(r"rows priced \(count\)\s+6\n", done.stdout) and "total gross premium" in done.stdout
    lines = done.stderr.splitlines()
    assert lines[0] == (
        "factor 'region': 3 rows with a level the table does not list ('Islands', 'Atlantis') rated at the "
        "fallback level 'North'; 2 rows with a missing value rated at the missing row"
    )
    assert lines[1].startswith("caution: Draft for review by a qualified actuary")
    strict = run_cli("rate", str(table), str(book), "--out", str(tmp_path / "strict.csv"), "--strict-levels")
    assert strict.returncode == 2
    assert strict.stderr.strip() == (
        f"premiumlab: {book}: factor 'region': level 'Islands' at book row 1 (0-based) is not in the table and "
        "strict levels refuse it (the fallback would be 'North')"
    )
    assert not (tmp_path / "strict.csv").exists()


def test_the_sentences_of_the_counts():
    """One row is singular; with five unknown levels shown they are the first met of perhaps more."""
    from premiumlab.cli.format import level_count_lines

    assert level_count_lines(
        [
            LevelCounts("age", 1),
            LevelCounts("territory", 0, 1, "T001", ("T301",)),
            LevelCounts("zone", 3, 9, "Z1", ("a", "b", "c", "d", "e")),
        ]
    ) == [
        "factor 'age': 1 row with a missing value rated at the missing row",
        "factor 'territory': 1 row with a level the table does not list ('T301') rated at the fallback level 'T001'",
        "factor 'zone': 9 rows with a level the table does not list (first met: 'a', 'b', 'c', 'd', 'e') rated at "
        "the fallback level 'Z1'; 3 rows with a missing value rated at the missing row",
    ]
