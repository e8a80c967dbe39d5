"""The README's two set-up commands, and CI running exactly the README's test command."""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def readme_commands() -> list[str]:
    text = (ROOT / "README.md").read_text()
    return [b.strip() for b in re.findall(r"```\n(.*?)```", text, flags=re.S)][:2]


def test_readme_starts_with_the_job_then_two_commands():
    text = (ROOT / "README.md").read_text()
    paragraphs = [p for p in text.split("\n\n") if p.strip() and not p.startswith("#")]
    assert len(paragraphs[0].split()) >= 40
    demo, tests = readme_commands()
    assert "premiumlab demo" in demo and "pip install" in demo
    assert "pytest" in tests and "pip install" in tests


def test_ci_runs_the_readme_test_command():
    _, tests = readme_commands()
    ci = (ROOT / ".ci" / "run").read_text().splitlines()
    assert tests in ci
