"""`impact --cluster`: a Parquet dataset rated part by part on a Dask cluster gives the one-process impact.

Reference: `premiumlab.impact` of the same folder in one process, which rates the whole book with
the reference rater (`rating_tables.rate`) and summarises it with `rating_tables.impact`. On a
cluster each part's premiums are rated on a worker and the summary is computed here on the joined
rows; every number of the summary must agree to 1e-9 relative (sums may be added in another
order) and the largest increases must be the same rows with the same ids. The cluster is a Dask
LocalCluster of two worker processes on the loopback (`local:2`); the tables and the book are
invented.
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pandas as pd
import pytest

import premiumlab
from premiumlab._core.errors import InputError
from rating_tables import MissingRow, save

from _builders import example_table, run_cli

REL = 1e-9


def _dataset(folder, rows: int = 12_000, parts: int = 3):
    """A current and a proposed table and a book of `parts` Parquet parts, with policies over two
    periods (a policy's rows fall in different parts) and a current premium column."""
    table = example_table()
    region = dataclasses.replace(table.factor("region"), missing=MissingRow(1.1, 25.5))
    proposed = dataclasses.replace(table, factors=(table.factors[0], region, *table.factors[2:]))
    age = dataclasses.replace(table.factor("age"), relativity=[1.35, 1.0, 1.3])
    current = dataclasses.replace(proposed, base_rate=190.0, factors=(age, *proposed.factors[1:]))
    save(proposed, folder / "proposed")
    save(current, folder / "current")
    rng = np.random.default_rng(15)
    book = pd.DataFrame(
        {
            "policy": [f"P{k % (rows // 2)}" for k in range(rows)],
            "year": np.repeat([2025, 2026], rows // 2),
            "age": rng.integers(18, 90, rows).astype(float),
            "region": rng.choice(["North", "South", "Coast", None], rows),
            "bonus": rng.choice(["01", "02", "03"], rows),
            "exposure": rng.uniform(0.05, 1.0, rows),
            "paid": rng.uniform(170.0, 250.0, rows),
        }
    )
    (folder / "book").mkdir()
    for k, part in enumerate(np.array_split(np.arange(rows), parts)):
        book.iloc[part].to_parquet(folder / "book" / f"part-{k:02d}.parquet", index=False)
    return folder / "current", folder / "proposed", folder / "book"


def _assert_close(here, there, where="impact"):
    """Equal structure, equal texts and integers, floats within REL (relative) of each other."""
    if isinstance(here, dict):
        assert list(here) == list(there), where
        for key in here:
            _assert_close(here[key], there[key], f"{where}.{key}")
    elif isinstance(here, (list, tuple)):
        assert len(here) == len(there), where
        for k, (a, b) in enumerate(zip(here, there, strict=True)):
            _assert_close(a, b, f"{where}[{k}]")
    elif isinstance(here, float) and not isinstance(there, bool):
        assert math.isclose(here, there, rel_tol=REL, abs_tol=1e-12), (where, here, there)
    else:
        assert here == there, (where, here, there)


@pytest.mark.parametrize("current_side", ["table", "column"])
def test_the_impact_of_a_dataset_on_a_local_cluster_equals_the_one_process_impact(tmp_path, current_side):
    current, proposed, book = _dataset(tmp_path)
    current = str(current) if current_side == "table" else "column:paid"
    options = dict(current=current, proposed=proposed, cap=0.1, policy_id="policy", period="year")
    here = premiumlab.impact(book, **options)
    there = premiumlab.impact(book, **options, cluster="local:2")
    assert there.rows == 12_000 and there.policies == 6_000
    assert there.capping is not None and there.capping["correction_factor"] is not None
    _assert_close(here.to_dict(), there.to_dict())
    assert there.largest_increases == here.largest_increases  # the same rows, ids and premiums
    assert json.loads(json.dumps(there.to_dict())) == there.to_dict()


def test_impact_cluster_through_the_command_line_and_its_refusals(tmp_path):
    current, proposed, book = _dataset(tmp_path, rows=600, parts=2)
    args = ("impact", str(book), "--current", str(current), "--proposed", str(proposed))
    done = run_cli(*args, "--out", str(tmp_path / "impact.json"), "--cluster", "local:2")
    assert done.returncode == 0, done.stderr
    alone = run_cli(*args, "--out", str(tmp_path / "alone.json"))
    _assert_close(json.loads((tmp_path / "alone.json").read_text()), json.loads((tmp_path / "impact.json").read_text()))
    single = tmp_path / "book.parquet"
    pd.read_parquet(book).to_parquet(single, index=False)
    with pytest.raises(InputError, match="impact --cluster reads a Parquet dataset"):
        premiumlab.impact(single, current=current, proposed=proposed, cluster="local:2")
    bad = run_cli(*args, "--cluster", "local:zero")
    assert bad.returncode == 2 and "give local:N" in bad.stderr and alone.returncode == 0


def test_a_bad_premium_on_a_worker_is_one_error_naming_the_part(tmp_path):
    current, proposed, book = _dataset(tmp_path, rows=600, parts=2)
    part = book / "part-01.parquet"
    frame = pd.read_parquet(part)
    frame.loc[frame.index[3], "paid"] = -1.0
    frame.to_parquet(part, index=False)
    with pytest.raises(InputError, match=r"part-01\.parquet: column 'paid': 1 rows .*\(rows 3\)"):
        premiumlab.impact(book, current="column:paid", proposed=proposed, cluster="local:2")
    frame.loc[frame.index[3], ["paid", "exposure"]] = [200.0, -1.0]
    frame.to_parquet(part, index=False)
    with pytest.raises(InputError, match=r"part-01\.parquet: .*value -1\.0 at book row 3 \(0-based\)"):
        premiumlab.impact(book, current=current, proposed=proposed, cluster="local:2")
