"""Spec and data errors through the command line: exit code, one line on stderr, nothing written."""

from __future__ import annotations

import hashlib
import os
import re
import subprocess
import sys

import pytest

from _builders import SPEC_TEXT, run_cli, small_book


def digest(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.mark.parametrize(
    "spec_edit, book_edit, fragment",
    [
        (("holdout = 0.2", "holdout = 'big'"), None, "split.holdout' must be a number"),
        (("[factors.region]", "[factors.region]\nmonotone = 'increasing'"), None, "unordered categorical"),
        (("[factors.region]", "[factors.gender]\ntype = 'categorical'\n[factors.region]"), None, "prohibited"),
        (("[columns]", "[columns\n"), None, "malformed TOML"),
        (None, lambda df: df.assign(exposure=-1.0), "exposure <= 0"),
        (None, lambda df: df.drop(columns=["claim_count"]), "missing column 'claim_count'"),
        (None, lambda df: df.assign(claim_count=df.claim_count + 0.5), "fractional claim count"),
        (None, lambda df: df.iloc[:0], "no rows"),
    ],
)
def test_fit_refuses_bad_input_cleanly(tmp_path, spec_edit, book_edit, fragment):
    spec = tmp_path / "spec.toml"
    spec.write_text(SPEC_TEXT if spec_edit is None else SPEC_TEXT.replace(*spec_edit))
    book = tmp_path / "book.csv"
    df = small_book()
    (book_edit(df) if book_edit else df).to_csv(book, index=False)
    before = digest(book), digest(spec)
    out = tmp_path / "run"
    r = run_cli("fit", str(book), "--spec", str(spec), "--out", str(out), "--models", "glm")
    assert r.returncode == 2, r.stderr
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and fragment in lines[0], r.stderr
    assert "Traceback" not in r.stderr
    assert not out.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["book.csv", "spec.toml"]
    assert (digest(book), digest(spec)) == before


def test_validate_lists_every_finding_then_exits_1(tmp_path, spec_file):
    df = small_book()
    df.loc[[1, 2], "exposure"] = 0.0
    df.loc[[5], "claim_count"] = -2
    book = tmp_path / "book.csv"
    df.to_csv(book, index=False)
    r = run_cli("validate", str(book), "--spec", str(spec_file))
    assert r.returncode == 1
    assert "2 rows with exposure <= 0 (rows 1, 2)" in r.stdout
    assert "1 row with a negative claim count (rows 5)" in r.stdout


def test_validate_prints_a_profile_on_a_clean_book(book_file, spec_file):
    r = run_cli("validate", str(book_file), "--spec", str(spec_file))
    assert r.returncode == 0, r.stderr
    assert "0 error(s)" in r.stdout
    for part in ("profile: (overall)", "profile: age", "[25, 40)", "frequency", "severity", "loss cost"):
        assert part in r.stdout
    # cautions go to stderr, as with every command (they went to stdout before the terminal rework)
    assert "caution: " not in r.stdout
    cautions = [line for line in r.stderr.splitlines() if line.startswith("caution: ")]
    assert cautions[0].startswith("caution: Draft for review by a qualified actuary") and len(cautions) == 3
    assert "as recorded: no development, trend or large-loss cap" in cautions[2]


def test_output_under_missing_folder_or_regular_file(tmp_path, book_file, spec_file):
    r = run_cli("fit", str(book_file), "--spec", str(spec_file), "--out", str(tmp_path / "no" / "run"))
    assert r.returncode == 2 and "does not exist" in r.stderr
    regular = tmp_path / "file.txt"
    regular.write_text("x")
    r = run_cli("fit", str(book_file), "--spec", str(spec_file), "--out", str(regular / "run"))
    assert r.returncode == 2 and "is not a folder" in r.stderr


def test_help_on_every_command():
    for cmd in ("simulate", "validate", "fit", "demo"):
        r = run_cli(cmd, "--help")
        assert r.returncode == 0 and "Usage" in r.stdout


def test_help_shows_flags_as_flags_and_arguments_in_capitals():
    r = run_cli("impact", "--help")
    assert r.returncode == 0, r.stderr
    assert "Usage: premiumlab impact [OPTIONS] BOOK" in r.stdout
    assert "<bool>" not in r.stdout and "{book}" not in r.stdout
    assert r.stdout.count("(default:") == 3  # text in brackets is not eaten as markup by the help panel
    force = next(line for line in r.stdout.splitlines() if "--force" in line)
    assert "Replace an existing output" in force


def test_version():
    from premiumlab import __version__

    r = run_cli("--version")
    assert r.returncode == 0 and r.stdout == f"premiumlab {__version__}\n"


def test_quiet_keeps_only_cautions_and_errors(tmp_path, book_file, spec_file):
    r = run_cli("--quiet", "validate", str(book_file), "--spec", str(spec_file))
    assert r.returncode == 0 and r.stdout == ""
    assert all(line.startswith("caution: ") for line in r.stderr.splitlines()) and "caution: Draft" in r.stderr
    df = small_book()
    df.loc[[1], "exposure"] = 0.0
    bad = tmp_path / "bad.csv"
    df.to_csv(bad, index=False)
    r = run_cli("-q", "validate", str(bad), "--spec", str(spec_file))
    assert r.returncode == 1 and r.stdout == ""
    assert "1 row with exposure <= 0 (rows 1)" in r.stderr and "error: error:" not in r.stderr


def test_fit_reports_each_step_with_its_time_when_not_a_terminal(tmp_path, book_file, spec_file):
    r = run_cli("fit", str(book_file), "--spec", str(spec_file), "--out", str(tmp_path / "run"), "--models", "glm")
    assert r.returncode == 0, r.stderr
    steps = [line for line in r.stderr.splitlines() if line.startswith("fit: ")]
    assert steps[0].startswith("fit: read the book") and any("GLM frequency fitted" in s for s in steps)
    assert all(re.search(r"\(\d+\.\d s\)$", s) for s in steps), steps
    assert "\x1b[" not in r.stderr + r.stdout  # no colour codes into a pipe


def test_a_reader_that_stops_early_ends_the_command_quietly(book_file, spec_file):
    """`premiumlab validate ... | head -1`: the shell convention for a writer ended by SIGPIPE is exit
    128 + 13 = 141 with nothing on stderr (the reader here closes the pipe before reading anything)."""
    proc = subprocess.Popen(
        [sys.executable, "-m", "premiumlab", "validate", str(book_file), "--spec", str(spec_file)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        env=dict(os.environ, PYTHONHASHSEED="0"),
    )
    proc.stdout.close()
    err = proc.stderr.read().decode()
    assert proc.wait(timeout=120) == 141, err
    assert err == ""
