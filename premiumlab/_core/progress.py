"""Progress of long jobs: the reporter a caller passes in, and the rich bar drawn on a terminal.

Library code never prints: a job that has something to say as it goes (`fit`'s experience totals,
the `demo`'s steps and their results) takes a `Progress` and the command line draws it.
"""

from __future__ import annotations

import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from functools import lru_cache
from typing import TYPE_CHECKING, Protocol

if TYPE_CHECKING:
    from rich.console import Console


class Progress(Protocol):
    """What a long job reports while it runs; pass None to a job to have it say nothing."""

    def step(self, message: str) -> None:
        """One line of text: a step is done, or a figure of it.

        Parameters
        ----------
        message : str
            The line, without a trailing newline (several lines are joined by newlines).
        """

    def result(self, value: object) -> None:
        """A finished step's result (a `premiumlab.results` object), for the reporter to show.

        Parameters
        ----------
        value : object
            The result, e.g. a `Comparison` or a `TableResult`.
        """


class Silent:
    """A `Progress` that says nothing: what a job reports to when its caller passed none."""

    def step(self, message: str) -> None:
        """Say nothing."""

    def result(self, value: object) -> None:
        """Show nothing."""


@contextmanager
def progress_bar(description: str, total: int) -> Iterator[Callable[[], None]]:
    """A progress bar of `total` steps; yields the callback that advances it by one."""
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    with Progress(
        TextColumn("{task.description}"),
        BarColumn(),
        MofNCompleteColumn(),
        TimeElapsedColumn(),
        console=stderr_console(),
        transient=True,
        disable=not sys.stderr.isatty(),
    ) as bar:
        task = bar.add_task(description, total=total)
        yield lambda: bar.advance(task)


@lru_cache(maxsize=1)
def stderr_console() -> Console:
    """The one rich console on stderr, shared by the progress bars here and the command line's
    spinner so that rich nests them instead of letting them draw over each other.

    Returns
    -------
    rich.console.Console
        Plain text, no colour and no wrapping when stderr is not a terminal.
    """
    from rich.console import Console

    tty = sys.stderr.isatty()
    return Console(stderr=True, highlight=False, no_color=not tty, width=None if tty else 240, soft_wrap=not tty)
