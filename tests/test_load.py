"""Load: validating and rating a 5,000,000-row Parquet book (run by .ci/run with `-m load`).

`premiumlab rate` reads and writes in batches of 500,000 rows; its output must equal, byte for byte,
the file rated in one piece (one batch holding every row, run through `rating_tables.rate_file`), and
its peak resident memory must stay at most 1.5 GB and at most 1.2 times its peak on the first
1,000,000 rows; `premiumlab validate` must pass the book within the same two bounds. Every command
runs in its own child process and its peak is that child's ru_maxrss, read with os.wait4 (Linux
reports KiB). The book holds a continuous factor (`sum_insured`, about one distinct value a row)
banded by the spec, so validate's sums per band must not grow with its distinct values.
The rated premiums are checked against the in-memory rater on a slice of rows (relative error
<= 1e-12 on the pure premium, equal gross premium). The book is invented (seeded generator).

The default suite's batch-equality check on 200,000 rows with uneven batches of 65,537 rows is
tests/test_rater.py::test_batches_give_the_same_bytes_as_one_piece.
"""

from __future__ import annotations

import hashlib
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import rating_tables
from rating_tables.rate import added_columns

from _builders import example_table

pytestmark = pytest.mark.load

BIG_ROWS = 5_000_000
SMALL_ROWS = 1_000_000
WRITE_ROWS = 500_000
RSS_LIMIT = 1.5e9  # bytes
RSS_GROWTH = 1.2
SPEC = """
[columns]
exposure = "exposure"
claim_count = "claim_count"
claim_amount = "claim_amount"
policy_id = "policy"

[factors.age]
type = "numeric"
bands = [25, 40, 60]

[factors.region]
type = "categorical"

[factors.bonus]
type = "categorical"
levels = ["01", "02", "03"]

[factors.sum_insured]
type = "numeric"
bands = [100000, 250000, 500000]
"""


def write_book(path: Path, rows: int, seed: int = 2027) -> None:
    """An invented book of `rows` policies, written in row groups of 250,000 (memory stays small)."""
    rng = np.random.default_rng(seed)
    with pq.ParquetWriter(
        path,
        pa.schema(
            [
                ("policy", pa.string()),
                ("age", pa.float64()),
                ("region", pa.string()),
                ("bonus", pa.string()),
                ("sum_insured", pa.float64()),
                ("exposure", pa.float64()),
                ("claim_count", pa.int64()),
                ("claim_amount", pa.float64()),
            ]
        ),
    ) as writer:
        for start in range(0, rows, WRITE_ROWS):
            n = min(WRITE_ROWS, rows - start)
            count = rng.poisson(0.08, n)
            writer.write_table(
                pa.table(
                    {
                        "policy": np.char.add("F", np.char.zfill(np.arange(start, start + n).astype(str), 8)),
                        "age": rng.integers(17, 95, n).astype(float),
                        "region": rng.choice(np.array(["North", "South", "Coast", "Islands", "Atlantis"]), n),
                        "bonus": rng.choice(np.array(["01", "02", "03"]), n),
                        "sum_insured": rng.lognormal(12.3, 0.6, n),  # continuous: about one distinct value a row
                        "exposure": np.round(rng.uniform(0.05, 1.0, n), 4),
                        "claim_count": count,
                        "claim_amount": np.where(count > 0, np.round(rng.gamma(2.0, 500.0, n) * count, 2), 0.0),
                    }
                ),
                row_group_size=250_000,
            )


def peak_run(*args: str) -> tuple[int, str, float]:
    """Run `python ARGS` in a child process: (exit code, stderr, peak resident memory in bytes)."""
    proc = subprocess.Popen(
        [sys.executable, *args],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        env=dict(os.environ, PYTHONHASHSEED="0"),
    )
    _, status, usage = os.wait4(proc.pid, 0)
    stderr = proc.stderr.read().decode()
    proc.stderr.close()
    return os.waitstatus_to_exitcode(status), stderr, usage.ru_maxrss * 1024.0


