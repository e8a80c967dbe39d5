"""Shared fixtures: small hand-written books and specs, and a CLI runner (subprocess, as a user runs it)."""

from __future__ import annotations

from pathlib import Path

import pytest

from _builders import DEMO_POLICIES, QUICK_GBM, ROOT, SPEC_TEXT, run_cli, small_book


@pytest.fixture
def spec_file(tmp_path: Path) -> Path:
    p = tmp_path / "spec.toml"
    p.write_text(SPEC_TEXT)
    return p


@pytest.fixture
def book_file(tmp_path: Path) -> Path:
    p = tmp_path / "book.csv"
    small_book().to_csv(p, index=False)
    return p


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory) -> dict[str, Path]:
    """Simulate a small motor book and run the pipeline once through the CLI; tests read the outputs."""
    base = tmp_path_factory.mktemp("demo")
    spec = base / "spec.toml"
    spec.write_text((ROOT / "scenarios" / "motor_spec.toml").read_text() + QUICK_GBM)
    book = base / "book.parquet"
    steps = [
        (
            "simulate",
            str(ROOT / "scenarios" / "motor.toml"),
            "--out",
            str(book),
            "--policies",
            str(DEMO_POLICIES),
            "--seed",
            "11",
        ),
        ("fit", str(book), "--spec", str(spec), "--out", str(base / "run")),
        ("compare", str(base / "run")),
        ("report", str(base / "run")),
        ("tabulate", str(base / "run"), "--out", str(base / "table")),
        ("tabulate", str(base / "run"), "--out", str(base / "glm_table"), "--model", "glm"),
        # promises and certificate; the plausibility bounds are left out: a distilled main effect of a
        # factor in a two-way table may exceed 5 where its cells hold part of the effect (docs/commands.md,
        # audit); tests/test_diagnostics.py checks the bounds
        ("audit", str(base / "table"), "--spec", str(spec), "--run", str(base / "run"), "--no-bounds"),
        ("rate", str(base / "table"), str(book), "--out", str(base / "priced.parquet")),
        (
            "impact",
            str(book),
            "--current",
            str(base / "glm_table"),
            "--proposed",
            str(base / "table"),
            "--cap",
            "0.15",
            "--out",
            str(base / "impact.json"),
        ),
    ]
    for step in steps:
        r = run_cli(*step)
        assert r.returncode == 0, f"{step[0]} failed: {r.stderr[-3000:]}"
    return {
        "base": base,
        "spec": spec,
        "book": book,
        "truth": base / "truth.json",
        "run": base / "run",
        "table": base / "table",
        "glm_table": base / "glm_table",
        "priced": base / "priced.parquet",
        "impact": base / "impact.json",
    }
