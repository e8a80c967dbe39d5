"""Throughput of the table rater beside LightGBM `predict`, and memory of batch rating a large file.

Run by hand (not a test):  /tmp/venv/bin/python benchmarks/rate_throughput.py
1. An invented book of 1,000,000 policies in memory (categorical factors as pandas categoricals),
   a table of 8 factors and one two-way table: `rating_tables.rate`, median of 5 runs, policies/s
   (target >= 2,000,000/s).
2. Beside it LightGBM `predict` on the same book with a Tweedie model of 300 trees x 31 leaves,
   fitted in this script on a 100,000-policy sample (not the demo's tuned model), median of 5 runs;
   the ratio of the two speeds.
3. A 10,000,000-row Parquet book written to a temporary folder and rated with `rate_file` in
   batches of 500,000 rows in a child process; its peak resident memory from
   getrusage(RUSAGE_CHILDREN).ru_maxrss (target < 1.5 GB).
Instead, with `--demo DIR` (a folder written by `premiumlab demo`): the demo's own distilled table against
   the demo's tuned boosted pure-premium model (`run/models/gbm_pure_premium.txt`), both on the demo
   book repeated to 1,000,000 rows (categoricals as pandas categoricals), median of 5 runs each.
Exit code 1 when a target is missed.
"""

from __future__ import annotations

import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from rating_tables import Bands, CategoricalFactor, InteractionFactor, Loadings, NumericFactor, RatingTable, rate, save

INF = np.inf
POLICIES = 1_000_000
BIG_ROWS = 10_000_000
THREADS = 2
RATE_TARGET = 2_000_000
RSS_TARGET_GB = 1.5

NUMERIC = {  # name: (interior band edges, value range)
    "driver_age": ([21, 25, 30, 40, 50, 60, 70, 80], (17, 95)),
    "vehicle_age": ([1, 3, 5, 8, 12, 20], (0, 30)),
    "annual_km": ([5000, 10000, 15000, 20000, 30000], (1000, 60000)),
}
CATEGORICAL = {
    "region": [f"Region {c}" for c in "ABCDEFGHIJKL"],
    "bonus": [f"{i:02d}" for i in range(1, 11)],
    "vehicle_group": [f"G{i}" for i in range(1, 21)],
    "use": ["private", "commute", "business"],
    "fuel": ["petrol", "diesel", "hybrid", "electric"],
}


