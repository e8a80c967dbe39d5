"""The recovery measures of premiumlab.simulation.recovery, checked by hand on small arrays, and the
true pure premium of a simulated book against its truth.json totals."""

from __future__ import annotations

import numpy as np
import pytest

from premiumlab.simulation.recovery import explained_share, policy_error, true_log_relativity, true_pure_premium
from premiumlab.simulation.scenario_file import load_scenario
from premiumlab.simulation.simulator import generate

from _builders import ROOT


def test_explained_share_by_hand():
    t = np.array([-0.2, 0.0, 0.3])
    w = np.array([1.0, 2.0, 1.0])
    assert explained_share(t, t + 5.0, w) == pytest.approx(1.0, abs=1e-12)  # a level shift is not an error
    assert explained_share(t, np.zeros(3), w) == pytest.approx(0.0, abs=1e-12)
    # half the effect: 1 - sum w (t/2)^2 / sum w t^2 = 1 - 1/4
    assert explained_share(t, 0.5 * t, w) == pytest.approx(0.75, abs=1e-12)
    assert explained_share(t, -t, w) == pytest.approx(-3.0, abs=1e-12)


def test_policy_error_by_hand():
    w = np.array([1.0, 1.0])
    true = np.array([100.0, 100.0])
    # log ratios +-0.1 around their mean 0: RMS 0.1
    assert policy_error(true, true * np.exp([0.1, -0.1]), w) == pytest.approx(0.1, abs=1e-12)
    assert policy_error(true, 3.0 * true, w) == pytest.approx(0.0, abs=1e-12)


def test_true_pure_premium_totals_match_truth_json():
    scenario = load_scenario(ROOT / "scenarios" / "property.toml")
    drawn = generate(scenario, policies=3000)
    exposure = drawn.book["exposure"].to_numpy()
    expected = float(np.sum(exposure * true_pure_premium(scenario, drawn.effects)))
    assert expected == pytest.approx(drawn.truth["book"]["expected_amount"], rel=1e-12)
    alarm = true_log_relativity(drawn.effects, "alarm")
    missing = drawn.book["alarm"].isna().to_numpy()
    # rows whose alarm is missing carry the scenario's missing relativities (1.05 x 1.0)
    assert np.allclose(alarm[missing], np.log(1.05), atol=1e-12)
