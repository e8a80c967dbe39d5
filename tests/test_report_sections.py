"""The report's sections on the demo run: the numbers it shows come from the run's files.

The whole-factor Wald test itself is checked against statsmodels in
tests/external/test_glm_statsmodels.py; here the report shows one row per factor of each GLM.
"""

from __future__ import annotations

import json
import re

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