def build_table(rng: np.random.Generator) -> RatingTable:
    factors: list = []
    for name, (edges, _) in NUMERIC.items():
        rel = np.round(np.exp(rng.normal(0, 0.2, len(edges) + 1)), 3)
        rel[len(rel) // 2] = 1.0
        factors.append(NumericFactor(name, "none", [-INF, *edges], [*edges, INF], rel, np.ones(len(rel))))
    for name, levels in CATEGORICAL.items():
        rel = np.round(np.exp(rng.normal(0, 0.2, len(levels))), 3)
        rel[0] = 1.0
        factors.append(CategoricalFactor(name, "none", tuple(levels), rel, np.ones(len(levels)), fallback=levels[0]))
    regions = CATEGORICAL["region"]
    matrix = np.round(np.exp(rng.normal(0, 0.1, (3, len(regions)))), 3)
    matrix[0, :] = 1.0
    matrix[:, 0] = 1.0
    factors.append(
        InteractionFactor(
            "driver_age__region", ("driver_age", "region"), Bands([-INF, 25, 60], [25, 60, INF]), tuple(regions), matrix
        )
    )
    return RatingTable(
        "benchmark-fictional-motor",
        "2027-01-01",
        310.0,
        "policy-year",
        tuple(factors),
        Loadings(0.08, 40.0, 0.15, 0.05, 75.0),
    )


def build_book(rng: np.random.Generator, n: int) -> pd.DataFrame:
    book = {name: rng.uniform(lo, hi, n).round(1) for name, (_, (lo, hi)) in NUMERIC.items()}
    for name, levels in CATEGORICAL.items():
        book[name] = pd.Categorical.from_codes(rng.integers(0, len(levels), n), categories=levels)
    book["exposure"] = rng.uniform(0.1, 1.0, n).round(4)
    return pd.DataFrame(book)


def median_seconds(fn, repeats: int = 5) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def fit_lightgbm(table: RatingTable, book: pd.DataFrame, rng: np.random.Generator, sample_rows: int = 100_000):
    import lightgbm as lgb

    sample = book.sample(min(sample_rows, len(book)), random_state=7).reset_index(drop=True)
    pure = rate(table, sample, "exposure")["pure_premium"].to_numpy()
    claims = rng.poisson(0.1 * pure / pure.mean() * sample["exposure"].to_numpy())
    amount = np.zeros(claims.size)
    amount[claims > 0] = rng.gamma(2.0 * claims[claims > 0], 1500.0)  # sum of c Gamma(2, 1500) claims
    features = [c for c in book.columns if c != "exposure"]
    data = lgb.Dataset(
        sample[features], label=amount / sample["exposure"], weight=sample["exposure"], free_raw_data=False
    )
    params = {
        "objective": "tweedie",
        "tweedie_variance_power": 1.5,
        "num_leaves": 31,
        "learning_rate": 0.05,
        "min_data_in_leaf": 50,
        "num_threads": THREADS,
        "deterministic": True,
        "verbose": -1,
        "seed": 1,
    }
    model = lgb.train(params, data, num_boost_round=300)
    return model, features


CHILD = """
import sys, time
from rating_tables import load, rate_file
start = time.perf_counter()
rate_file(load(sys.argv[1]), sys.argv[2], sys.argv[3], "exposure", batch_rows=500_000)
print(time.perf_counter() - start)
"""


def write_big_book(path: Path, rng: np.random.Generator) -> None:
    chunk = 1_000_000
    first = build_book(rng, chunk)
    with pq.ParquetWriter(path, pa.Table.from_pandas(first, preserve_index=False).schema) as writer:
        writer.write_table(pa.Table.from_pandas(first, preserve_index=False))
        for _ in range(BIG_ROWS // chunk - 1):
            writer.write_table(pa.Table.from_pandas(build_book(rng, chunk), preserve_index=False))


def demo_ratio(demo: Path) -> float:
    """Rater speed on the demo's table over LightGBM predict with the demo's tuned model."""
    import rating_tables
    from premiumlab.book.spec import load_spec
    from premiumlab.models.gbm.features import features_from_spec
    from premiumlab.models.gbm.fit import load_model
    from premiumlab.runs.rundir import RunDir

    spec = load_spec(demo / "spec.toml")
    book = pd.read_parquet(demo / "book.parquet")
    book = book.iloc[np.resize(np.arange(len(book)), POLICIES)].reset_index(drop=True)
    for f in spec.factors:
        if f.type == "categorical":
            book[f.name] = book[f.name].astype("category")
    table = rating_tables.load(demo / "table")
    run = RunDir(demo / "run")
    model = load_model(run.model_text("gbm", "pure_premium"), run.model_json("gbm", "pure_premium"))
    features = features_from_spec(book, spec)
    rate_seconds = median_seconds(lambda: rate(table, book, "exposure"))
    gbm_seconds = median_seconds(lambda: model.predict(features))
    trees = model.booster.num_trees()
    print(
        f"demo table:        {rate_seconds:.3f} s -> {POLICIES / rate_seconds:,.0f} policies/s; demo's tuned "
        f"model ({trees} trees): {gbm_seconds:.3f} s -> {POLICIES / gbm_seconds:,.0f} policies/s; "
        f"table rater / LightGBM = {gbm_seconds / rate_seconds:.1f}x"
    )
    return POLICIES / rate_seconds


def main() -> int:
    if "--demo" in sys.argv:
        speed = demo_ratio(Path(sys.argv[sys.argv.index("--demo") + 1]))
        return 0 if speed >= RATE_TARGET else 1
    rng = np.random.default_rng(2027)
    table = build_table(rng)
    book = build_book(rng, POLICIES)
    print(
        f"book: {POLICIES:,} policies in memory, {len(table.main_factors)} factors + "
        f"{len(table.interactions)} two-way table; {THREADS} threads for LightGBM; "
        f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores"
    )

    rate(table, book, "exposure")  # warm up
    seconds = median_seconds(lambda: rate(table, book, "exposure"))
    speed = POLICIES / seconds
    print(
        f"rate:              {seconds:.3f} s median of 5 -> {speed:,.0f} policies/s "
        f"(target >= {RATE_TARGET:,}: {'met' if speed >= RATE_TARGET else 'MISSED'})"
    )

    start = time.perf_counter()
    model, features = fit_lightgbm(table, book, rng)
    print(
        f"LightGBM Tweedie:  300 trees x 31 leaves fitted in this script on a 100,000-policy sample "
        f"({time.perf_counter() - start:.1f} s)"
    )
    model.predict(book[features].head(1000), num_threads=THREADS)
    gbm_seconds = median_seconds(lambda: model.predict(book[features], num_threads=THREADS))
    gbm_speed = POLICIES / gbm_seconds
    print(
        f"LightGBM predict:  {gbm_seconds:.3f} s median of 5 -> {gbm_speed:,.0f} policies/s; "
        f"table rater / LightGBM = {speed / gbm_speed:.1f}x"
    )

    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        save(table, folder / "TABLE")
        start = time.perf_counter()
        write_big_book(folder / "book.parquet", rng)
        size = (folder / "book.parquet").stat().st_size / 1e6
        print(
            f"big book:          {BIG_ROWS:,} rows written to Parquet ({size:,.0f} MB) in "
            f"{time.perf_counter() - start:.1f} s"
        )
        child = subprocess.run(
            [
                sys.executable,
                "-c",
                CHILD,
                str(folder / "TABLE"),
                str(folder / "book.parquet"),
                str(folder / "priced.parquet"),
            ],
            capture_output=True,
            text=True,
            check=True,
        )
        peak_gb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss * 1024 / 1e9  # ru_maxrss is KiB on Linux
        rows = pq.ParquetFile(folder / "priced.parquet").metadata.num_rows
        rated_seconds = float(child.stdout.strip())
        print(
            f"rate_file:         {rows:,} rows in batches of 500,000 in {rated_seconds:.1f} s "
            f"({rows / rated_seconds:,.0f} rows/s); peak RSS of the rating process {peak_gb:.2f} GB "
            f"(target < {RSS_TARGET_GB} GB: {'met' if peak_gb < RSS_TARGET_GB else 'MISSED'})"
        )
    return 0 if speed >= RATE_TARGET and peak_gb < RSS_TARGET_GB and rows == BIG_ROWS else 1


if __name__ == "__main__":
    sys.exit(main())
