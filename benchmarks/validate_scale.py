"""`validate` on a large Parquet book: here, on a local Dask cluster, and bare pyarrow reading (run by hand).

    /tmp/venv/bin/python benchmarks/validate_scale.py [--rows 5000000] [--workers 2]

The book and spec are the load test's (tests/test_load.py: invented, row groups of 250,000 rows,
a continuous banded factor). Each way runs in its own child process, timed wall-clock with its
peak resident memory (ru_maxrss of the child; Dask workers are separate processes and not counted):
- bare pyarrow: read every needed column of every row group into pandas, nothing else;
- `premiumlab validate` in one process;
- `premiumlab validate --cluster local:N` (the slices checked on N worker processes; start-up included).
The two validate outputs must be identical. Prints seconds, peak memory and ratios to the bare read.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from test_load import SPEC, peak_run, write_book

BARE = """
import sys
import pyarrow.parquet as pq
f = pq.ParquetFile(sys.argv[1], pre_buffer=False)
for batch in f.iter_batches(batch_size=500_000, columns=sys.argv[2].split(",")):
    batch.to_pandas()
"""
COLUMNS = "exposure,claim_count,claim_amount,policy,age,region,bonus,sum_insured"


def timed(*args: str) -> tuple[float, float, str]:
    start = time.perf_counter()
    code, err, peak = peak_run(*args)
    if code != 0:
        raise SystemExit(f"{' '.join(args)} failed: {err[-500:]}")
    return time.perf_counter() - start, peak, err


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=5_000_000)
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        book, spec = Path(folder) / "book.parquet", Path(folder) / "spec.toml"
        write_book(book, args.rows)
        spec.write_text(SPEC)
        runs = {"bare pyarrow read": timed("-c", BARE, str(book), COLUMNS)}
        outputs = {}
        for name, extra in (
            ("validate here", ()),
            (f"validate --cluster local:{args.workers}", ("--cluster", f"local:{args.workers}")),
        ):
            out = Path(folder) / f"{len(outputs)}.txt"
            runs[name] = timed(
                "-c",
                "import sys; from premiumlab.cli.app import app; sys.argv[0] = 'premiumlab'; "
                f"sys.stdout = open({str(out)!r}, 'w'); app()",
                "validate",
                str(book),
                "--spec",
                str(spec),
                *extra,
            )
            outputs[name] = out.read_text()
        if len(set(outputs.values())) != 1:
            raise SystemExit("validate printed different reports here and on the cluster")
    base = runs["bare pyarrow read"][0]
    print(f"book: {args.rows:,} rows in row groups of 250,000; the two validate reports are identical")
    for name, (seconds, peak, _) in runs.items():
        print(f"{name:32s} {seconds:7.2f} s  {seconds / base:5.2f}x the bare read   peak {peak / 1e6:6.0f} MB")


if __name__ == "__main__":
    main()
