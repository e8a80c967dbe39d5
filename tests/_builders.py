"""Helpers that build test inputs: a small book, its spec, a CLI runner, the test run's search settings.

Test files import these from here (never from conftest or from each other); conftest.py holds the
fixtures built on them.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd

from premiumlab.book.gbm_options import GbmOptions
from premiumlab.models.gbm.training import GbmInputs
from rating_tables import Bands, CategoricalFactor, InteractionFactor, Loadings, NumericFactor, RatingTable

SPEC_TEXT = """
[columns]
exposure = "exposure"
claim_count = "claim_count"
claim_amount = "claim_amount"
policy_id = "policy_id"
period = "year"

[factors.age]
type = "numeric"
bands = [25, 40, 60]

[factors.region]
type = "categorical"

[factors.bonus]
type = "categorical"
levels = ["01", "02", "03"]
monotone = "increasing"

[split]
holdout = 0.2
seed = 7
"""


def small_book(n: int = 400, seed: int = 3) -> pd.DataFrame:
    """A small well-formed book for checks of reading and validation (not for modelling results)."""
    rng = np.random.default_rng(seed)
    count = rng.poisson(0.4, n)
    return pd.DataFrame(
        {
            "policy_id": [f"Q{i:05d}" for i in range(n)],
            "year": 2025,
            "exposure": np.round(rng.uniform(0.2, 1.0, n), 4),
            "claim_count": count,
            "claim_amount": np.where(count > 0, np.round(rng.gamma(2.0, 400.0, n) * count, 2), 0.0),
            "age": rng.integers(18, 85, n),
            "region": rng.choice(["Northmoor", "Eastvale", "Southby"], n),
            "bonus": rng.choice(["01", "02", "03"], n),
        }
    )


def write_book(frame: pd.DataFrame, path: Path) -> Path:
    """Write a book as CSV or Parquet, by the suffix of `path`; returns `path`."""
    if path.suffix == ".csv":
        frame.to_csv(path, index=False)
    else:
        frame.to_parquet(path, index=False)
    return path


def run_cli(*args: str, cwd: Path | None = None, timeout: float = 600) -> subprocess.CompletedProcess:
    """Run `premiumlab ARGS` in a subprocess and capture its output."""
    env = dict(os.environ, PYTHONHASHSEED="0")
    return subprocess.run(
        [sys.executable, "-m", "premiumlab", *args], cwd=cwd, env=env, capture_output=True, text=True, timeout=timeout
    )


ROOT = Path(__file__).resolve().parents[1]
DEMO_POLICIES = 20_000
#: The test run of the motor scenario: fewer folds and settings than the defaults keep the suite fast.
QUICK_GBM = "\n[gbm]\nfolds = 3\nmax_settings = 2\nmax_rounds = 600\n"


# ------------------------------------------------------------------ rating tables

INF = np.inf


def example_table(minimum_premium: float = 120.0) -> RatingTable:
    """An invented motor table: base 200 per policy-year, three factors and one two-way table."""
    age = NumericFactor(
        "age",
        "none",
        lower=[-INF, 25, 60],
        upper=[25, 60, INF],
        relativity=[1.5, 1.0, 1.25],
        exposure=[120.0, 800.0, 300.0],
    )
    region = CategoricalFactor(
        "region",
        "none",
        levels=("North", "South", "Coast"),
        relativity=[1.0, 0.875, 1.5],
        exposure=[600.0, 400.0, 220.0],
        fallback="North",
        base="North",
    )
    bonus = CategoricalFactor(
        "bonus", "increasing", levels=("01", "02", "03"), relativity=[0.75, 1.0, 1.25], exposure=[500.0, 500.0, 220.0]
    )
    age_region = InteractionFactor(
        "age__region",
        ("age", "region"),
        a_cells=Bands([-INF, 30], [30, INF]),
        b_cells=("North", "South", "Coast"),
        relativity=[[1.0, 1.0, 1.125], [1.0, 1.0, 1.0]],
    )
    return RatingTable(
        table_id="fictional-motor-2027-draft",
        effective_date="2027-01-01",
        base_rate=200.0,
        exposure_unit="policy-year",
        factors=(age, region, bonus, age_region),
        loadings=Loadings(
            lae_ratio=0.10, fixed_expense=30.0, variable_expense=0.15, profit=0.05, minimum_premium=minimum_premium
        ),
        target={"basis": "experience", "total_pure_premium": 250000.0},
        provenance={"run": "fictional", "model": "hand-made"},
        cautions=("Invented table for tests.",),
    )


def edit_text(folder: Path, name: str, old: str, new: str) -> None:
    """Replace the first `old` by `new` in the text file `folder / name` (which must hold `old`)."""
    path = folder / name
    text = path.read_text()
    assert old in text, old
    path.write_text(text.replace(old, new, 1))


def example_book() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "policy": ["P1", "P2", "P3", "P4", "P5"],
            "age": [22, 45, 70, 27, 35],
            "region": ["Coast", "South", "North", "Atlantis", "Coast"],
            "bonus": ["03", "01", "02", "02", "01"],
            "exposure": [1.0, 0.5, 1.0, 0.25, 0.1],
        }
    )


# ------------------------------------------------------------------ boosted models

# One thread: on small books LightGBM is no faster with two, and far slower when the cores are shared.
OPTIONS = GbmOptions(
    folds=3,
    max_settings=2,
    max_rounds=300,
    early_stopping_rounds=20,
    tweedie_power=1.6,
    num_threads=1,
    grid=(
        {"num_leaves": 7, "min_data_in_leaf": 50, "learning_rate": 0.1, "lambda_l2": 1.0},
        {"num_leaves": 15, "min_data_in_leaf": 100, "learning_rate": 0.1, "lambda_l2": 0.0},
    ),
)


def invented_book(policies: int = 3000, seed: int = 7) -> tuple[pd.DataFrame, GbmInputs]:
    """A fictional motor book of `policies` policies, a third of them with two yearly rows.

    `score` is a centred numeric factor with negative values, exact zeros and positive values.
    """
    rng = np.random.default_rng(seed)
    policy = np.concatenate([np.arange(policies), np.arange(policies // 3)])
    n = policy.size
    age = rng.integers(18, 86, policies)[policy].astype(float)
    score = np.round(rng.normal(0.0, 2.0, policies), 1)[policy]
    region = pd.Categorical(rng.choice(["Northmere", "Southvale", "Eastholm", "Westreach"], policies)[policy])
    bonus = rng.integers(0, 5, policies)[policy].astype(float)
    exposure = rng.uniform(0.1, 1.0, n)
    log_mu = (
        np.log(0.12) + 0.015 * (age - 50) + 0.15 * score + 0.12 * bonus + np.where(region == "Northmere", 0.35, 0.0)
    )
    count = rng.poisson(np.exp(log_mu) * exposure)
    amount = np.array([rng.gamma(2.0, 900.0 * (1 + 0.1 * b), c).sum() for c, b in zip(count, bonus)])
    features = pd.DataFrame({"driver_age": age, "score": score, "region": region, "bonus_class": bonus})
    inputs = GbmInputs(
        features=features,
        monotone={"bonus_class": 1},
        exposure=exposure,
        claim_count=count,
        claim_amount=amount,
        groups=policy,
    )
    return features, inputs
