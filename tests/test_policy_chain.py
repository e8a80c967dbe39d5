"""Three policies through the whole chain, by hand: `premiumlab rate` and `premiumlab impact` to the cent.

A full-term policy, a two-day policy at the minimum premium, and a policy whose region the table does
not list (rated at the fallback level). Every figure below was worked out by hand from the rating
algorithm of docs/rating-table.md (rate per unit, term premium, minimum per full term earned with the
exposure, rounding to cents) and is written as a literal; the commands must reproduce them.

Proposed table: base rate 400; driver_age [-inf, 25) 1.5, [25, inf) 1.0; region North 1.0 (base and
fallback), Coast 1.2; LAE 10 %, fixed expense 50 per year, variable expense 20 %, profit 5 %, minimum
premium 700 per full term. Current table: the same with base rate 380 and Coast 1.1.
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest

import rating_tables
from rating_tables import CategoricalFactor, Loadings, NumericFactor, RatingTable

from _builders import run_cli

INF = float("inf")


def _table(table_id: str, base_rate: float, coast: float) -> RatingTable:
    return RatingTable(
        table_id=table_id,
        effective_date="2027-01-01",
        base_rate=base_rate,
        exposure_unit="policy-year",
        factors=(
            NumericFactor("driver_age", "none", [-INF, 25.0], [25.0, INF], [1.5, 1.0], [10.0, 90.0]),
            CategoricalFactor(
                "region", "none", ("North", "Coast"), [1.0, coast], [60.0, 40.0], fallback="North", base="North"
            ),
        ),
        loadings=Loadings(
            lae_ratio=0.10, fixed_expense=50.0, variable_expense=0.20, profit=0.05, minimum_premium=700.0
        ),
        book_columns={"exposure": "years", "policy_id": "policy", "period": "period"},
    )


@pytest.fixture()
def chain(tmp_path: Path) -> dict[str, Path]:
    rating_tables.save(_table("chain.proposed.indicated", 400.0, 1.2), tmp_path / "proposed")
    rating_tables.save(_table("chain.current.indicated", 380.0, 1.1), tmp_path / "current")
    book = pd.DataFrame(
        {
            "policy": ["P-A", "P-B", "P-C"],
            "period": ["2027", "2027", "2027"],
            "driver_age": [30, 30, 22],
            "region": ["Coast", "North", "Islands"],
            "years": [1.0, 2 / 365, 0.5],
        }
    )
    book.to_csv(tmp_path / "book.csv", index=False)
    return {"base": tmp_path, "book": tmp_path / "book.csv"}


def test_rate_prices_each_policy_as_worked_by_hand(chain):
    """P-A (full term, 30, Coast): rate 400 x 1.0 x 1.2 = 480; term (480 x 1.1 + 50) / 0.75 = 578 / 0.75
    = 770.666..., above 700: gross 770.67; pure 480.00; LAE 48.00; fixed 50.00; variable 770.666 x 0.2
    = 154.13; profit 770.666 x 0.05 = 38.53.
    P-B (two days, 30, North): rate 400; term (440 + 50) / 0.75 = 653.33, below the minimum 700 per
    full term: at the minimum, gross 700 x 2/365 = 3.8356 -> 3.84 (not 700); pure 400 x 2/365 = 2.19;
    adjustment (700 - 653.333) x 2/365 = 0.2557 -> 0.26.
    P-C (half a year, 22, Islands -> fallback North): rate 400 x 1.5 = 600; term (660 + 50) / 0.75 =
    946.666...; gross x 0.5 = 473.33; pure 300.00."""
    out = chain["base"] / "priced.csv"
    r = run_cli("rate", str(chain["base"] / "proposed"), str(chain["book"]), "--out", str(out))
    assert r.returncode == 0, r.stderr
    priced = pd.read_csv(out)
    assert priced["gross_premium"].tolist() == [770.67, 3.84, 473.33]
    assert priced["pure_premium"].tolist() == [480.0, 2.19, 300.0]
    assert priced["lae_load"].tolist() == [48.0, 0.22, 30.0]
    assert priced["fixed_expense_load"].tolist() == [50.0, 0.27, 25.0]
    assert priced["variable_expense_load"].tolist() == [154.13, 0.72, 94.67]
    assert priced["profit_load"].tolist() == [38.53, 0.18, 23.67]
    assert priced["minimum_premium_adjustment"].tolist() == [0.0, 0.26, 0.0]
    assert priced["at_minimum"].tolist() == [False, True, False]
    assert priced["rel_region"].tolist() == [1.2, 1.0, 1.0]
    assert "rated at the fallback level 'North'" in r.stderr  # P-C's region is not a level of the table


def test_impact_names_the_largest_increase_by_policy_and_period(chain):
    """Current gross premiums by hand: P-A rate 380 x 1.1 = 418, term (459.8 + 50) / 0.75 = 679.73,
    below the minimum 700: charged 700.00 for its full term; P-B rate 380, term 624 < 700: 3.84;
    P-C rate 570, term (627 + 50) / 0.75 = 902.666, x 0.5 = 451.33. Totals 1,155.17 -> 1,247.84
    (+8.022 %); the largest increase is P-A, 2027: 700.00 -> 770.67 (+10.096 %); 3 rows, 3 policies."""
    out = chain["base"] / "impact.json"
    r = run_cli(
        "impact",
        str(chain["book"]),
        "--current",
        str(chain["base"] / "current"),
        "--proposed",
        str(chain["base"] / "proposed"),
        "--out",
        str(out),
    )
    assert r.returncode == 0, r.stderr
    result = json.loads(out.read_text())
    assert (result["rows"], result["policies"]) == (3, 3)
    assert result["total_current"] == pytest.approx(1155.17, abs=1e-9)
    assert result["total_proposed"] == pytest.approx(1247.84, abs=1e-9)
    assert result["overall_change"] == pytest.approx(1247.84 / 1155.17 - 1, abs=1e-12)
    top = result["largest_increases"][0]
    assert top["id"] == {"policy": "P-A", "period": "2027"}
    assert (top["current"], top["proposed"]) == (700.0, 770.67)
    assert top["change"] == pytest.approx(770.67 / 700.0 - 1, abs=1e-12)
    assert "largest increase: policy P-A, period 2027, 700.00 -> 770.67 (+10.1%)" in r.stdout


def test_annual_impact_against_a_premium_column_is_refused(chain):
    """A premium column holds each row's premium for its own period: --annual cannot apply to it."""
    book = pd.read_csv(chain["book"]).assign(paid=[600.0, 3.5, 420.0])
    book.to_csv(chain["book"], index=False)
    r = run_cli(
        "impact",
        str(chain["book"]),
        "--current",
        "column:paid",
        "--proposed",
        str(chain["base"] / "proposed"),
        "--annual",
    )
    assert r.returncode == 2 and "--annual with --current column:paid" in r.stderr
