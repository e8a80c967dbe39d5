"""Progress of long steps: a rich bar on stderr, shown only when stderr is a terminal."""
from __future__ import annotations

import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager


@contextmanager
def progress_bar(description: str, total: int) -> Iterator[Callable[[], None]]:
    """A progress bar of `total` steps; yields the callback that advances it by one."""
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    console = Console(stderr=True)
    with Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(), TimeElapsedColumn(),
                  console=console, transient=True, disable=not sys.stderr.isatty()) as bar:
        task = bar.add_task(description, total=total)
        yield lambda: bar.advance(task)
