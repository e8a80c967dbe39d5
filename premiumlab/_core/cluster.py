"""Where the boosted-model search runs: in this process, or as tasks on a Dask cluster.

The search is many independent fits (settings x folds per target). `tasks_on(None)` runs them one
after the other here; `tasks_on("local:N")` starts a Dask cluster of N single-threaded worker
processes on this machine for the command; `tasks_on("tcp://host:8786")` sends them to the workers
of a running Dask scheduler. Each fit uses `[gbm] threads` LightGBM threads wherever it runs, so a
run gives the same model files on a cluster as in one process with the same thread count.

Dask moves the tasks and the training matrix between the processes of your own cluster with its
own serialisation; premiumlab never unpickles anything it reads from disk. A Dask scheduler runs
whatever its clients send it: connect only to one you control.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Protocol

from premiumlab._core.errors import InputError
from rating_tables.errors import TableError

#: Seconds to wait for a remote scheduler to answer.
CONNECT_TIMEOUT = 30


class TaskRunner(Protocol):
    """Runs fn(shared, item) for every item and returns the results in the items' order.

    ``workers`` is the number of processes the tasks share (1 here); `place` keeps items where the
    tasks run, so that several maps over the same partitions of a book send them only once.
    ``client`` is the Dask client for a library's own Dask interface (LightGBM's), None here.
    """

    description: str
    workers: int
    client: Any

    def place(self, items: Sequence[Any]) -> list: ...

    def map(
        self, fn: Callable[[Any, Any], Any], shared: Any, items: Sequence[Any], advance: Callable[[], None]
    ) -> list: ...


class InProcess:
    """Every task in this process, one after the other."""

    description = "this process"
    workers = 1
    client = None

    def place(self, items: Sequence[Any]) -> list:
        """The items themselves."""
        return list(items)

    def map(
        self, fn: Callable[[Any, Any], Any], shared: Any, items: Sequence[Any], advance: Callable[[], None]
    ) -> list:
        results = []
        for item in items:
            results.append(fn(shared, item))
            advance()
        return results


class DaskTasks:
    """Every task on the workers of a Dask client; `shared` is sent once to every worker."""

    def __init__(self, client: Any, description: str) -> None:
        self.client = client
        self.description = description
        self.workers = max(1, len(client.scheduler_info().get("workers", {})))

    def place(self, items: Sequence[Any]) -> list:
        """The items scattered to the workers once (futures that tasks take in their place)."""
        return list(self.client.scatter(list(items), hash=False)) if items else []

    def map(
        self, fn: Callable[[Any, Any], Any], shared: Any, items: Sequence[Any], advance: Callable[[], None]
    ) -> list:
        from distributed import as_completed

        on_workers = self.client.scatter(shared, broadcast=True, hash=False)
        futures = [self.client.submit(fn, on_workers, item, pure=False) for item in items]
        try:
            for _ in as_completed(futures):
                advance()
            return self.client.gather(futures)
        except (InputError, TableError):  # bad input found on a worker: its own one-line message
            raise
        except Exception as e:  # what a worker raised, e.g. a library it lacks
            raise InputError(
                f"--cluster: a task failed on {self.description} ({type(e).__name__}: {e}); "
                "the workers need the same premiumlab and libraries as this machine"
            ) from None


IN_PROCESS = InProcess()


def parse_cluster(address: str) -> tuple[str, int | str]:
    """'local:N' -> ('local', N); 'tcp://host:port' (or tls://, inproc://) -> ('remote', address)."""
    if address.startswith("local:"):
        count = address.removeprefix("local:")
        if not count.isdigit() or int(count) < 1:
            raise InputError(f"--cluster: {address!r}: give local:N with N >= 1 worker processes")
        return "local", int(count)
    if "://" in address:
        return "remote", address
    raise InputError(
        f"--cluster: {address!r}: give local:N (N worker processes on this machine) or "
        "a Dask scheduler address such as tcp://host:8786"
    )


@contextmanager
def tasks_on(address: str | None) -> Iterator[TaskRunner]:
    """The task runner for `--cluster ADDRESS` (None: this process), closed when the block ends."""
    if address is None:
        yield IN_PROCESS
        return
    _, where = parse_cluster(address)
    try:
        from distributed import Client, LocalCluster
    except ImportError:
        raise InputError("--cluster: Dask is not installed; pip install 'premiumlab[dask]'") from None
    if isinstance(where, int):  # local:N, N worker processes; else a scheduler address
        with (
            LocalCluster(
                n_workers=where,
                threads_per_worker=1,
                processes=True,
                dashboard_address=None,
                silence_logs=logging.ERROR,
            ) as cluster,
            Client(cluster) as client,
        ):
            yield DaskTasks(client, f"a local Dask cluster of {where} worker process{'es' if where != 1 else ''}")
        return
    try:
        client = Client(where, timeout=CONNECT_TIMEOUT)
    except (OSError, TimeoutError, ValueError) as e:
        raise InputError(f"--cluster: cannot reach the Dask scheduler at {where} ({e})") from None
    with client:
        workers = len(client.scheduler_info().get("workers", {}))
        if workers == 0:
            raise InputError(f"--cluster: the Dask scheduler at {where} has no workers")
        _check_worker_versions(client, where)
        yield DaskTasks(client, f"the Dask scheduler at {where} ({workers} workers)")


def _check_worker_versions(client: Any, where: str) -> None:
    """Refuse workers that lack premiumlab or run another version of it than this process."""
    from importlib.metadata import version

    here = version("premiumlab")
    try:
        theirs = client.run(version, "premiumlab")
    except Exception as e:
        raise InputError(
            f"--cluster: a worker of the Dask scheduler at {where} cannot load premiumlab "
            f"({type(e).__name__}: {e}); install premiumlab {here} on every worker"
        ) from None
    other = sorted({v for v in theirs.values() if v != here})
    if other:
        raise InputError(
            f"--cluster: workers of the Dask scheduler at {where} run premiumlab "
            f"{', '.join(other)}, this machine {here}; install the same version everywhere"
        )


def dataset_parts(book: Path, command: str) -> list[Path]:
    """The parts of a Parquet dataset in name order, which `command --cluster` hands to the workers
    one by one; InputError naming `book` for a single file or a CSV book.

    Parameters
    ----------
    book : pathlib.Path
        A folder of .parquet (or .pq) parts (`rating_tables.books.book_parts`).
    command : str
        The command, named in the message.

    Returns
    -------
    list of pathlib.Path
        The part files, at least one.
    """
    from rating_tables.books import book_parts

    kind, parts = book_parts(book)
    if not book.is_dir() or kind != "parquet":
        raise InputError(
            f"{book}: {command} --cluster reads a Parquet dataset (a folder of .parquet parts) part by part; "
            f"give {command} a single file or a CSV book without --cluster"
        )
    return parts
