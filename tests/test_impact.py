"""Premium dislocation on a hand-checked book, and the capping correction at its fixed point."""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pandas as pd
import pytest

import rating_tables
from rating_tables import TableError, cap_premiums, impact

from _builders import example_book, example_table, run_cli

CURRENT = np.array([100.0, 100.0, 100.0, 200.0, 50.0, 100.0, 100.0])
PROPOSED = np.array([130.0, 95.0, 104.0, 150.0, 80.0, 105.0, 88.0])
BOOK = pd.DataFrame(
    {"region": ["Hollow", "Hollow", "Ridge", "Ridge", "Hollow", "Ridge", "Ridge"], "age": [30, 30, 41, 41, 52, 52, 52]}
)


def test_bands_thresholds_levels_and_largest_increases_by_hand():
    """Changes: +30 %, -5 %, +4 %, -25 %, +60 %, +5 %, -12 % (bands are lower-inclusive, so exactly -5 % is
    in '-5% to 0%' and exactly +5 % in '+5% to +10%')."""
    out = impact(CURRENT, PROPOSED, BOOK, ["region", "age"], thresholds=(0.05, 0.25, 0.5), top=3)
    json.dumps(out)  # plain JSON
    assert out["rows"] == out["policies"] == 7
    assert out["total_current"] == 750.0 and out["total_proposed"] == 752.0
    assert out["overall_change"] == pytest.approx(2 / 750, rel=1e-12)
    counts = {b["band"]: b["count"] for b in out["bands"]}
    assert counts == {
        "below -20%": 1,
        "-20% to -10%": 1,
        "-10% to -5%": 0,
        "-5% to 0%": 1,
        "0% to +5%": 1,
        "+5% to +10%": 1,
        "+10% to +20%": 0,
        "above +20%": 2,
    }
    premium = {b["band"]: b["current_premium"] for b in out["bands"]}
    assert premium["below -20%"] == 200.0 and premium["above +20%"] == 150.0
    assert sum(b["premium_share"] for b in out["bands"]) == pytest.approx(1.0, rel=1e-12)
    # above +5 %: the +30 % and +60 % policies (+5 % itself is not above): 2 of 7, premium 150 of 750
    assert out["above_thresholds"][0] == {"threshold": 0.05, "count": 2, "count_share": 2 / 7, "premium_share": 0.2}
    assert [t["count"] for t in out["above_thresholds"]] == [2, 2, 1]
    # Hollow: current 100 + 100 + 50 = 250, proposed 130 + 95 + 80 = 305 -> +22 %
    # Ridge:  current 100 + 200 + 100 + 100 = 500, proposed 104 + 150 + 105 + 88 = 447 -> -10.6 %
    region = {r["level"]: r for r in out["by_factor"]["region"]}
    assert region["Hollow"]["count"] == 3 and region["Hollow"]["change"] == pytest.approx(0.22, rel=1e-12)
    assert region["Ridge"]["change"] == pytest.approx(447 / 500 - 1, rel=1e-12)
    assert [r["level"] for r in out["by_factor"]["age"]] == ["30", "41", "52"]
    assert [r["row"] for r in out["largest_increases"]] == [4, 0, 5]
    assert out["largest_increases"][0] == {"row": 4, "id": {}, "current": 50.0, "proposed": 80.0, "change": 0.6}


def test_rows_and_policies_are_counted_apart_and_increases_name_the_policy():
    """The seven rows above as three policies over periods: 'rows' counts 7, 'policies' 3, and the
    largest increase (row 4, +60 %) is named by its policy id and period."""
    ids = BOOK.assign(policy=["A", "A", "B", "B", "C", "C", "C"], period=[2025, 2026, 2025, 2026, 2024, 2025, 2026])
    out = impact(CURRENT, PROPOSED, ids, ["region"], top=1, id_columns=("policy", "period"))
    assert (out["rows"], out["policies"]) == (7, 3)
    assert out["largest_increases"] == [
        {"row": 4, "id": {"policy": "C", "period": "2024"}, "current": 50.0, "proposed": 80.0, "change": 0.6}
    ]
    assert out["capping"] is None


def test_capping_by_hand():
    """Cap +-10 %: limits 90..110 (50 -> 45..55, 200 -> 180..220). Capped: 110, 95, 104, 180, 55, 105, 90
    = 739 against 752 proposed (off-balance 739 / 752 - 1 = -1.729 %). Correction k: with policies 0 and 4
    at their ceilings (110, 55) and policy 3 at its floor (180), 345 + k (95 + 104 + 105 + 88) = 752 gives
    k = 407 / 392 = 1.038265; consistent, since 104 k = 107.98 and 105 k = 109.02 stay below 110, 88 k = 91.37
    is above 90 (policy 6 leaves its floor) and 150 k = 155.74 is still below 180."""
    out = impact(CURRENT, PROPOSED, BOOK, [], cap=0.10)["capping"]
    assert out["capped_up"] == 2 and out["capped_down"] == 2
    assert out["total_capped"] == pytest.approx(739.0, rel=1e-12)
    assert out["off_balance"] == pytest.approx(739 / 752 - 1, rel=1e-12)
    assert out["correction_factor"] == pytest.approx(407 / 392, rel=1e-12)
    after = out["after_correction"]
    assert after["total"] == pytest.approx(752.0, rel=1e-12)
    assert after["capped_up"] == 2 and after["capped_down"] == 1


