"""Shared fixtures: small hand-written books and specs, and a CLI runner (subprocess, as a user runs it)."""
from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

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


@pytest.fixture
def spec_file(tmp_path: Path) -> Path:
    p = tmp_path / "spec.toml"
    p.write_text(SPEC_TEXT)
    return p


@pytest.fixture
def book_file(tmp_path: Path) -> Path:
    p = tmp_path / "book.csv"
    small_book().to_csv(p, index=False)
    return p


def run_cli(*args: str, cwd: Path | None = None, timeout: float = 600) -> subprocess.CompletedProcess:
    """Run `premiumlab ARGS` in a subprocess and capture its output."""
    env = dict(os.environ, PYTHONHASHSEED="0")
    return subprocess.run([sys.executable, "-m", "premiumlab", *args], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=timeout)


ROOT = Path(__file__).resolve().parents[1]
DEMO_POLICIES = 20_000
#: The test run of the motor scenario: fewer folds and settings than the defaults keep the suite fast.
QUICK_GBM = "\n[gbm]\nfolds = 3\nmax_settings = 2\nmax_rounds = 600\n"


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory) -> dict[str, Path]:
    """Simulate a small motor book and run the pipeline once through the CLI; tests read the outputs."""
    base = tmp_path_factory.mktemp("demo")
    spec = base / "spec.toml"
    spec.write_text((ROOT / "scenarios" / "motor_spec.toml").read_text() + QUICK_GBM)
    book = base / "book.parquet"
    steps = [
        ("simulate", str(ROOT / "scenarios" / "motor.toml"), "--out", str(book),
         "--policies", str(DEMO_POLICIES), "--seed", "11"),
        ("fit", str(book), "--spec", str(spec), "--out", str(base / "run")),
        ("compare", str(base / "run")),
        ("report", str(base / "run")),
        ("tabulate", str(base / "run"), "--out", str(base / "table")),
        ("tabulate", str(base / "run"), "--out", str(base / "glm_table"), "--model", "glm"),
        ("audit", str(base / "table"), "--spec", str(spec), "--run", str(base / "run")),
        ("rate", str(base / "table"), str(book), "--out", str(base / "priced.parquet")),
        ("impact", str(book), "--current", str(base / "glm_table"), "--proposed", str(base / "table"),
         "--cap", "0.15", "--out", str(base / "impact.json")),
    ]
    for step in steps:
        r = run_cli(*step)
        assert r.returncode == 0, f"{step[0]} failed: {r.stderr[-3000:]}"
    return {"base": base, "spec": spec, "book": book, "truth": base / "truth.json", "run": base / "run",
            "table": base / "table", "glm_table": base / "glm_table", "priced": base / "priced.parquet",
            "impact": base / "impact.json"}
