"""The house rules that tools can check: lint, format, types and the direction of imports.

Each check runs the tool configured in pyproject.toml on the whole repository, so a contributor's
`pytest` fails where CI would.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
BIN = Path(sys.executable).parent


def _tool(name: str) -> str:
    path = BIN / name
    if not path.exists():
        found = shutil.which(name)
        if found is None:
            pytest.fail(f"{name} is not installed; `pip install -e '.[test]'` installs it")
        return found
    return str(path)


def _run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run(args, cwd=ROOT, capture_output=True, text=True, timeout=600)


def test_ruff_finds_nothing_to_fix():
    done = _run(_tool("ruff"), "check", "--no-cache", ".")
    assert done.returncode == 0, done.stdout + done.stderr


def test_code_is_formatted_by_ruff():
    done = _run(_tool("ruff"), "format", "--no-cache", "--check", ".")
    assert done.returncode == 0, done.stdout + done.stderr


def test_mypy_passes():
    """Strict flags on rating_tables (the filed format), the default checks on premiumlab."""
    done = _run(_tool("mypy"), "--no-incremental", "--cache-dir", "/dev/null")
    assert done.returncode == 0, done.stdout + done.stderr


def test_imports_keep_to_the_layers():
    """premiumlab's packages import only the packages below them; rating_tables never imports
    premiumlab or the modelling libraries (contracts in pyproject.toml, checked by import-linter)."""
    done = _run(_tool("lint-imports"), "--no-cache")
    assert done.returncode == 0, done.stdout + done.stderr
