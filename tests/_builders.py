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
    return pd.DataFrame({
        "policy_id": [f"Q{i:05d}" for i in range(n)],
        "year": 2025,
        "exposure": np.round(rng.uniform(0.2, 1.0, n), 4),
        "claim_count": count,
        "claim_amount": np.where(count > 0, np.round(rng.gamma(2.0, 400.0, n) * count, 2), 0.0),
        "age": rng.integers(18, 85, n),
        "region": rng.choice(["Northmoor", "Eastvale", "Southby"], n),
        "bonus": rng.choice(["01", "02", "03"], n),
    })


def run_cli(*args: str, cwd: Path | None = None, timeout: float = 600) -> subprocess.CompletedProcess:
    """Run `premiumlab ARGS` in a subprocess and capture its output."""
    env = dict(os.environ, PYTHONHASHSEED="0")
    return subprocess.run([sys.executable, "-m", "premiumlab", *args], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=timeout)


ROOT = Path(__file__).resolve().parents[1]
DEMO_POLICIES = 20_000
#: The test run of the motor scenario: fewer folds and settings than the defaults keep the suite fast.
QUICK_GBM = "\n[gbm]\nfolds = 3\nmax_settings = 2\nmax_rounds = 600\n"
