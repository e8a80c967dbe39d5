"""Where the command line's text goes, and the progress of long jobs.

Results go to stdout; notes (a step done, a file written) to stderr; warnings and cautions to
stderr always. `--quiet` keeps only errors, warnings and cautions: results files are still written.
On a terminal rich draws tables in colour and a spinner while a long step runs; when a stream is not
a terminal it gets plain text, no colour codes and no wrapping at 80 columns.
"""

from __future__ import annotations

import re
import sys
import time
from collections.abc import Iterable
from typing import TYPE_CHECKING, TextIO

import typer

if TYPE_CHECKING:
    from rich.console import Console, RenderableType
    from rich.status import Status

#: Width of a rich console writing to a file or a pipe: wide enough that no table wraps.
PLAIN_WIDTH = 240

_quiet = False


def set_quiet(quiet: bool) -> None:
    """Keep only errors, warnings and cautions (`--quiet`) or say everything.

    Parameters
    ----------
    quiet : bool
        True for `--quiet`.
    """
    global _quiet
    _quiet = quiet


def is_quiet() -> bool:
    """Whether `--quiet` was given.

    Returns
    -------
    bool
        True when only errors, warnings and cautions are printed.
    """
    return _quiet


def rich_console(err: bool = False) -> Console:
    """A rich console on stdout (or stderr): colour on a terminal, plain wide text elsewhere.

    Parameters
    ----------
    err : bool
        Write to stderr instead of stdout.

    Returns
    -------
    rich.console.Console
        On stderr, the one console the progress bars of the library also draw on.
    """
    from rich.console import Console

    if err:
        from premiumlab._core.progress import stderr_console

        return stderr_console()
    stream: TextIO = sys.stdout
    tty = stream.isatty()
    return Console(
        file=stream, highlight=False, no_color=not tty, width=None if tty else PLAIN_WIDTH, soft_wrap=not tty
    )


def say(text: str) -> None:
    """A result on stdout (nothing under `--quiet`).

    Parameters
    ----------
    text : str
        One or more lines.
    """
    if not _quiet:
        typer.echo(text)


def show(renderable: RenderableType) -> None:
    """A rich table (or other renderable) on stdout (nothing under `--quiet`).

    Parameters
    ----------
    renderable : rich.console.RenderableType
        What to print.
    """
    if not _quiet:
        rich_console().print(renderable)


def note(text: str) -> None:
    """A note on stderr, e.g. a file written beside the result (nothing under `--quiet`).

    Parameters
    ----------
    text : str
        One or more lines.
    """
    if not _quiet:
        typer.echo(text, err=True)


def warn(lines: Iterable[str]) -> None:
    """Warnings and cautions on stderr, under `--quiet` too.

    Parameters
    ----------
    lines : iterable of str
        The `warning: ...` and `caution: ...` lines.
    """
    for line in lines:
        typer.echo(line, err=True)


def print_view(view: Iterable[str | RenderableType], err: bool = False) -> None:
    """Text and rich tables in order, on stdout (or stderr); nothing under `--quiet`.

    Parameters
    ----------
    view : iterable of str or rich renderables
        What a command prints, e.g. `premiumlab.cli.format.impact_view`'s list.
    err : bool
        Print on stderr instead of stdout.
    """
    if _quiet:
        return
    previous: object = None  # a table first in the view gets its blank line too
    for item in view:
        if isinstance(item, str):
            typer.echo(item, err=err)
        else:
            if previous != "":
                typer.echo("", err=err)  # one blank line above each table
            rich_console(err=err).print(item)
        previous = item


class StepReporter:
    """The command line's `Progress`: each finished step as a line with its wall time, and on a
    terminal a spinner while the next one runs.

    A step numbered `[k/n]` (the demo's) is timed from the previous numbered step, so that the time
    of `[2/7]` covers the fit's own steps reported between them; any other step from the previous
    step of either kind.

    Parameters
    ----------
    err : bool
        Print the steps on stderr (True) or stdout (the `demo`, whose steps are its story).
    first : str
        What the spinner says before the first step is done.
    """

    def __init__(self, err: bool, first: str = "working") -> None:
        self.err = err
        self.first = first
        self.steps: list[tuple[str, float]] = []
        self._status: Status | None = None
        self._last = self._last_numbered = time.perf_counter()

    def __enter__(self) -> StepReporter:
        self._last = self._last_numbered = time.perf_counter()
        if not _quiet and sys.stderr.isatty():
            self._status = rich_console(err=True).status(self.first, spinner="dots")
            self._status.start()
        return self

    def __exit__(self, *exc: object) -> None:
        if self._status is not None:
            self._status.stop()
            self._status = None

    def step(self, message: str) -> None:
        """Print a finished step with the seconds since the previous one.

        Parameters
        ----------
        message : str
            The step's line (several lines joined by newlines: the time goes on the first).
        """
        now = time.perf_counter()
        first, *rest = message.splitlines() or [""]
        numbered = re.match(r"\[\d+/\d+\]", first) is not None
        seconds = now - (self._last_numbered if numbered else self._last)
        self._last = now
        if numbered:
            self._last_numbered = now
        self.steps.append((first, seconds))
        self._print("\n".join([f"{first} ({seconds:.1f} s)", *rest]))
        if self._status is not None:
            self._status.update(f"working; last done: {first}")

    def result(self, value: object) -> None:
        """Print a finished step's result as its text and tables (`premiumlab.cli.format.result_view`).

        Parameters
        ----------
        value : object
            A `Comparison`, `TableResult` or `ImpactResult`.
        """
        from premiumlab.cli.format import result_view

        if not _quiet:
            print_view(result_view(value), err=self.err)

    def _print(self, text: str) -> None:
        if not _quiet:  # while the spinner runs, rich moves what is printed above it
            typer.echo(text, err=self.err)
