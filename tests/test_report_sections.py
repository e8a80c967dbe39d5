"""The report's sections on the demo run: the numbers it shows come from the run's files.

The whole-factor Wald test itself is checked against statsmodels in
tests/external/test_glm_statsmodels.py; here the report shows one row per factor of each GLM.
"""

from __future__ import annotations

import json
import re

import pytest

from premiumlab.review.report_context import factor_tests


def test_glm_section_has_a_whole_factor_test_per_factor(demo_run):
    """Every factor of every GLM of the run has a Wald chi-square, df and p-value in the report."""
    html = (demo_run["run"] / "report.html").read_text()
    assert "Whole-factor Wald tests" in html
    for path in sorted((demo_run["run"] / "models").glob("glm_*.json")):
        model = json.loads(path.read_text())
        tests = factor_tests(model)
        assert tests["absent"] is None
        assert [r[0] for r in tests["rows"]] == list(model["relativities"])
        for name, chi, df, p, _ in tests["rows"]:
            assert int(df) == len(model["factor_covariance"][name]["terms"])
            assert float(chi.replace(",", "")) >= 0 and (p == "< 0.0001" or 0 <= float(p) <= 1)
            assert re.search(rf"<td class=\"text\">{re.escape(name)}</td><td>{re.escape(chi)}</td>", html)


def test_a_model_file_without_covariance_says_so():
    """A GLM file written before `factor_covariance` gets words, not a crash."""
    tests = factor_tests({"coefficients": [], "relativities": {}, "base_levels": {}})
    assert tests["absent"] and "fit again" in tests["absent"] and tests["rows"] == []


def test_holdout_claim_counts_actual_to_expected_with_intervals(demo_run):
    """Per factor the A/E of claim counts adds up to the holdout's claims and expected claims
    (sum of predicted frequency x exposure, from predictions.parquet), and the interval is the
    Garwood interval of the count over the expected count (checked against scipy in
    tests/external/test_metrics_reference.py)."""
    import numpy as np
    import pandas as pd

    from premiumlab.evaluation.metrics import poisson_interval
    from premiumlab.review.report_context import claims_ave_tables
    from premiumlab.runs.experience_step import fitted_basis
    from premiumlab.runs.rundir import open_run

    run = open_run(demo_run["run"])
    preds = fitted_basis(run.predictions())
    hold = preds[preds["holdout"]].reset_index(drop=True)
    blocks = claims_ave_tables(run, hold)
    assert set(blocks) == set(run.levels)
    for block in blocks.values():
        assert "actual claims (count)" in block["header"] and any("exposure (" in h for h in block["header"])
        for model, table in block["tables"].items():
            assert table["actual"].sum() == pytest.approx(hold["claim_count"].sum(), rel=1e-9)
            expected = (hold[model] * hold["exposure"]).sum()
            assert table["expected"].sum() == pytest.approx(expected, rel=1e-9)
            lower, upper = poisson_interval(table["actual"])
            np.testing.assert_allclose(table["lower"], lower / table["expected"], rtol=1e-12)
            np.testing.assert_allclose(table["upper"], upper / table["expected"], rtol=1e-12)
            assert pd.Series(table["lower"] <= table["actual_to_expected"]).all()
    html = (demo_run["run"] / "report.html").read_text()
    assert "Actual / expected claim counts by factor" in html and "actual / expected</th>" in html
