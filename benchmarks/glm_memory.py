"""Peak memory and time of `premiumlab fit --models glm` on books of growing size (run by hand).

    python benchmarks/glm_memory.py BOOK.parquet [BOOK.parquet ...] [--spec SPEC]

Make the books with ``premiumlab simulate scenarios/motor.toml --policies N --out BOOK.parquet``.
Each fit runs in its own child process (`tests/test_load.peak_run`: peak resident memory from
wait4's ru_maxrss); the figures are its wall time, run.json's load and GLM step seconds, and the peak,
with the ratio of each book's peak to the first book's.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

from glm_step import MOTOR_SPEC

import rating_tables  # noqa: F401  (imported before tests/ joins the path, which has a folder of that name)

sys.path.append(str(Path(__file__).resolve().parents[1] / "tests"))
from test_load import peak_run

FIT = "import sys; from premiumlab.cli.app import app; sys.argv[0] = 'premiumlab'; app()"


def fit_glm(book: Path, spec: Path, out: Path) -> dict:
    """`fit --models glm` of `book` in a child: seconds, peak MB, rows, load and GLM step seconds."""
    started = time.perf_counter()
    code, err, peak = peak_run("-c", FIT, "fit", str(book), "--spec", str(spec), "--out", str(out), "--models", "glm")
    if code != 0:
        raise SystemExit(f"fit of {book} failed: {err[-500:]}")
    manifest = json.loads((out / "run.json").read_text())
    return {
        "seconds": time.perf_counter() - started,
        "peak_mb": peak / 1e6,
        "rows": manifest["rows"]["total"],
        "load_seconds": manifest["timings"]["load_seconds"],
        "glm_seconds": manifest["timings"]["glm_seconds"],
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("books", type=Path, nargs="+")
    parser.add_argument("--spec", type=Path, default=MOTOR_SPEC)
    args = parser.parse_args()
    first = None
    with tempfile.TemporaryDirectory() as folder:
        for n, book in enumerate(args.books):
            figures = fit_glm(book, args.spec, Path(folder) / f"run{n}")
            first = first or figures["peak_mb"]
            print(
                f"{book.name}: {figures['rows']:,} rows, fit --models glm {figures['seconds']:.1f} s (load "
                f"{figures['load_seconds']:.1f} s, GLM step {figures['glm_seconds']:.1f} s), peak "
                f"{figures['peak_mb']:,.0f} MB ({figures['peak_mb'] / first:.2f}x the first book's)",
                flush=True,
            )


if __name__ == "__main__":
    main()
