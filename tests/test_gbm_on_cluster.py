"""Large books on a Dask cluster: the final boosted model trained by LightGBM's Dask interface.

Reference: LightGBM itself, trained in one process on the same rows with the search on every
row (`fit_target` without a cluster). Data-parallel LightGBM (`lightgbm.dask`, tree_learner
"data") sums the workers' histograms, so its splits see every row, but its bins are cut from each
worker's rows and the search here runs on a sample of the policies: the holdout deviance must come
within 1 % of the one-process model's (the tolerance the brief of this work sets), not equal it.
The cluster is a Dask LocalCluster of two worker processes on the loopback (`local:2`); the books
are invented (the same truth drawn twice: one to fit, one held out).
"""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pandas as pd

from premiumlab._core.cluster import tasks_on
from premiumlab.models.deviance import mean_deviance
from premiumlab.models.gbm.fit import fit_target, load_model
from premiumlab.models.gbm.search import search_sample
from premiumlab.models.gbm.training import prepare_training
from premiumlab.models.trees.certificate import certify

from _builders import OPTIONS, SPEC_TEXT, invented_book, run_cli, small_book

LARGE = dataclasses.replace(OPTIONS, cluster_rows=20_000, search_rows=12_000)


def _holdout_deviance(model, features: pd.DataFrame, inputs) -> float:
    """Exposure-weighted mean Poisson deviance of the claim frequency on the held-out book."""
    return mean_deviance(inputs.claim_count / inputs.exposure, model.predict(features), inputs.exposure, 1.0)


def test_the_search_sample_takes_whole_policies_in_a_seeded_order():
    _, inputs = invented_book(3000, seed=3)
    data = prepare_training(inputs, "frequency", OPTIONS)
    sample = search_sample(data, 1000, seed=5)
    assert 1000 <= len(sample.label) < 1000 + 2  # a policy has at most two rows
    kept = set(sample.groups)
    assert len(sample.label) == int(np.isin(data.groups, list(kept)).sum())  # every row of a drawn policy
    again = search_sample(data, 1000, seed=5)
    np.testing.assert_array_equal(again.matrix, sample.matrix)
    assert len(search_sample(data, 10**9, seed=5).label) == len(data.label)


def test_a_large_book_is_trained_data_parallel_within_one_percent_of_one_process(tmp_path):
    _, inputs = invented_book(30_000, seed=11)  # 40,000 rows, above cluster_rows
    held_features, held = invented_book(20_000, seed=12)
    here = fit_target(inputs, "frequency", LARGE)
    with tasks_on("local:2") as runner:
        there = fit_target(inputs, "frequency", LARGE, runner)
    assert here.trained_on == "this process" and "lightgbm.dask" in there.trained_on
    assert there.training_rows == here.training_rows == 40_000
    assert 12_000 <= there.search_rows < 12_002
    deviance_here, deviance_there = (
        _holdout_deviance(here, held_features, held),
        _holdout_deviance(there, held_features, held),
    )
    assert abs(deviance_there / deviance_here - 1) < 0.01, (deviance_here, deviance_there)
    assert abs(there.balance - 1) < 0.01  # its training balance, measured on the booster's predictions
    text = there.model_text()
    assert "[tree_learner: data]" in text
    assert certify(text, "bonus_class", 1)["violation_count"] == 0
    (tmp_path / "m.txt").write_text(text)
    (tmp_path / "m.json").write_text(json.dumps(there.to_json_dict()))
    loaded = load_model(tmp_path / "m.txt", tmp_path / "m.json")
    np.testing.assert_array_equal(loaded.predict(held_features), there.predict(held_features))
    assert loaded.trained_on == there.trained_on and loaded.search_rows == there.search_rows


def test_fit_cluster_trains_a_large_books_models_on_the_workers_and_tabulate_reads_them(tmp_path):
    spec = tmp_path / "spec.toml"
    spec.write_text(
        SPEC_TEXT + "\n[gbm]\nthreads = 1\nfolds = 3\nmax_settings = 2\nmax_rounds = 200\n"
        "cluster_rows = 1000\nsearch_rows = 1500\n"
    )
    small_book(3000, seed=5).to_csv(tmp_path / "book.csv", index=False)
    run = tmp_path / "run"
    where = ("--out", str(run), "--cluster", "local:2")
    r = run_cli("fit", str(tmp_path / "book.csv"), "--spec", str(spec), "--models", "gbm", *where)
    assert r.returncode == 0, r.stderr
    for target in ("frequency", "pure_premium"):
        meta = json.loads((run / "models" / f"gbm_{target}.json").read_text())
        assert "lightgbm.dask" in meta["trained_on"] and meta["search_rows"] < meta["training_rows"]
    certificate = json.loads((run / "certificate.json").read_text())
    assert certificate["models"]["frequency"]["bonus"]["certificate"]["violation_count"] == 0
    r = run_cli("tabulate", str(run), "--out", str(tmp_path / "table"), "--model", "gbm")
    assert r.returncode == 0, r.stderr
    assert (tmp_path / "table" / "table.json").exists()
