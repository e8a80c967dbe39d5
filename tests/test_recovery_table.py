"""Simulator recovery of the distilled table: relativities against the band-averaged truth.

Invented data (the shipped `motor_main_effects` scenario, main effects only, 200,000 policies, about
50,000 claims so that each default band holds thousands of claims); the truth is the simulator's
truth.json. The table's bands are chosen by the distillation, not the scenario's default bands, so
the table's log relativity is averaged (exposure-weighted) over the book's rows in each default band
before it is compared with the truth there; both sides are centred on their exposure-weighted mean.
Marked `load` (a boosted fit on 300,000 rows): run by `.ci/run` with `-m load`.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import premiumlab
import rating_tables
from premiumlab.book.bands import assign_bands

from _builders import QUICK_GBM

ROOT = Path(__file__).resolve().parents[1]
pytestmark = pytest.mark.load


@pytest.fixture(scope="module")
def recovered(tmp_path_factory):
    base = tmp_path_factory.mktemp("table_recovery")
    book, spec = base / "book.parquet", base / "spec.toml"
    spec.write_text((ROOT / "scenarios" / "motor_main_effects_spec.toml").read_text() + QUICK_GBM)
    premiumlab.simulate(ROOT / "scenarios" / "motor_main_effects.toml", out=book)
    premiumlab.fit(book, spec=spec, out=base / "run")
    premiumlab.tabulate(base / "run", out=base / "table")
    frame = pd.read_parquet(book)
    rated = rating_tables.rate(rating_tables.load(base / "table"), frame, "exposure")
    truth = json.loads((base / "truth.json").read_text())["factors"]
    return frame, rated, truth


def _centred(logs: np.ndarray, weights: np.ndarray) -> np.ndarray:
    return logs - np.average(logs, weights=weights)


def test_table_relativities_within_0_05_mean_absolute_log_error_of_truth(recovered):
    frame, rated, truth = recovered
    errors = {}
    for factor, t in truth.items():
        true = t["relativities"]["pure_premium"]
        labels = list(true)
        if t["type"] == "numeric":
            band = assign_bands(frame[factor].to_numpy(float), t["bands"])
        else:
            band = pd.Categorical(frame[factor].astype(str), categories=labels).codes
        expo = np.bincount(band, weights=frame["exposure"], minlength=len(labels))
        table_log = (
            np.bincount(band, weights=frame["exposure"] * np.log(rated[f"rel_{factor}"]), minlength=len(labels)) / expo
        )
        truth_log = np.log([true[label] for label in labels])
        diff = np.abs(_centred(table_log, expo) - _centred(truth_log, expo))
        errors[factor] = float(np.average(diff, weights=expo))
    assert len(errors) >= 4
    assert max(errors.values()) <= 0.05, errors


def test_promised_factor_comes_out_monotone(recovered):
    frame, rated, _ = recovered
    spec = premiumlab.load_spec(ROOT / "scenarios" / "motor_main_effects_spec.toml")
    promised = [f for f in spec.factors if f.direction != 0]
    assert promised
    for f in promised:
        by_level = rated.groupby(pd.Categorical(frame[f.name].astype(str), categories=list(f.levels)), observed=True)[
            f"rel_{f.name}"
        ].first()
        steps = f.direction * np.diff(by_level.to_numpy())
        assert (steps >= 0).all(), by_level
