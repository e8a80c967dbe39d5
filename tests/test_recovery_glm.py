"""Simulator recovery: GLM relativities against the band-averaged truth of a main-effects scenario.

Invented data (the shipped `motor_main_effects` scenario, about 50,000 claims); the truth is the
simulator's truth.json. The check is statistical: each estimated log relativity should lie within
three standard errors of the truth's (renormalised to the GLM's base level) for at least 95 % of levels.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

import premiumlab
from premiumlab._core.jsonio import read_json

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def recovery_run(tmp_path_factory):
    base = tmp_path_factory.mktemp("recovery")
    book = base / "book.parquet"
    premiumlab.simulate(ROOT / "scenarios" / "motor_main_effects.toml", out=book)
    premiumlab.fit(book, spec=ROOT / "scenarios" / "motor_main_effects_spec.toml", out=base / "run", models="glm")
    return base


@pytest.mark.parametrize("target", ["frequency", "severity", "pure_premium"])
def test_glm_relativities_within_three_standard_errors_of_truth(recovery_run, target):
    truth = json.loads((recovery_run / "truth.json").read_text())["factors"]
    model = read_json(recovery_run / "run" / "models" / f"glm_{target}.json")
    se = {c["term"]: c["std_error"] for c in model["coefficients"]}
    z = []
    for factor, rels in model["relativities"].items():
        true = truth[factor]["relativities"][target]
        base = next(level for level, v in rels.items() if v == 1.0)
        for level, value in rels.items():
            if level == base:
                continue
            expected = np.log(true[level] / true[base])
            z.append((np.log(value) - expected) / se[f"{factor}[{level}]"])
    z = np.abs(np.array(z))
    assert len(z) >= 15
    assert np.mean(z <= 3.0) >= 0.95, np.round(z, 2)
