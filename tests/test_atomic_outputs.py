"""Atomic outputs (docs/commands.md): work happens in a hidden folder `.NAME.tmp-PID` beside the target and
is renamed into place at the end; a killed command leaves nothing at the target and its leftover is
swept at the next start; `--force` keeps the old output until the new one is in place.

The kill test stops `fit` with SIGKILL (no handler can run) once the temporary folder holds a file,
on a book large enough for the boosted models to take several seconds after the first GLM file;
the interrupt test sends SIGINT (Ctrl-C) at the same moment, which the command's handlers see.
"""

from __future__ import annotations

import errno
import hashlib
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

import rating_tables
from premiumlab._core.errors import InputError
from premiumlab._core.outputs import atomic_files, atomic_output

from _builders import SPEC_TEXT, example_book, example_table, run_cli, small_book

POLL_SECONDS = 0.02
START_TIMEOUT = 120.0


def _tree(folder: Path) -> dict[str, str]:
    """sha256 of every file under `folder`, by relative path."""
    return {
        str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


def _leftovers(parent: Path) -> list[str]:
    return sorted(p.name for p in parent.iterdir() if p.name.startswith("."))


def _fit_and_stop(base: Path, *extra: str, sig: signal.Signals = signal.SIGKILL) -> tuple[int, int, str]:
    """Start `fit` (GLM and GBM), wait until its temporary folder holds a file, send it `sig`;
    (pid, exit code, stderr)."""
    proc = subprocess.Popen(
        [sys.executable, "-m", "premiumlab", "fit", "book.csv", "--spec", "spec.toml", "--out", "run", *extra],
        cwd=base,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
    )
    tmp = base / f".run.tmp-{proc.pid}"
    deadline = time.monotonic() + START_TIMEOUT
    try:
        while not (tmp.is_dir() and any(p.is_file() for p in tmp.rglob("*"))):
            assert proc.poll() is None, f"fit ended before it could be stopped: {proc.stderr.read()}"
            assert time.monotonic() < deadline, "no file appeared in the temporary folder"
            time.sleep(POLL_SECONDS)
    finally:
        os.kill(proc.pid, sig)
        err = proc.stderr.read().decode()
        proc.wait()
        proc.stderr.close()
    return proc.pid, proc.returncode, err


def _fit_and_kill(base: Path, *extra: str) -> int:
    """`_fit_and_stop` with SIGKILL (no handler can run): the temporary folder stays behind; the pid."""
    pid, code, _ = _fit_and_stop(base, *extra)
    assert code == -signal.SIGKILL
    assert (base / f".run.tmp-{pid}").is_dir()
    return pid


@pytest.fixture(scope="module")
def book_folder(tmp_path_factory) -> Path:
    base = tmp_path_factory.mktemp("atomic")
    (base / "spec.toml").write_text(SPEC_TEXT)
    small_book(20_000).to_csv(base / "book.csv", index=False)
    return base


def test_a_killed_fit_leaves_nothing_and_the_next_run_sweeps_its_folder(book_folder):
    base = book_folder
    inputs = _tree(base)
    pid = _fit_and_kill(base)
    assert not (base / "run").exists()
    assert _leftovers(base) == [f".run.tmp-{pid}"]
    r = run_cli("fit", "book.csv", "--spec", "spec.toml", "--out", "run", "--models", "glm", cwd=base)
    assert r.returncode == 0, r.stderr
    assert (base / "run" / "run.json").is_file() and (base / "run" / "models" / "glm_frequency.json").is_file()
    assert _leftovers(base) == []  # swept at the start
    assert {k: v for k, v in _tree(base).items() if not k.startswith("run/")} == inputs


def test_force_keeps_the_old_output_until_the_new_one_is_in_place(book_folder):
    """A killed `fit --force` leaves the old run byte for byte; a stop between moving the old run aside
    and moving the new one in is repaired at the next start (the old run is put back)."""
    base = book_folder
    if not (base / "run").exists():
        assert (
            run_cli("fit", "book.csv", "--spec", "spec.toml", "--out", "run", "--models", "glm", cwd=base).returncode
            == 0
        )
    old = _tree(base / "run")
    pid = _fit_and_kill(base, "--force")
    assert _tree(base / "run") == old
    assert _leftovers(base) == [f".run.tmp-{pid}"]
    # the window between the two renames, made by hand: the old run aside under a dead process's pid
    os.rename(base / "run", base / f".run.old-{pid}")
    r = run_cli("fit", "book.csv", "--spec", "spec.toml", "--out", "run", "--models", "glm", cwd=base)
    assert r.returncode == 2 and "run: already exists; use --force" in r.stderr, r.stderr
    assert _tree(base / "run") == old and _leftovers(base) == []


def test_atomic_output_replaces_only_at_the_end(tmp_path):
    """In process: with force the old folder stays until the block ends; an error keeps it; no leftovers."""
    target = tmp_path / "out"
    target.mkdir()
    (target / "a.txt").write_text("old")
    with pytest.raises(RuntimeError), atomic_output(target, force=True) as tmp:
        (tmp / "a.txt").write_text("new")
        assert (target / "a.txt").read_text() == "old"
        raise RuntimeError("stop")
    assert (target / "a.txt").read_text() == "old" and _leftovers(tmp_path) == []
    with atomic_output(target, force=True) as tmp:
        (tmp / "a.txt").write_text("new")
        assert (target / "a.txt").read_text() == "old"
    assert (target / "a.txt").read_text() == "new" and _leftovers(tmp_path) == []
    with pytest.raises(InputError, match="out: already exists; use --force"), atomic_output(target):
        pass


def test_atomic_files_name_the_target_not_the_temporary_path(tmp_path):
    target = tmp_path / "priced.csv"
    with pytest.raises(InputError) as caught, atomic_files([target]) as tmp:
        raise InputError(f"{tmp / 'priced.csv'}: cannot be written")
    assert str(caught.value) == f"{target}: cannot be written"
    assert not target.exists() and _leftovers(tmp_path) == []
    with pytest.raises(InputError, match="is or holds the input"):
        with atomic_files([tmp_path / "book.csv"], force=True, inputs=(tmp_path / "book.csv",)):
            pass


def test_an_output_another_process_created_meanwhile_is_not_replaced_without_force(tmp_path):
    """Two commands writing the same target at once: the later one to finish leaves the earlier
    one's output in place (without --force), removes its own temporary output and says so."""
    target = tmp_path / "run"
    with pytest.raises(InputError, match="run: was created by another process while this command ran"):
        with atomic_output(target) as tmp:
            (tmp / "mine.txt").write_text("later")
            target.mkdir()
            (target / "theirs.txt").write_text("earlier")
    assert sorted(p.name for p in target.iterdir()) == ["theirs.txt"] and _leftovers(tmp_path) == []
    priced = tmp_path / "priced.csv"
    with pytest.raises(InputError, match=r"priced.csv: was created by another process"):
        with atomic_files([priced]) as tmp:
            (tmp / "priced.csv").write_text("later")
            priced.write_text("earlier")
    assert priced.read_text() == "earlier" and _leftovers(tmp_path) == []
    with atomic_output(target, force=True) as tmp:  # with force the later one replaces it, as asked
        (tmp / "mine.txt").write_text("later")
    assert sorted(p.name for p in target.iterdir()) == ["mine.txt"]


def test_an_interrupted_fit_cleans_up_and_exits_130(book_folder):
    """Ctrl-C (SIGINT) while `fit` writes: its handler removes the temporary folder, nothing reaches
    the target, no traceback, and the exit code is 128 + 2 as for any interrupted tool."""
    base = book_folder
    inputs = {k: v for k, v in _tree(base).items() if not k.startswith("run/")}
    old = _tree(base / "run") if (base / "run").exists() else None
    _, code, err = _fit_and_stop(base, "--force", sig=signal.SIGINT)
    assert code == 130 and "Traceback" not in err, err
    assert _leftovers(base) == []
    assert (_tree(base / "run") if (base / "run").exists() else None) == old
    assert {k: v for k, v in _tree(base).items() if not k.startswith("run/")} == inputs


def test_an_output_inside_an_input_folder_is_refused_even_with_force(tmp_path):
    """Issue 11's cases: `rate TABLE BOOK --out TABLE/factors/x.csv --force` and `impact ... --out
    TABLE/table.json --force` replaced a file of the table; both now exit 2 and the table still loads."""
    table_dir = tmp_path / "table"
    rating_tables.save(example_table(), table_dir)
    book = tmp_path / "book.csv"
    example_book().to_csv(book, index=False)
    before = {p: p.read_bytes() for p in table_dir.rglob("*") if p.is_file()}
    inside = table_dir / "factors" / "age.csv"
    r = run_cli("rate", str(table_dir), str(book), "--out", str(inside), "--force")
    assert r.returncode == 2, r.stderr
    assert f"{inside}: lies inside the input {table_dir}" in r.stderr and "Traceback" not in r.stderr
    r = run_cli(
        "impact", str(book), "--current", str(table_dir), "--proposed", str(table_dir),
        "--out", str(table_dir / "table.json"), "--force",
    )  # fmt: skip
    assert r.returncode == 2 and "lies inside the input" in r.stderr, r.stderr
    assert {p: p.read_bytes() for p in table_dir.rglob("*") if p.is_file()} == before
    rating_tables.load(table_dir)
    with (
        pytest.raises(InputError, match="lies inside the input"),
        atomic_output(table_dir / "new", inputs=(table_dir,)),
    ):
        pass


@pytest.mark.parametrize("code", [errno.ENOSPC, errno.EROFS, errno.EACCES])
def test_a_write_failure_names_the_users_target_not_the_temporary_path(tmp_path, code):
    """Issue 11: a full disk, a read-only file system or a refused permission met while writing
    names the target the user gave, in one line, and leaves nothing behind."""
    target = tmp_path / "out.csv"
    with pytest.raises(InputError) as caught, atomic_files([target]) as tmp:
        raise OSError(code, os.strerror(code), str(tmp / "out.csv"))
    assert str(caught.value) == f"{target}: cannot be written ({os.strerror(code)})"
    with pytest.raises(InputError, match=f"^{tmp_path / 'run'}: cannot be written"), atomic_output(tmp_path / "run"):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))  # a full disk names no file
    assert list(tmp_path.iterdir()) == []


def test_an_error_about_an_input_keeps_the_inputs_path(tmp_path):
    """An OS error naming another file (an input that cannot be read) is not put on the target."""
    with pytest.raises(PermissionError, match=r"book\.csv"), atomic_output(tmp_path / "run"):
        raise PermissionError(errno.EACCES, "Permission denied", str(tmp_path / "book.csv"))


def test_a_link_at_the_temporary_path_is_removed_not_followed(tmp_path):
    """A link planted where the temporary folder goes is removed; what it points to is untouched."""
    kept = tmp_path / "kept"
    kept.mkdir()
    (kept / "file").write_text("x")
    (tmp_path / f".run.tmp-{os.getpid()}").symlink_to(kept)
    with atomic_output(tmp_path / "run") as tmp:
        (tmp / "a").write_text("y")
    assert (kept / "file").read_text() == "x" and (tmp_path / "run" / "a").read_text() == "y"
