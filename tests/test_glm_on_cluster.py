"""The GLMs' passes over the rows on a Dask cluster give the one-process fit.

Reference: the one-process fit of the same rows (`fit_frequency`, `fit_severity`,
`fit_pure_premium` without a runner). On a cluster the cells' sums and the row statistics are
added up from partitions of the rows computed on the workers (`cell_statistics`,
`statistics_of_chunks`); only the order of the additions differs, so coefficients, deviances and
log-likelihoods must agree to 1e-10 (relative for the sums over rows). The cluster is a Dask
LocalCluster of two single-threaded worker processes on the loopback (`local:2`); the book is
invented.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from premiumlab._core.cluster import tasks_on
from premiumlab.models.glm.engines import (
    aggregate_cells,
    cell_statistics,
    combine_cells,
    row_chunks,
)
from premiumlab.models.glm.fit import GlmInputs, fit_frequency, fit_pure_premium, fit_severity

from _builders import SPEC_TEXT, run_cli, small_book

TOLERANCE = 1e-10


def _inputs(n: int, seed: int) -> GlmInputs:
    """An invented book: 3 factors (one with 40 levels, several thin), Poisson counts, Gamma amounts."""
    rng = np.random.default_rng(seed)
    area = rng.integers(0, 40, n)
    size = rng.integers(0, 4, n)
    age = rng.integers(0, 6, n)
    exposure = rng.uniform(0.1, 1.0, n)
    log_mu = np.log(0.15) + 0.02 * (area - 20) + 0.2 * size - 0.1 * age
    count = rng.poisson(np.exp(log_mu) * exposure)
    amount = np.array([rng.gamma(2.0, 800.0 * (1 + 0.2 * s), c).sum() for c, s in zip(count, size)])
    factors = pd.DataFrame(
        {
            "area": pd.Categorical([f"a{k:02d}" for k in area]),
            "size": pd.Categorical([f"s{k}" for k in size]),
            "age": pd.Categorical([f"g{k}" for k in age]),
        }
    )
    return GlmInputs(factors, {"area": "a00", "size": "s0", "age": "g0"}, exposure, count, amount)


def _same_fit(there, here) -> None:
    assert [c["term"] for c in there.coefficients] == [c["term"] for c in here.coefficients]
    for key in ("estimate", "std_error"):
        a = np.array([c[key] for c in there.coefficients])
        b = np.array([c[key] for c in here.coefficients])
        np.testing.assert_allclose(a, b, rtol=0, atol=TOLERANCE)
    for key in ("deviance", "null_deviance", "pearson_chi2", "llf", "dispersion", "aic"):
        assert getattr(there, key) == pytest.approx(getattr(here, key), rel=TOLERANCE, abs=TOLERANCE), key
    assert (there.n_rows, there.n_cells, there.engine) == (here.n_rows, here.n_cells, here.engine)


def test_partial_cell_sums_add_up_to_the_cells_of_all_rows():
    """combine_cells of the chunks' cell_statistics is aggregate_cells of all rows at once (same cells, same order)."""
    inputs = _inputs(5000, seed=1)
    from premiumlab.models.glm.fit import _design

    design = _design(inputs)
    numerator, weight = inputs.claim_count.astype(float), inputs.exposure
    whole = aggregate_cells(design, numerator, weight)
    chunks = row_chunks(design, numerator, weight, parts=7)
    assert len(chunks) == 7 and sum(len(c.weight) for c in chunks) == 5000
    for pieces in (chunks, [c.standalone() for c in chunks]):  # views of the rows, and copies to send
        parts = combine_cells([cell_statistics(c) for c in pieces])
        np.testing.assert_array_equal(parts.design.codes, whole.design.codes)
        for key in ("numerator", "weight", "row_count", "numerator_squared"):
            np.testing.assert_allclose(getattr(parts, key), getattr(whole, key), rtol=1e-13)


def test_glms_on_a_local_cluster_equal_the_one_process_fits():
    inputs = _inputs(20_000, seed=4)
    here = {
        "frequency": fit_frequency(inputs),
        "severity": fit_severity(inputs),
        "pure_premium": fit_pure_premium(inputs),
        "rows": fit_frequency(inputs, engine="rows", penalty="none"),
    }
    with tasks_on("local:2") as runner:
        there = {
            "frequency": fit_frequency(inputs, runner=runner),
            "severity": fit_severity(inputs, runner=runner),
            "pure_premium": fit_pure_premium(inputs, runner=runner),
            "rows": fit_frequency(inputs, engine="rows", penalty="none", runner=runner),
        }
    for name in here:
        _same_fit(there[name], here[name])
    assert there["pure_premium"].power == pytest.approx(here["pure_premium"].power, abs=TOLERANCE)
    assert "the Newton steps ran in this process on the cells" in there["frequency"].notes[0]
    assert "over 2 partitions of the rows on a local Dask cluster of 2 worker processes" in there["frequency"].notes[0]
    assert "falls back to this process" in there["rows"].notes[0]
    assert not any("partitions" in note for note in here["frequency"].notes)


def test_fit_glm_with_cluster_writes_the_same_models(tmp_path):
    """Through the command line: `fit --models glm --cluster local:2` against `fit --models glm`."""
    spec = tmp_path / "spec.toml"
    spec.write_text(SPEC_TEXT)
    small_book(4000, seed=5).to_csv(tmp_path / "book.csv", index=False)
    for name, extra in (("here", ()), ("there", ("--cluster", "local:2"))):
        r = run_cli(
            "fit",
            str(tmp_path / "book.csv"),
            "--spec",
            str(spec),
            "--out",
            str(tmp_path / name),
            "--models",
            "glm",
            *extra,
        )
        assert r.returncode == 0, r.stderr
    for target in ("frequency", "severity", "pure_premium"):
        name = f"models/glm_{target}.json"
        a = json.loads((tmp_path / "there" / name).read_text())
        b = json.loads((tmp_path / "here" / name).read_text())
        np.testing.assert_allclose(
            [c["estimate"] for c in a["coefficients"]],
            [c["estimate"] for c in b["coefficients"]],
            rtol=0,
            atol=TOLERANCE,
        )
        assert a["deviance"] == pytest.approx(b["deviance"], rel=TOLERANCE)
    run = json.loads((tmp_path / "there" / "run.json").read_text())
    assert run["glm_passes_ran_on"] == "a local Dask cluster of 2 worker processes"
    assert json.loads((tmp_path / "here" / "run.json").read_text())["glm_passes_ran_on"] == "this process"
