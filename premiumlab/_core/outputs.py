"""Atomic outputs: work in a hidden temporary folder beside the target, rename into place at the end.

The temporary folder is `.NAME.tmp-PID` beside the target; folders of processes that no longer run
are swept at the next start. With `force`, an existing target is first moved aside to
`.NAME.old-PID` and removed only after the new output is in place (a process stopped between the
two moves leaves the old output aside: the sweep puts it back). Without `force`, a target that
another process created while the command ran is not replaced either. A target that is one of the
command's inputs, holds one, or lies inside an input folder is refused, so that `--force` cannot
destroy or change an input.
"""

from __future__ import annotations

import errno
import os
import re
import shutil
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pandas as pd

from premiumlab._core.errors import InputError

_LEFTOVER = re.compile(r"^\.(?P<name>.+)\.(?P<kind>tmp|old)-(?P<pid>\d+)$")


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def sweep_leftovers(parent: Path) -> None:
    """Remove temporary folders and files left by processes that are no longer running; put an old
    output moved aside back in place when nothing took its place."""
    try:
        entries = list(parent.iterdir())
    except OSError:
        return
    for entry in entries:
        m = _LEFTOVER.match(entry.name)
        if m and int(m.group("pid")) != os.getpid() and not _alive(int(m.group("pid"))):
            original = parent / m.group("name")
            if m.group("kind") == "old" and not (original.exists() or original.is_symlink()):
                os.replace(entry, original)  # stopped between moving the old output aside and the new in
            elif entry.is_dir() and not entry.is_symlink():
                shutil.rmtree(entry, ignore_errors=True)
            else:
                entry.unlink(missing_ok=True)


def _holds(outer: Path, inner: Path) -> bool:
    """True when `inner` is `outer` or lies inside it (symbolic links resolved)."""
    return Path(os.path.realpath(inner)).is_relative_to(os.path.realpath(outer))


def check_target(target: Path, force: bool, inputs: tuple[str | Path, ...] = ()) -> None:
    """Sweep the leftovers beside the target, then refuse a target whose folder is missing or not a
    folder, that is or holds one of the command's `inputs` (replacing it would destroy the input),
    that lies inside an input folder (writing it would change the input: a book of parts, a table,
    a run), or that exists without `force`."""
    parent = target.parent
    if not parent.exists():
        raise InputError(f"{target}: the folder {parent} does not exist")
    if not parent.is_dir():
        raise InputError(f"{target}: {parent} is not a folder")
    sweep_leftovers(parent)
    for source in inputs:
        if _holds(target, Path(source)):
            raise InputError(f"{target}: is or holds the input {source}; write the output elsewhere")
        if _holds(Path(source), target):
            raise InputError(f"{target}: lies inside the input {source}; write the output elsewhere")
    if (target.exists() or target.is_symlink()) and not force:
        raise InputError(f"{target}: already exists; use --force to replace it")


#: Errors of writing that belong to the target rather than to an input: no space, no permission,
#: a read-only file system, a quota or file size limit.
_WRITE_ERRNOS = frozenset({errno.ENOSPC, errno.EACCES, errno.EPERM, errno.EROFS, errno.EDQUOT, errno.EFBIG})


def _name_the_target(error: BaseException, tmp: Path, target: Path) -> None:
    """Let a one-line bad-input message about the hidden temporary path name the target instead."""
    if isinstance(error, ValueError) and len(error.args) == 1 and isinstance(error.args[0], str):
        error.args = (error.args[0].replace(str(tmp), str(target)),)


def _write_failure(error: BaseException, tmp: Path, target: Path) -> InputError | None:
    """The one-line error naming `target` for an OS error met while writing the temporary output
    (about a path under `tmp`, or about no path, as a full disk is), or None for any other error
    (one about an input keeps its own path)."""
    if not isinstance(error, OSError) or isinstance(error, InputError):
        return None
    where = error.filename
    ours = where is None or str(where).startswith(str(tmp)) or str(where).startswith(str(target))
    if not ours or (where is None and error.errno not in _WRITE_ERRNOS):
        return None
    return InputError(f"{target}: cannot be written ({error.strerror or error})")


