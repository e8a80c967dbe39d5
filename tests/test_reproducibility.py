"""Reproducibility (docs/run-directory.md): the same book, spec, seed and thread count give byte-identical model
and table files, run twice through the command line in two separate folders; `run.json` records
what is needed to reproduce (spec, the book's sha256, seed, thread count, versions) and nothing that
changes from run to run except its timings.

The book is a small simulated motor book (invented data, fixed seed) with a two-way table, so that
every kind of table file, including the exhibit workbook, is compared. The book's digest is checked
against Python's hashlib.
"""

from __future__ import annotations

import hashlib
import json
import tomllib

import lightgbm
import pytest

from _builders import ROOT, run_cli

GBM = "\n[gbm]\nfolds = 3\nmax_settings = 2\nmax_rounds = 300\nthreads = 2\n"
POLICIES = 4000


def _files(folder):
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.fixture(scope="module")
def twice(tmp_path_factory):
    """One book and spec; `fit` then `tabulate` into a/ and into b/."""
    base = tmp_path_factory.mktemp("repro")
    spec = base / "spec.toml"
    spec.write_text((ROOT / "scenarios" / "motor_spec.toml").read_text() + GBM)
    book = base / "book.parquet"
    r = run_cli(
        "simulate",
        str(ROOT / "scenarios" / "motor.toml"),
        "--out",
        str(book),
        "--policies",
        str(POLICIES),
        "--seed",
        "5",
    )
    assert r.returncode == 0, r.stderr
    for name in ("a", "b"):
        (base / name).mkdir()
        for step in (
            ("fit", str(book), "--spec", str(spec), "--out", str(base / name / "run")),
            ("tabulate", str(base / name / "run"), "--out", str(base / name / "table")),
        ):
            r = run_cli(*step)
            assert r.returncode == 0, f"{step[0]}: {r.stderr[-2000:]}"
    return base


def test_model_and_run_files_are_byte_identical(twice):
    a, b = _files(twice / "a" / "run"), _files(twice / "b" / "run")
    assert sorted(a) == sorted(b)
    models = [k for k in a if k.startswith("models/")]
    assert {
        "models/glm_frequency.json",
        "models/glm_severity.json",
        "models/glm_pure_premium.json",
        "models/gbm_pure_premium.txt",
        "models/gbm_pure_premium.json",
    } <= set(models)
    different = [k for k in a if k != "run.json" and a[k] != b[k]]
    assert different == []
    manifest_a, manifest_b = (json.loads(x["run.json"]) for x in (a, b))
    assert {k: v for k, v in manifest_a.items() if k != "timings"} == {
        k: v for k, v in manifest_b.items() if k != "timings"
    }


def test_table_files_are_byte_identical(twice):
    a, b = _files(twice / "a" / "table"), _files(twice / "b" / "table")
    assert sorted(a) == sorted(b)
    assert {"table.json", "fidelity.json", "exhibit.xlsx", "factors/driver_age__vehicle_power.csv"} <= set(a)
    assert [k for k in a if a[k] != b[k]] == []


def test_run_json_records_what_reproduces(twice):
    manifest = json.loads((twice / "a" / "run" / "run.json").read_text())
    book_bytes = (twice / "book.parquet").read_bytes()
    assert manifest["book"]["sha256"] == hashlib.sha256(book_bytes).hexdigest()
    assert manifest["book"]["path_from_run"] == "../../book.parquet"
    assert manifest["spec"] == tomllib.loads((twice / "spec.toml").read_text())
    assert manifest["seed"] == 2026 and manifest["threads"] == 2
    assert manifest["versions"]["lightgbm"] == lightgbm.__version__
    assert manifest["rows"]["train"] + manifest["rows"]["holdout"] == manifest["rows"]["total"]
    text = json.dumps({k: v for k, v in manifest.items() if k != "timings"})
    assert str(twice) not in text  # no absolute paths
