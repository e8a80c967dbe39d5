"""Work on a Dask cluster gives what it gives in one process: the boosted-model search, validation.

Reference: LightGBM's own guarantee that `deterministic=True` with the same data, parameters and
`num_threads` gives the same model; the search's tasks carry all three, so the model text, the CV
table and the predictions must be identical wherever the tasks run. The cluster is a Dask
LocalCluster of two worker processes (the `distributed` package); the book is invented. For
`validate`, the reference is the one-pass scan of the same book: the slices' findings and sums,
merged in book order, must equal it exactly.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from premiumlab._core.cluster import IN_PROCESS, parse_cluster, tasks_on
from premiumlab._core.errors import InputError
from premiumlab.book.scan import parquet_slices, scan_book
from premiumlab.book.spec import load_spec
from premiumlab.models.gbm.fit import fit_target

from _builders import OPTIONS, SPEC_TEXT, invented_book, run_cli, small_book


def test_a_local_dask_cluster_gives_the_same_models_as_one_process():
    features, inputs = invented_book(2000, seed=11)
    here = {t: fit_target(inputs, t, OPTIONS) for t in ("frequency", "pure_premium")}
    with tasks_on("local:2") as runner:
        assert runner.description == "a local Dask cluster of 2 worker processes"
        there = {t: fit_target(inputs, t, OPTIONS, runner) for t in ("frequency", "pure_premium")}
    for target in here:
        assert there[target].model_text() == here[target].model_text()
        assert json.dumps(there[target].cv_table) == json.dumps(here[target].cv_table)
        np.testing.assert_array_equal(there[target].predict(features), here[target].predict(features))
    assert len(here["frequency"].cv_table) == 2 and len(here["frequency"].cv_table[0]["fold_deviances"]) == 3


def test_fit_on_a_cluster_writes_the_same_model_files(tmp_path):
    """Through the command line: `fit --cluster local:2` and `fit` give byte-identical model files."""
    spec = tmp_path / "spec.toml"
    spec.write_text(SPEC_TEXT + "\n[gbm]\nthreads = 1\nfolds = 3\nmax_settings = 2\nmax_rounds = 200\n")
    small_book(3000, seed=5).to_csv(tmp_path / "book.csv", index=False)
    for name, extra in (("here", ()), ("there", ("--cluster", "local:2"))):
        r = run_cli(
            "fit",
            str(tmp_path / "book.csv"),
            "--spec",
            str(spec),
            "--out",
            str(tmp_path / name),
            "--models",
            "gbm",
            *extra,
        )
        assert r.returncode == 0, r.stderr
    for target in ("frequency", "severity", "pure_premium"):
        name = f"models/gbm_{target}.txt"
        assert (tmp_path / "there" / name).read_bytes() == (tmp_path / "here" / name).read_bytes()
    run = json.loads((tmp_path / "there" / "run.json").read_text())
    assert run["gbm_search_ran_on"] == "a local Dask cluster of 2 worker processes"
    assert json.loads((tmp_path / "here" / "run.json").read_text())["gbm_search_ran_on"] == "this process"


@pytest.mark.parametrize(
    "address, fragment",
    [
        ("local:0", "give local:N with N >= 1"),
        ("local:two", "give local:N with N >= 1"),
        ("myhost:8786", "give local:N (N worker processes on this machine) or a Dask scheduler address"),
    ],
)
def test_bad_cluster_addresses_are_refused(address, fragment):
    with pytest.raises(InputError, match=fragment.replace("(", r"\(").replace(")", r"\)")):
        parse_cluster(address)


def test_an_unreachable_scheduler_is_one_clear_error(tmp_path, monkeypatch):
    import premiumlab._core.cluster as cluster

    monkeypatch.setattr(cluster, "CONNECT_TIMEOUT", 2)
    with pytest.raises(InputError, match=r"cannot reach the Dask scheduler at tcp://127.0.0.1:9"):
        with tasks_on("tcp://127.0.0.1:9"):
            pass


def test_in_process_runs_tasks_in_order():
    seen = []
    assert IN_PROCESS.map(lambda shared, item: shared + item, 10, [1, 2, 3], lambda: seen.append(1)) == [11, 12, 13]
    assert len(seen) == 3


def _findings_and_sums(result):
    _, summary, findings = result
    return (
        [str(f) for f in findings],
        # repr: a numeric factor's values end with NaN (its missing band), and NaN != NaN in a list
        {name: (repr(lv.values.tolist()), lv.sums.tolist()) for name, lv in summary.levels.items()},
        summary.totals.tolist(),
    )


def test_validate_on_a_cluster_merges_the_slices_to_the_same_findings_and_sums(tmp_path, spec_file):
    """A Parquet book in row groups of 25 rows, checked in slices of two row groups: in one pass here
    (batches of 50 rows, the same boundaries, so the sums add in the same order), as slices here,
    and as slices on a two-worker LocalCluster. Errors sit in several slices and a (policy, period)
    pair repeats across slices; every finding, row number and sum must agree exactly."""
    df = pd.concat([small_book(), small_book().iloc[[3, 150, 3]]], ignore_index=True)
    df["exposure"] = df["exposure"].mask(df.index.isin([10, 60, 390]), -1.0)
    df["region"] = df["region"].mask(df.index == 200, "")
    path = tmp_path / "book.parquet"
    df.to_parquet(path, index=False, row_group_size=25)
    spec = load_spec(spec_file)
    assert [len(groups) for _, groups, _ in parquet_slices(path, 50)] == [2] * 8 + [1]  # 403 rows
    one_pass = _findings_and_sums(scan_book(path, spec, keep_rows=False, chunk_rows=50))
    here = _findings_and_sums(scan_book(path, spec, keep_rows=False, chunk_rows=50, runner=IN_PROCESS))
    with tasks_on("local:2") as runner:
        there = _findings_and_sums(scan_book(path, spec, keep_rows=False, chunk_rows=50, runner=runner))
    assert here == one_pass and there == one_pass
    found = one_pass[0]
    assert any("3 rows with exposure <= 0 (rows 10, 60, 390)" in f for f in found), found
    assert any("3 rows repeating an earlier ('policy_id', 'year') pair (rows 400, 401, 402)" in f for f in found)


def test_validate_cli_on_a_cluster_prints_what_it_prints_here(tmp_path, spec_file):
    path = tmp_path / "book.parquet"
    small_book(3000, seed=2).to_parquet(path, index=False, row_group_size=500)
    here = run_cli("validate", str(path), "--spec", str(spec_file))
    there = run_cli("validate", str(path), "--spec", str(spec_file), "--cluster", "local:2")
    assert here.returncode == 0 and there.returncode == 0, there.stderr
    assert there.stdout == here.stdout and "profile: age" in here.stdout
    csv = tmp_path / "book.csv"
    small_book().to_csv(csv, index=False)
    r = run_cli("validate", str(csv), "--spec", str(spec_file), "--cluster", "local:2")
    assert r.returncode == 2 and "a CSV book is read in one process; convert it to Parquet" in r.stderr


def test_fit_on_a_running_scheduler_gives_the_same_model_files(tmp_path):
    """`--cluster tcp://...`: a Dask LocalCluster started here stands in for a remote scheduler; the
    command connects to it, checks that its workers run this premiumlab, and writes the same model
    files as a one-process fit."""
    from distributed import LocalCluster

    spec = tmp_path / "spec.toml"
    spec.write_text(SPEC_TEXT + "\n[gbm]\nthreads = 1\nfolds = 3\nmax_settings = 2\nmax_rounds = 100\n")
    small_book(1500, seed=8).to_csv(tmp_path / "book.csv", index=False)
    with LocalCluster(n_workers=2, threads_per_worker=1, dashboard_address=None) as cluster:
        r = run_cli(
            "fit",
            str(tmp_path / "book.csv"),
            "--spec",
            str(spec),
            "--out",
            str(tmp_path / "there"),
            "--models",
            "gbm",
            "--cluster",
            cluster.scheduler_address,
        )
        assert r.returncode == 0, r.stderr
    r = run_cli(
        "fit", str(tmp_path / "book.csv"), "--spec", str(spec), "--out", str(tmp_path / "here"), "--models", "gbm"
    )
    assert r.returncode == 0, r.stderr
    name = "models/gbm_pure_premium.txt"
    assert (tmp_path / "there" / name).read_bytes() == (tmp_path / "here" / name).read_bytes()
    ran_on = json.loads((tmp_path / "there" / "run.json").read_text())["gbm_search_ran_on"]
    assert ran_on.startswith("the Dask scheduler at tcp://127.0.0.1:") and ran_on.endswith("(2 workers)")


def test_a_task_that_fails_on_a_worker_is_one_clear_error():
    import operator

    with tasks_on("local:1") as runner:
        assert runner.map(operator.truediv, 6.0, [2.0, 3.0], lambda: None) == [3.0, 2.0]
        with pytest.raises(
            InputError,
            match=r"--cluster: a task failed on a local Dask cluster of 1 worker "
            r"process \(ZeroDivisionError: float division by zero\)",
        ):
            runner.map(operator.truediv, 6.0, [2.0, 0.0], lambda: None)