@pytest.fixture(scope="module")
def books(tmp_path_factory) -> Path:
    base = tmp_path_factory.mktemp("load")
    write_book(base / "big.parquet", BIG_ROWS)
    write_book(base / "small.parquet", SMALL_ROWS)
    (base / "spec.toml").write_text(SPEC)
    period_spec = SPEC.replace('policy_id = "policy"', 'policy_id = "policy"\nperiod = "region"')
    (base / "spec_period.toml").write_text(period_spec.replace('[factors.region]\ntype = "categorical"\n', ""))
    (base / "spec_unbanded.toml").write_text(SPEC.replace("bands = [100000, 250000, 500000]\n", ""))
    rating_tables.save(example_table(), base / "table")
    return base


def _digest(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


@pytest.mark.parametrize("spec", ["spec.toml", "spec_period.toml", "spec_unbanded.toml"])
def test_validate_passes_the_big_book_in_bounded_memory(books, spec):
    """Without a period column policy ids are dropped chunk by chunk; with one, 8 bytes a row of key
    hashes are kept for the repeat check (`spec_period.toml`: region is the period); without bands
    the continuous factor is cut at exposure quantiles found in passes (`spec_unbanded.toml`)."""
    peaks = {}
    for name in ("small", "big"):
        code, err, peaks[name] = peak_run(
            "-m", "premiumlab", "validate", str(books / f"{name}.parquet"), "--spec", str(books / spec)
        )
        assert code == 0, err
    assert peaks["big"] <= RSS_LIMIT, f"validate peak {peaks['big'] / 1e9:.2f} GB"
    assert peaks["big"] <= RSS_GROWTH * peaks["small"], (
        f"peak {peaks['big'] / 1e6:.0f} MB at {BIG_ROWS:,} rows, {peaks['small'] / 1e6:.0f} MB at {SMALL_ROWS:,}"
    )


def test_batch_rating_equals_one_piece_in_bounded_memory(books):
    table, big = books / "table", books / "big.parquet"
    code, err, small_peak = peak_run(
        "-m",
        "premiumlab",
        "rate",
        str(table),
        str(books / "small.parquet"),
        "--out",
        str(books / "small_priced.parquet"),
    )
    assert code == 0, err
    code, err, big_peak = peak_run(
        "-m", "premiumlab", "rate", str(table), str(big), "--out", str(books / "batched.parquet")
    )
    assert code == 0, err
    one_piece = (
        "import rating_tables, sys; rating_tables.rate_file(rating_tables.load(sys.argv[1]), sys.argv[2], "
        f"sys.argv[3], 'exposure', batch_rows={BIG_ROWS + 1})"
    )
    code, err, _ = peak_run("-c", one_piece, str(table), str(big), str(books / "one.parquet"))
    assert code == 0, err
    assert _digest(books / "batched.parquet") == _digest(books / "one.parquet")
    assert big_peak <= RSS_LIMIT, f"batched rating peak {big_peak / 1e9:.2f} GB"
    assert big_peak <= RSS_GROWTH * small_peak, (
        f"peak {big_peak / 1e6:.0f} MB at {BIG_ROWS:,} rows, {small_peak / 1e6:.0f} MB at {SMALL_ROWS:,} rows"
    )
    rated = pq.ParquetFile(books / "batched.parquet")
    assert rated.metadata.num_rows == BIG_ROWS
    tail = rated.read_row_group(rated.num_row_groups - 1).to_pandas()
    expected = rating_tables.rate(
        example_table(),
        tail.drop(columns=added_columns(example_table())),
        "exposure",
    )
    np.testing.assert_allclose(tail["pure_premium"], expected["pure_premium"], rtol=1e-12)
    np.testing.assert_array_equal(tail["gross_premium"], expected["gross_premium"])
