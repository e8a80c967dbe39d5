"""Simulator recovery of the missing-alarm relativity on the property scenario (issue 14, item 1).

Invented data: the shipped `property` scenario at 40,000 policies (about 75,000 rows), whose alarm
is missing on about 5 % of the policies (12 % of the timber buildings, 3 % of the others) with a
true pure-premium relativity of 1.05 over the alarm's base level `none` (truth.json, `missing`).
The book is fitted and tabulated as given; each table's missing row over its relativity for `none`
is compared with the truth on the log scale, and so is the frequency GLM's `(missing)` relativity
(truth 1.05 for the frequency too), which the heavy-tailed severity does not blur.

Tolerance: 2.5 standard errors of a log pure-premium relativity estimated from the claims of the
missing group, sqrt((1 + CV^2) / n) with n the group's training claims and CV^2 = 1 / 1.2 the
squared coefficient of variation of the scenario's gamma severity (shape 1.2): a common-practice
approximation that ignores the heavy tail, about 0.24 at this size (about 200 claims); for the
frequency, 2.5 / sqrt(n), about 0.18. Measured when written (seed 4242): distilled table 0.993,
GLM table 0.866, frequency GLM 1.020, against 1.05. Marked `load` (a boosted fit on 75,000 rows):
run by `.ci/run` with `-m load`.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import premiumlab
import rating_tables
from premiumlab.book.spec import Spec
from premiumlab.book.split import holdout_flags

from _builders import QUICK_GBM

ROOT = Path(__file__).resolve().parents[1]
POLICIES = 40_000
#: The scenario's gamma severity shape (scenarios/property.toml, severity_shape).
SEVERITY_SHAPE = 1.2
STANDARD_ERRORS = 2.5
pytestmark = pytest.mark.load


@pytest.fixture(scope="module")
def property_tables(tmp_path_factory):
    base = tmp_path_factory.mktemp("missing_recovery")
    book, spec = base / "book.parquet", base / "spec.toml"
    spec.write_text((ROOT / "scenarios" / "property_spec.toml").read_text() + QUICK_GBM)
    premiumlab.simulate(ROOT / "scenarios" / "property.toml", out=book, policies=POLICIES)
    premiumlab.fit(book, spec=spec, out=base / "run")
    tables = {}
    for model in ("gbm", "glm"):
        premiumlab.tabulate(base / "run", out=base / f"table_{model}", model=model)
        tables[model] = rating_tables.load(base / f"table_{model}")
    truth = json.loads((base / "truth.json").read_text())["factors"]["alarm"]
    frequency = json.loads((base / "run" / "models" / "glm_frequency.json").read_text())["relativities"]["alarm"]
    return pd.read_parquet(book), tables, truth, premiumlab.load_spec(spec), frequency


def measured_missing_relativity(table: rating_tables.RatingTable, base_level: str) -> float:
    """The alarm's missing row over its relativity for `base_level`."""
    alarm = next(f for f in table.factors if f.name == "alarm")
    assert alarm.missing is not None, "the alarm has missing values, so its table needs a missing row"
    return alarm.missing.relativity / alarm.relativity[list(alarm.labels()).index(base_level)]


def missing_claims(frame: pd.DataFrame, spec: Spec) -> float:
    """Claims of the training rows whose alarm is missing."""
    held = holdout_flags(frame["policy_id"].to_numpy(object), spec.split.seed, spec.split.holdout)
    return float(frame.loc[frame["alarm"].isna().to_numpy() & ~held, "claim_count"].sum())


@pytest.mark.parametrize("model", ["gbm", "glm"])
def test_missing_alarm_relativity_recovers_the_truth(property_tables, model):
    frame, tables, truth, spec, _ = property_tables
    claims = missing_claims(frame, spec)
    tolerance = STANDARD_ERRORS * math.sqrt((1.0 + 1.0 / SEVERITY_SHAPE) / claims)
    true = truth["missing"]["relativities"]["pure_premium"]
    assert true == pytest.approx(1.05, rel=1e-9)
    measured = measured_missing_relativity(tables[model], truth["base"])
    assert abs(math.log(measured) - math.log(true)) <= tolerance, (model, measured, true, tolerance, claims)


def test_frequency_glm_recovers_the_missing_alarm_relativity(property_tables):
    frame, _, truth, spec, frequency = property_tables
    tolerance = STANDARD_ERRORS / math.sqrt(missing_claims(frame, spec))
    true = truth["missing"]["relativities"]["frequency"]
    measured = frequency["(missing)"] / frequency[truth["base"]]
    assert abs(math.log(measured) - math.log(true)) <= tolerance, (measured, true, tolerance)


def test_every_row_of_the_book_rates(property_tables):
    frame, tables, _, _, _ = property_tables
    rated = rating_tables.rate(tables["gbm"], frame, "exposure")
    assert len(rated) == len(frame) and np.isfinite(rated["gross_premium"]).all()
