"""The run directory contract (docs/run-directory.md) on the session's small motor run."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

MODELS = ["glm_frequency", "glm_severity", "glm_pure_premium"]


def test_run_json_records_what_reproduces(demo_run):
    run = json.loads((demo_run["run"] / "run.json").read_text())
    assert run["rows"]["train"] + run["rows"]["holdout"] == run["rows"]["total"]
    assert len(run["book"]["sha256"]) == 64 and run["seed"] == 2026 and run["threads"] == 2
    assert {"lightgbm", "statsmodels", "numpy"} <= set(run["versions"])
    assert not any(str(demo_run["base"]) in json.dumps(v) for k, v in run.items() if k != "timings")
    assert any("rate regulation" in c for c in run["cautions"])


@pytest.mark.parametrize("name", MODELS)
def test_glm_model_files_have_the_contract_keys(demo_run, name):
    m = json.loads((demo_run["run"] / "models" / f"{name}.json").read_text())
    for key in ("family", "deviance", "null_deviance", "df_resid", "aic", "coefficients", "relativities"):
        assert key in m
    assert {"term", "estimate", "std_error", "p_value"} <= set(m["coefficients"][0])
    rels = m["relativities"]["driver_age"]
    lowers = [float(k.split(",")[0].strip("[")) for k in rels]
    assert lowers == sorted(lowers)  # bands in ascending order
    assert min(abs(v - 1.0) for v in rels.values()) < 1e-12  # base band at 1


def test_predictions_let_a_reviewer_recompute_every_figure(demo_run):
    preds = pd.read_parquet(demo_run["run"] / "predictions.parquet")
    book = pd.read_parquet(demo_run["book"])
    assert len(preds) == len(book) and np.array_equal(preds["row"], np.arange(len(book)))
    assert np.array_equal(preds["exposure"], book["exposure"])
    for col in (
        "holdout",
        "claim_count",
        "claim_amount",
        "glm_frequency",
        "glm_severity",
        "glm_pure_premium",
        "gbm_frequency",
        "gbm_severity",
        "gbm_pure_premium",
    ):
        assert col in preds
    # the holdout metric in metrics.json is recomputable from predictions (scikit-learn as reference)
    from sklearn.metrics import mean_tweedie_deviance

    metrics = json.loads((demo_run["run"] / "metrics.json").read_text())
    block = metrics["pure_premium"]
    hold = preds[preds["holdout"]]
    ours = block["models"]["gbm_pure_premium"]["mean_deviance"]
    ref = mean_tweedie_deviance(
        hold["claim_amount"] / hold["exposure"],
        hold["gbm_pure_premium"],
        sample_weight=hold["exposure"],
        power=block["power"],
    )
    assert ours == pytest.approx(ref, rel=1e-10)


def test_gbm_files_are_text_and_json(demo_run):
    models = demo_run["run"] / "models"
    for target in ("frequency", "severity", "pure_premium"):
        assert (models / f"gbm_{target}.txt").read_text().startswith("tree")
        meta = json.loads((models / f"gbm_{target}.json").read_text())
        assert len(meta["cv"]["table"]) == 2
    assert not list(demo_run["run"].rglob("*.pkl"))


def test_compare_wrote_figures_and_intervals(demo_run):
    comp = json.loads((demo_run["run"] / "comparison.json").read_text())
    d = comp["differences"]["gbm_pure_premium vs glm_pure_premium"]
    for part in ("deviance_reduction", "gini_gain"):
        assert d[part]["lower"] <= d[part]["estimate"] <= d[part]["upper"]
    figs = {p.name for p in (demo_run["run"] / "figures").glob("*.png")}
    assert {
        "lift_pure_premium.png",
        "double_lift_pure_premium.png",
        "lorenz_pure_premium.png",
        "cv_pure_premium.png",
        "ave_driver_age.png",
    } <= figs
    html = (demo_run["run"] / "report.html").read_text()
    # the report draws its own figures (one chart per factor, CV, lift, Lorenz, double lift, A/E); none from figures/
    levels = json.loads((demo_run["run"] / "levels.json").read_text())
    assert "rate regulation" in html and html.count("data:image/png;base64") >= len(figs) + len(levels)


def test_certificate_and_interactions_in_the_run(demo_run):
    cert = json.loads((demo_run["run"] / "certificate.json").read_text())
    for target in ("frequency", "pure_premium"):
        c = cert["models"][target]["bonus_class"]
        assert c["certificate"]["violation_count"] == 0 and c["certificate"]["leaf_pairs_checked"] > 0
        assert c["sweep"]["violation_count"] == 0 and c["sweep"]["policies"] == 1000
    inter = json.loads((demo_run["run"] / "interactions.json").read_text())
    strengths = [p["strength"] for p in inter["pairs"]]
    assert strengths == sorted(strengths, reverse=True) and inter["rounds"]
    assert all(0 <= p["p_value"] <= 1 and len(p["null_strength"]) == inter["refits"] for p in inter["pairs"])
    assert inter["candidates"] == [p["pair"] for p in inter["pairs"] if p["stands_out"]]