def _iterate_to_fixed_point(current, proposed, cap):
    """The brief's iteration, written independently: scale the uncapped policies, cap again, repeat."""
    low, high = current * (1 - cap), current * (1 + cap)
    target, k = proposed.sum(), 1.0
    for _ in range(1000):
        scaled = k * proposed
        free = (scaled > low) & (scaled < high)
        held = np.where(scaled >= high, high, low)[~free].sum()
        k_next = (target - held) / proposed[free].sum()
        if k_next == k:
            break
        k = k_next
    return k


def test_capping_correction_restores_the_total_at_the_fixed_point():
    rng = np.random.default_rng(11)
    current = rng.gamma(4.0, 120.0, 10_000)
    proposed = current * np.exp(rng.normal(0.04, 0.12, current.size))
    result = cap_premiums(current, proposed, 0.15)
    k = result.correction_factor
    assert abs(result.corrected.sum() / proposed.sum() - 1) < 1e-9
    np.testing.assert_array_equal(result.corrected, np.clip(k * proposed, current * 0.85, current * 1.15))
    assert result.off_balance < 0  # more increases than decreases are cut
    assert k == pytest.approx(_iterate_to_fixed_point(current, proposed, 0.15), rel=1e-10)


def test_unreachable_correction_and_bad_input():
    """With a cap of 0 every policy keeps its current premium: no correction can restore the total."""
    result = cap_premiums(CURRENT, PROPOSED, 0.0)
    assert result.correction_factor is None and result.corrected is None
    np.testing.assert_array_equal(result.capped, CURRENT)
    with pytest.raises(TableError, match=r"current: premium 0.0 at book row 2 \(0-based\) must be finite and > 0"):
        impact(np.where(np.arange(7) == 2, 0.0, CURRENT), PROPOSED, BOOK, [])
    with pytest.raises(TableError, match="expected 7 premiums"):
        impact(CURRENT[:3], PROPOSED, BOOK, [])
    with pytest.raises(TableError, match="the book has no column 'zone'"):
        impact(CURRENT, PROPOSED, BOOK, ["zone"])


def test_the_impact_command_breaks_numeric_factors_down_by_band_and_draws_the_figure(tmp_path):
    """Through the command line on the hand-made table of tests/test_rater.py and a current table
    that drops `bonus` (so the proposed one adds it) and moves every age band's relativity: the age
    breakdown is by the proposed table's bands, `bonus` appears as a proposed factor, each premium
    sum equals the sum of that band's rated premiums, and --figure writes a PNG."""
    proposed = example_table()
    age, region, _, cross = proposed.factors
    current = dataclasses.replace(
        proposed, factors=(dataclasses.replace(age, relativity=[1.2, 1.0, 1.5]), region, cross)
    )
    rating_tables.save(proposed, tmp_path / "proposed")
    rating_tables.save(current, tmp_path / "current")
    book = pd.concat([example_book()] * 3, ignore_index=True).assign(
        age=[22, 45, 70, 27, 35, 18, 24, 25, 59, 60, 61, 90, 33, 44, 55]
    )
    book.to_csv(tmp_path / "book.csv", index=False)
    r = run_cli(
        "impact",
        str(tmp_path / "book.csv"),
        "--current",
        str(tmp_path / "current"),
        "--proposed",
        str(tmp_path / "proposed"),
        "--out",
        str(tmp_path / "impact.json"),
        "--figure",
        str(tmp_path / "impact.png"),
    )
    assert r.returncode == 0, r.stderr
    out = json.loads((tmp_path / "impact.json").read_text())
    assert list(out["by_factor"]) == ["age", "region", "bonus"]
    assert [level["level"] for level in out["by_factor"]["age"]] == ["[-inf, 25)", "[25, 60)", "[60, inf)"]
    priced_now = rating_tables.rate(current, book, "exposure")["gross_premium"].to_numpy()
    priced_new = rating_tables.rate(proposed, book, "exposure")["gross_premium"].to_numpy()
    band = np.searchsorted([25, 60], book["age"].to_numpy(), side="right")
    for i, level in enumerate(out["by_factor"]["age"]):
        assert level["count"] == int((band == i).sum())
        assert level["current_premium"] == pytest.approx(priced_now[band == i].sum(), rel=1e-12)
        assert level["proposed_premium"] == pytest.approx(priced_new[band == i].sum(), rel=1e-12)
    png = (tmp_path / "impact.png").read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n" and len(png) > 20_000
    r = run_cli(
        "impact",
        str(tmp_path / "book.csv"),
        "--current",
        str(tmp_path / "current"),
        "--proposed",
        str(tmp_path / "proposed"),
        "--figure",
        str(tmp_path / "impact.jpg"),
    )
    assert r.returncode == 2 and "impact.jpg: the figure must be a .png file" in r.stderr
    assert not (tmp_path / "impact.jpg").exists()
