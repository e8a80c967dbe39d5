"""The worked example of docs/rating-table.md, section "Worked example", checked with the rater.

The table folder and the book are read from the page itself (each file is the fenced block after a
`<!-- file: PATH -->` line), so the page and the test cannot drift apart. The figures were computed
by hand on the page; here `rating_tables.rate` must give them to the cent, and the files must be in
the canonical form that `rating_tables.save` writes.
"""

from __future__ import annotations

import re
from pathlib import Path

import pandas as pd
import pytest

import rating_tables

PAGE = Path(__file__).resolve().parents[2] / "docs" / "rating-table.md"
SECTION = "Worked example"
FILE_BLOCK = re.compile(r"<!-- file: (?P<path>[^ ]+) -->\n```[a-z]*\n(?P<text>.*?)```", re.S)


def section(text: str, title: str) -> str:
    """The body of the `## title` section of a Markdown page, up to the next `## ` heading."""
    start = text.index(f"\n## {title}\n")
    end = text.find("\n## ", start + 1)
    return text[start:] if end < 0 else text[start:end]


@pytest.fixture(scope="module")
def example(tmp_path_factory) -> dict:
    """The section's text, its files written under a temporary folder, and the loaded table."""
    body = section(PAGE.read_text(encoding="utf-8"), SECTION)
    base = tmp_path_factory.mktemp("worked")
    files = {m["path"]: m["text"] for m in FILE_BLOCK.finditer(body)}
    assert set(files) == {"table.json", "factors/driver_age.csv", "factors/region.csv", "book.csv"}
    for path, text in files.items():
        target = base / ("book" if path == "book.csv" else "table") / path
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_text(text, encoding="utf-8")
    return {
        "body": body,
        "files": files,
        "table": rating_tables.load(base / "table"),
        "book": pd.read_csv(base / "book" / "book.csv", dtype={"policy_id": str, "region": str}),
    }


def test_the_example_files_are_in_canonical_form(example, tmp_path):
    """Saving the loaded table writes the page's files byte for byte."""
    rating_tables.save(example["table"], tmp_path)
    for path, text in example["files"].items():
        if path != "book.csv":
            assert (tmp_path / path).read_text(encoding="utf-8") == text, path


def test_the_rater_gives_the_hand_figures(example):
    """P1: rate (300 x 1.4) x 1.25 = 525, term (525 x 1.1 + 40) / 0.8 = 771.875, gross x 0.5 =
    385.9375 -> 385.94; P2: fallback North, 115.625 on paper, 115.62500000000001 in double precision
    (the divisor 1 - 0.15 - 0.05 is 0.7999999999999999) -> 115.63; P3: term 421.25 below the
    minimum 450 per full term, charged 450 x 0.2 = 90.00 with an adjustment of 5.75; P4: region
    missing, the missing row 1.1: pure 330 x 0.8 = 264, gross 503.75 x 0.8 = 403. Figures computed
    by hand on the page."""
    rated = rating_tables.rate(example["table"], example["book"], exposure_column="exposure")
    assert rated["pure_premium"].tolist() == [262.5, 75.0, 54.0, 264.0]
    assert rated["gross_premium"].tolist() == [385.94, 115.63, 90.0, 403.0]
    assert rated["minimum_premium_adjustment"].tolist() == [0.0, 0.0, 5.75, 0.0]
    assert rated["at_minimum"].tolist() == [False, False, True, False]
    assert rated["rel_driver_age"].tolist() == [1.4, 1.0, 1.0, 1.0]
    assert rated["rel_region"].tolist() == [1.25, 1.0, 0.9, 1.1]
    for figure in ("**385.94**", "**115.63**", "**90.00**", "264.00", "**403.00**", "5.75"):
        assert figure in example["body"], figure


def test_the_build_up_adds_up_to_the_gross_premium(example):
    """Before rounding the loads and the adjustment add up to the gross premium; after rounding each
    column on its own, within one cent per column (the page's P2 is a cent short)."""
    rated = rating_tables.rate(example["table"], example["book"], exposure_column="exposure")
    parts = [
        "pure_premium",
        "lae_load",
        "fixed_expense_load",
        "variable_expense_load",
        "profit_load",
        "minimum_premium_adjustment",
    ]
    gap = (rated[parts].sum(axis=1) - rated["gross_premium"]).abs()
    assert gap.max() <= 0.005 * len(parts) + 1e-9
    assert gap.tolist() == pytest.approx([0.0, 0.01, 0.0, 0.0], abs=1e-9)


def test_the_missing_row_and_the_counts_on_the_page(example, tmp_path):
    """region.csv's last row is the missing row (1.1, 35 policy-years); `premiumlab rate` states the
    rows at the fallback and at the missing row as the page shows."""
    from premiumlab.cli.format import level_count_lines

    region = example["table"].factor("region")
    assert region.levels == ("North", "South", "Coast")
    assert region.missing == rating_tables.MissingRow(1.1, 35.0)
    (tmp_path / "book.csv").write_text(example["files"]["book.csv"], encoding="utf-8")
    rated = rating_tables.rate_file(example["table"], tmp_path / "book.csv", tmp_path / "rated.csv", "exposure")
    assert rated.counts == (rating_tables.LevelCounts("region", 1, 1, "North", ("Islands",)),)
    (line,) = level_count_lines(rated.counts)
    assert f"```\n{line}\n```" in example["body"]


def test_the_rated_book_on_the_page_is_the_raters(example):
    """Every cell of the page's rated-book table, as the rater computes it (money to the cent)."""
    rated = rating_tables.rate(example["table"], example["book"], exposure_column="exposure")
    lines = [line for line in example["body"].splitlines() if line.startswith("| P")]
    header = next(line for line in example["body"].splitlines() if line.startswith("| policy_id"))
    columns = [c.strip() for c in header.strip("|").split("|")]
    assert columns == list(rated.columns)
    assert len(lines) == len(rated)
    money = [
        "pure_premium",
        "lae_load",
        "fixed_expense_load",
        "variable_expense_load",
        "profit_load",
        "minimum_premium_adjustment",
        "gross_premium",
    ]
    for line, (_, row) in zip(lines, rated.iterrows()):
        cells = dict(zip(columns, (c.strip() for c in line.strip("|").split("|"))))
        for name in money:
            assert cells[name] == f"{row[name]:.2f}", (row["policy_id"], name)
        for name in ("rel_driver_age", "rel_region", "exposure"):
            assert float(cells[name]) == row[name], (row["policy_id"], name)
        assert cells["at_minimum"] == str(row["at_minimum"]), row["policy_id"]


def test_annual_rating_of_the_first_policy(example):
    """--annual: one full term, pure 525, gross (525 x 1.1 + 40) / 0.8 = 771.875 -> 771.88."""
    rated = rating_tables.rate(example["table"], example["book"].drop(columns="exposure"), annual=True)
    assert rated["pure_premium"].iloc[0] == pytest.approx(525.0, rel=1e-12)
    assert rated["gross_premium"].iloc[0] == 771.88
    assert "**771.88**" in example["body"]
