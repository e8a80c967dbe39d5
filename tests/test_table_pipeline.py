"""The table steps of the pipeline on the session's small motor run: tabulate, audit, rate, impact."""

from __future__ import annotations

import json
import shutil

import numpy as np
import pandas as pd
import pytest

import rating_tables

from _builders import run_cli


def test_table_has_the_spec_interaction_and_promise(demo_run):
    table = rating_tables.load(demo_run["table"])
    names = [f.name for f in table.factors]
    assert "driver_age__vehicle_power" in names or any(
        getattr(f, "of", None) == ("driver_age", "vehicle_power") for f in table.factors
    )
    bonus = next(f for f in table.factors if f.name == "bonus_class")
    assert bonus.monotone == "increasing"
    assert any("rate regulation" in c for c in table.cautions)


def test_rated_file_reproduces_the_table_total_and_keeps_inputs(demo_run):
    priced = pd.read_parquet(demo_run["priced"])
    book = pd.read_parquet(demo_run["book"])
    for col in book.columns:
        assert priced[col].equals(book[col])
    table = rating_tables.load(demo_run["table"])
    rel_cols = [c for c in priced.columns if c.startswith("rel_")]
    assert len(rel_cols) == len(table.factors)
    # pure premium = base rate x product of relativities x exposure (docs/rating-table.md), row by row
    product = priced[rel_cols].prod(axis=1).to_numpy()
    # (every money column rounded to the cent: within half a cent)
    np.testing.assert_allclose(
        priced["pure_premium"], table.base_rate * product * priced["exposure"], rtol=1e-12, atol=0.005 + 1e-9
    )
    # the base rate was solved so that the training total equals the experience target
    fidelity = json.loads((demo_run["table"] / "fidelity.json").read_text())
    preds = pd.read_parquet(demo_run["run"] / "predictions.parquet")
    train = ~preds["holdout"].to_numpy()
    unrounded = table.base_rate * product * priced["exposure"].to_numpy()
    assert unrounded[train].sum() == pytest.approx(book["claim_amount"][train].sum(), rel=1e-9)
    assert fidelity["rate_level"]["target"]["basis"] == "experience"


def test_fidelity_reports_retention(demo_run):
    fid = json.loads((demo_run["table"] / "fidelity.json").read_text())["fidelity"]
    assert set(fid["models"]) == {"table", "gbm", "gbm_freq_sev", "glm", "glm_freq_sev"}
    r = fid["retention"]
    g = {k: v["gini"] for k, v in fid["models"].items()}
    src = r["source"]
    assert r["gini_table_over_source"] == pytest.approx(g["table"] / g[src], rel=1e-12)
    gap = g[src] - g["glm"]
    if src.startswith("glm"):  # a GLM source has no lift over the GLM to keep, and nothing to warn of
        assert r["source_lift_over_glm_kept"] is None
    elif gap > 0:
        assert r["source_lift_over_glm_kept"] == pytest.approx((g["table"] - g["glm"]) / gap, rel=1e-12)
    else:  # no lift over the GLM to keep: no ratio, a diagnostic instead
        assert r["source_lift_over_glm_kept"] is None
        kinds = [d["kind"] for d in json.loads((demo_run["table"] / "fidelity.json").read_text())["diagnostics"]]
        assert "retention_undefined" in kinds


def test_impact_summary_adds_up(demo_run):
    result = json.loads(demo_run["impact"].read_text())
    assert sum(b["count"] for b in result["bands"]) == result["rows"] > result["policies"]
    top = result["largest_increases"][0]
    spec = rating_tables.load(demo_run["table"]).book_columns
    assert set(top["id"]) == {spec["policy_id"], spec["period"]}  # named by the columns the table remembers
    assert sum(b["count_share"] for b in result["bands"]) == pytest.approx(1.0, abs=1e-12)
    cap = result["capping"]
    assert cap["after_correction"]["total"] == pytest.approx(cap["total_proposed"], rel=1e-9)