@contextmanager
def _naming_the_target(tmp: Path, target: Path) -> Iterator[None]:
    """Re-raise an OS error of writing under `tmp` as one naming `target` (`_write_failure`)."""
    try:
        yield
    except OSError as error:
        failure = _write_failure(error, tmp, target)
        if failure is None:
            raise
        raise failure from None


def _discard(tmp: Path) -> None:
    """Remove a temporary output (a folder or a file), if it is there."""
    if tmp.is_dir() and not tmp.is_symlink():
        shutil.rmtree(tmp, ignore_errors=True)
    else:
        tmp.unlink(missing_ok=True)  # a link is removed, never followed


def _appeared(target: Path) -> InputError:
    return InputError(
        f"{target}: was created by another process while this command ran; nothing was "
        "replaced (use --force to replace it)"
    )


@contextmanager
def atomic_output(
    target: str | Path, force: bool = False, kind: str = "dir", inputs: tuple[str | Path, ...] = ()
) -> Iterator[Path]:
    """Yield a temporary path (a folder for kind="dir", a file path for kind="file") beside `target`.

    On success it is renamed to `target`; on any error it is removed and `target` is untouched.
    """
    target = Path(target)
    check_target(target, force, inputs)
    parent = target.parent
    tmp = parent / f".{target.name}.tmp-{os.getpid()}"
    _discard(tmp)
    if kind == "dir":
        with _naming_the_target(tmp, target):
            tmp.mkdir()
    try:
        with _naming_the_target(tmp, target):
            yield tmp
    except BaseException as error:
        _name_the_target(error, tmp, target)
        _discard(tmp)
        raise
    if not force and (target.exists() or target.is_symlink()):
        _discard(tmp)
        raise _appeared(target)
    old = None
    with _naming_the_target(tmp, target):
        if target.exists() or target.is_symlink():
            old = parent / f".{target.name}.old-{os.getpid()}"
            os.replace(target, old)
        try:
            os.replace(tmp, target)
        except BaseException:
            _discard(tmp)
            if old is not None:
                os.replace(old, target)
            raise
    if old is not None:
        shutil.rmtree(old) if old.is_dir() and not old.is_symlink() else old.unlink()


@contextmanager
def atomic_files(targets: list[Path], force: bool = False, inputs: tuple[str | Path, ...] = ()) -> Iterator[Path]:
    """Yield a hidden temporary folder; the files written there under the targets' names are moved
    into place at the end (all targets share one folder). On any error nothing is moved."""
    parent = targets[0].parent
    for t in targets:
        check_target(t, force, inputs)
        if t.is_dir() and not t.is_symlink():
            raise InputError(f"{t}: is a folder; the output is a file")
    tmp = parent / f".{targets[0].name}.tmp-{os.getpid()}"
    _discard(tmp)
    with _naming_the_target(tmp, targets[0]):
        tmp.mkdir()
    try:
        with _naming_the_target(tmp, targets[0]):
            yield tmp
            for t in targets:
                if not (tmp / t.name).exists():
                    raise InputError(f"{t}: was not written")
                if not force and (t.exists() or t.is_symlink()):
                    raise _appeared(t)
            for t in targets:
                os.replace(tmp / t.name, t)
    except BaseException as error:
        for t in targets:
            _name_the_target(error, tmp / t.name, t)
        raise
    finally:
        _discard(tmp)


def write_parquet_in_slices(frame: pd.DataFrame, path: Path, slice_rows: int) -> None:
    """Write `frame` (without its index) to the Parquet file `path`, `slice_rows` rows at a time, one
    row group each, so that the Arrow copy held at once is one slice, not the whole frame;
    `pandas.read_parquet` reads back the frame `frame.to_parquet(path, index=False)` would write.

    Parameters
    ----------
    frame : pandas.DataFrame
        The rows to write; its index is not written.
    path : Path
        The file to write (inside an `atomic_output` folder).
    slice_rows : int
        Rows converted and written at a time, >= 1.
    """
    import pyarrow as pa
    import pyarrow.parquet as pq

    schema = pa.Schema.from_pandas(frame.iloc[:0], preserve_index=False)
    with pq.ParquetWriter(path, schema) as writer:
        for start in range(0, len(frame), slice_rows):
            piece = frame.iloc[start : start + slice_rows]
            writer.write_table(pa.Table.from_pandas(piece, schema=schema, preserve_index=False))
