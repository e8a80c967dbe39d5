"""The report's sections on the demo run: the numbers it shows come from the run's files.

The whole-factor Wald test itself is checked against statsmodels in
tests/external/test_glm_statsmodels.py; here the report shows one row per factor of each GLM.
"""

from __future__ import annotations

import json
import re

import pytest

from premiumlab._core.errors import InputError
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


def test_experience_and_tails_sections(tmp_path):
    """A run with a trend and a large-loss cap, and the `tails --json` result of its book: the
    report shows experience.json's totals observed -> adjusted and its factors, and the tail fit,
    its mean-excess and stability tables and figure; the numbers are those of the files."""
    import numpy as np

    import premiumlab
    from premiumlab.review.report_context import experience_section, tails_section
    from premiumlab.runs.fit import fit
    from premiumlab.runs.rundir import open_run

    from _builders import SPEC_TEXT, small_book

    book = small_book(4000, seed=5)
    book["year"] = np.where(np.arange(len(book)) % 3 == 0, 2024, 2025)
    book.to_csv(tmp_path / "book.csv", index=False)
    cap = float(np.quantile(book.loc[book["claim_amount"] > 0, "claim_amount"], 0.98))
    spec = tmp_path / "spec.toml"
    spec.write_text(
        SPEC_TEXT + f"\n[experience]\nlarge_loss_cap = {cap}\ntrend = {{ frequency = 0.01, severity = 0.04 }}\n"
    )
    run_dir = fit(tmp_path / "book.csv", spec, tmp_path / "run", models="glm")
    tails = tmp_path / "tails.json"
    tails.write_text(json.dumps(premiumlab.tails(tmp_path / "book.csv", spec=spec).to_dict(), allow_nan=False))

    record = json.loads((run_dir / "experience.json").read_text())
    section = experience_section(open_run(run_dir))
    training = dict(zip(section["totals"]["header"], section["totals"]["rows"][0], strict=True))
    assert training["which rows"] == "training"
    assert training["losses observed (money)"] == f"{record['totals']['training']['amount_observed']:,.0f}"
    assert training["losses adjusted (money)"] == f"{record['totals']['training']['amount_adjusted']:,.0f}"
    assert [r[0] for r in section["periods"]["rows"]] == list(record["periods"])
    assert float(section["periods"]["rows"][0][5]) == pytest.approx(
        record["periods"]["2024"]["severity_trend"], abs=1e-4
    )

    shown = tails_section(tails)
    result = json.loads(tails.read_text())
    assert len(shown["mean_excess"]["rows"]) == len(result["mean_excess"])
    assert len(shown["stability"]["rows"]) == len(result["stability"])
    assert shown["fit"]["rows"][3][1] == f"{result['shape']:.4f}"

    out = premiumlab.report(run_dir, tails=tails, out=tmp_path / "r.html").report
    html = out.read_text()
    assert "Experience adjustments" in html and "losses adjusted (money)" in html
    assert "Threshold stability" in html and "mean excess (money)" in html and 'alt="Mean excess by threshold' in html
    assert "Not in this report" in html  # no comparison, no table: said so
    (tmp_path / "bad.json").write_text(json.dumps({k: v for k, v in result.items() if k != "stability"}))
    with pytest.raises(InputError, match=re.escape("bad.json: key 'stability' is missing; give the JSON")):
        tails_section(tmp_path / "bad.json")
