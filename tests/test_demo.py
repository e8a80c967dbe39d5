"""The README's demo command, end to end on a small invented book (4,000 policies of the motor scenario)."""

from __future__ import annotations

import json

from _builders import run_cli

OUTPUTS = (
    "book.parquet",
    "truth.json",
    "spec.toml",
    "run/run.json",
    "run/report.html",
    "run/comparison.json",
    "table/table.json",
    "glm_table/table.json",
    "priced.parquet",
    "impact.json",
    "impact.png",
)


def test_demo_writes_every_output_with_its_cautions(tmp_path):
    out = tmp_path / "demo-output"
    r = run_cli("demo", "--out", str(out), "--policies", "4000")
    assert r.returncode == 0, r.stderr[-3000:]
    for name in OUTPUTS:
        assert (out / name).is_file(), name
    assert [line[:5] for line in r.stdout.splitlines() if line.startswith("[")] == [f"[{i}/7]" for i in range(1, 8)]
    # cautions on stderr as with every command; no hidden temporary folder named; what it wrote and what next
    assert "caution: Draft for review by a qualified actuary" in r.stderr
    assert ".tmp-" not in r.stdout + r.stderr
    assert f"  report         {(out / 'run' / 'report.html').as_posix()}" in r.stdout
    assert f"  exhibit        {(out / 'table' / 'exhibit.xlsx').as_posix()}" in r.stdout
    assert "time per step: [1/7]" in r.stdout and "next:" in r.stdout
    assert "folds = 3\nmax_settings = 4" in (out / "spec.toml").read_text()
    run = json.loads((out / "run" / "run.json").read_text())
    assert run["rows"]["total"] > 4000 and run["gbm_search_ran_on"] == "this process"
    assert (out / "impact.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    dislocation = json.loads((out / "impact.json").read_text())
    assert dislocation["rows"] == run["rows"]["total"] and dislocation["policies"] == 4000
    again = run_cli("demo", "--out", str(out), "--policies", "4000")
    assert again.returncode == 2 and "already exists; use --force" in again.stderr