def test_audit_exits_1_and_names_an_injected_reversal(demo_run, tmp_path):
    broken = tmp_path / "table"
    shutil.copytree(demo_run["table"], broken)
    path = broken / "factors" / "bonus_class.csv"
    frame = pd.read_csv(path, dtype=str)
    rel = frame["relativity"].astype(float)
    frame.loc[frame.index[-1], "relativity"] = repr(float(rel.iloc[0]) * 0.5)
    frame.to_csv(path, index=False)
    r = run_cli("audit", str(broken), "--spec", str(demo_run["spec"]))
    assert r.returncode == 1, r.stdout + r.stderr
    lines = r.stdout.strip().splitlines()
    assert any("bonus_class" in line and "by " in line for line in lines[:-1]), lines
    assert not lines[-1].startswith("audit: 0 ")
    clean = run_cli("audit", str(demo_run["table"]), "--spec", str(demo_run["spec"]), "--no-bounds")
    assert clean.returncode == 0 and "audit: 0 violation(s)" in clean.stdout
    # it says what it checked before the count: the spec's promises, and that no run was re-certified
    checked = clean.stdout.splitlines()[0]
    assert checked.startswith("checked: the table's structure") and "bonus_class increasing" in checked
    assert "no run given, so no certificate re-checked" in checked
    assert clean.stderr.startswith("caution: Draft for review by a qualified actuary")


def test_factor_files_carry_credibility_of_each_level(demo_run):
    """Buhlmann-Straub credibility per band or level (see tests/test_credibility.py for the references):
    within [0, 1] everywhere, and high for the strongly rated bonus classes of the motor book
    (true pure-premium relativities 0.72 to 1.75, hundreds of claims per class)."""
    for path in sorted((demo_run["table"] / "factors").glob("*.csv")):
        frame = pd.read_csv(path)
        if "__" in path.stem:
            continue
        z = frame["credibility"].to_numpy(float)
        assert ((z >= 0) & (z <= 1)).all(), path.name
    bonus = pd.read_csv(demo_run["table"] / "factors" / "bonus_class.csv")
    assert bonus["credibility"].min() > 0.5, bonus


def test_tabulate_refuses_to_replace_its_own_run(demo_run):
    """--force must never let an output destroy an input: tabulate --out RUN --force exits 2."""
    before = sorted(p.name for p in demo_run["run"].iterdir())
    r = run_cli("tabulate", str(demo_run["run"]), "--out", str(demo_run["run"]), "--force")
    assert r.returncode == 2 and "is or holds the input" in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1
    assert sorted(p.name for p in demo_run["run"].iterdir()) == before


def test_impact_thresholds_are_chosen_by_the_user(demo_run, tmp_path):
    out = tmp_path / "impact.json"
    r = run_cli(
        "impact",
        str(demo_run["book"]),
        "--current",
        str(demo_run["glm_table"]),
        "--proposed",
        str(demo_run["table"]),
        "--thresholds",
        "0.0,0.2,0.5",
        "--out",
        str(out),
    )
    assert r.returncode == 0, r.stderr
    shares = json.loads(out.read_text())["above_thresholds"]
    assert [s["threshold"] for s in shares] == [0.0, 0.2, 0.5]
    counts = [s["count"] for s in shares]
    assert counts[0] >= counts[1] >= counts[2]
    bad = run_cli(
        "impact",
        str(demo_run["book"]),
        "--current",
        str(demo_run["glm_table"]),
        "--proposed",
        str(demo_run["table"]),
        "--thresholds",
        "ten",
    )
    assert bad.returncode == 2 and "--thresholds" in bad.stderr


def test_certify_command_on_the_runs_constrained_model(demo_run):
    """The promised bonus_class (increasing) on the demo run's pure-premium model: the certificate
    finds no violating leaf pair and, like every output, carries the draft caution."""
    model = demo_run["run"] / "models" / "gbm_pure_premium.txt"
    r = run_cli("certify", str(model), "--factor", "bonus_class", "--direction", "increasing")
    assert r.returncode == 0, r.stdout + r.stderr
    assert r.stdout.strip().endswith("leaf pairs checked, 0 violation(s)") and " split on bonus_class" in r.stdout
    assert r.stderr.startswith("caution: Draft for review by a qualified actuary")
    reversed_promise = run_cli("certify", str(model), "--factor", "bonus_class", "--direction", "decreasing")
    assert reversed_promise.returncode == 1 and "reversal" in reversed_promise.stdout
