"""`rate --cluster`: a Parquet dataset rated part by part on a Dask cluster equals the one-process rate.

Reference: `premiumlab.rate` of the same folder in one process (one priced file, rated with
`rating_tables.rate_file`, the reference rater). On a cluster each part is rated on a worker
with the same rater into a part of the same name; the parts read in name order must equal the
one-process file column by column and row by row, exactly (the same values, types and nulls).
The cluster is a Dask LocalCluster of two worker processes on the loopback (`local:2`); the
table and the book are invented.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import premiumlab
from premiumlab._core.errors import InputError
from rating_tables import LevelCounts, MissingRow, save

from _builders import example_table, run_cli


def _dataset(folder, rows: int = 18_000, parts: int = 3):
    """The example table (with a missing row for region) and a book of `parts` Parquet parts."""
    table = example_table()
    region = dataclasses.replace(table.factor("region"), missing=MissingRow(1.1, 25.5))
    table = dataclasses.replace(table, factors=(table.factors[0], region, *table.factors[2:]))
    save(table, folder / "table")
    rng = np.random.default_rng(8)
    book = pd.DataFrame(
        {
            "policy": [f"P{k}" for k in range(rows)],
            "age": rng.integers(18, 90, rows).astype(float),
            "region": rng.choice(["North", "South", "Coast", "Atlantis", None], rows),
            "bonus": rng.choice(["01", "02", "03"], rows),
            "exposure": rng.uniform(0.05, 1.0, rows),
        }
    )
    (folder / "book").mkdir()
    for k, part in enumerate(np.array_split(np.arange(rows), parts)):
        book.iloc[part].to_parquet(folder / "book" / f"part-{k:02d}.parquet", index=False)
    return folder / "table", folder / "book"


def test_a_dataset_rated_on_a_local_cluster_equals_the_one_process_rate(tmp_path):
    table, book = _dataset(tmp_path)
    here = premiumlab.rate(table, book, out=tmp_path / "priced.parquet")
    there = premiumlab.rate(table, book, out=tmp_path / "priced", cluster="local:2")
    assert there.rows == here.rows == 18_000
    assert there.counts == here.counts
    assert there.counts[0].factor == "region" and isinstance(there.counts[0], LevelCounts)
    assert there.cautions == here.cautions
    names = sorted(p.name for p in (tmp_path / "priced").iterdir())
    assert names == ["part-00.parquet", "part-01.parquet", "part-02.parquet"]
    whole = pq.read_table(tmp_path / "priced.parquet")
    parts = [pq.read_table(tmp_path / "priced" / name) for name in names]
    assert [p.num_rows for p in parts] == [6000, 6000, 6000]
    joined = pa.concat_tables(parts)
    assert joined.schema.equals(whole.schema, check_metadata=True)
    for name in whole.column_names:
        assert joined.column(name).equals(whole.column(name)), name
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]  # no temporary folder left


def test_rate_cluster_through_the_command_line_and_its_refusals(tmp_path):
    table, book = _dataset(tmp_path, rows=600, parts=2)
    done = run_cli("rate", str(table), str(book), "--out", str(tmp_path / "priced"), "--cluster", "local:2")
    assert done.returncode == 0, done.stderr
    assert "wrote " in done.stdout and "(600 rows)" in done.stdout
    assert sorted(p.name for p in (tmp_path / "priced").iterdir()) == ["part-00.parquet", "part-01.parquet"]
    single = tmp_path / "book.parquet"
    pd.read_parquet(book).to_parquet(single, index=False)
    with pytest.raises(InputError, match="rate --cluster reads a Parquet dataset"):
        premiumlab.rate(table, single, out=tmp_path / "other", cluster="local:2")
    assert not (tmp_path / "other").exists()
    bad = run_cli("rate", str(table), str(book), "--out", str(tmp_path / "again"), "--cluster", "local:zero")
    assert bad.returncode == 2 and "give local:N" in bad.stderr


def test_a_bad_row_on_a_worker_is_one_error_naming_the_part_and_leaves_no_output(tmp_path):
    table, book = _dataset(tmp_path, rows=600, parts=2)
    part = book / "part-01.parquet"
    frame = pd.read_parquet(part)
    frame.loc[frame.index[3], "exposure"] = -1.0
    frame.to_parquet(part, index=False)
    with pytest.raises(ValueError, match=r"part-01\.parquet: .*value -1\.0 at book row 3 \(0-based\)"):
        premiumlab.rate(table, book, out=tmp_path / "priced", cluster="local:2")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["book", "table"]
