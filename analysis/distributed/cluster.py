"""Connecting to a Dask cluster: an existing scheduler, or a small local one on 127.0.0.1.

The local cluster exists only for the length of a ``with`` block: it is started for one step
and shut down when the step ends, whether the step succeeds or fails, so no worker outlives
the command that started it.
"""

from __future__ import annotations

import contextlib
import logging
import os
from collections.abc import Iterator

from analysis.errors import StepError

# Two workers of one thread each: the most a laptop shared with other work should give away.
DEFAULT_WORKERS = 2
# Seconds to wait for an existing scheduler to answer before saying it cannot be reached.
CONNECT_TIMEOUT = 15
# Seconds to wait for the local cluster's workers to join its scheduler.
WORKERS_TIMEOUT = 60


def dask_missing() -> StepError:
    return StepError("the dask engine needs the packages dask and distributed, which are not "
                     "installed; install them (pip install 'dask[dataframe]' distributed) or "
                     "use --engine local.")


@contextlib.contextmanager
def open_cluster(scheduler: str | None = None, *, n_workers: int | None = None,
                 processes: bool = False) -> Iterator:
    """Yield a ``distributed.Client`` for the length of a ``with`` block, then close it.

    scheduler: address of a running scheduler (``tcp://host:8786`` or ``host:8786``), as printed
        by ``dask scheduler``. None starts a local cluster bound to 127.0.0.1, with no dashboard
        on any outside interface, that is shut down when the block ends.
    n_workers: workers of the local cluster (default 2, fewer on a one-core machine); each
        runs one thread.
    processes: run local workers in separate processes (True) or as threads of this process
        (False, the default: starts in a fraction of a second and needs no pickling).

    Example::

        with open_cluster() as client:
            result = run_distributed(ProjectionStep(), "table.parquet", client=client)
    """
    try:
        from distributed import Client, LocalCluster
    except ImportError:
        raise dask_missing() from None

    with _quiet_logs():
        yield from _connected(Client, LocalCluster, scheduler, n_workers, processes)


@contextlib.contextmanager
def _quiet_logs() -> Iterator[None]:
    """Keep Dask's informational messages (a closed connection logged with its traceback as
    the cluster shuts down) off the user's terminal for the block; warnings still show."""
    logger = logging.getLogger("distributed")
    level = logger.level
    logger.setLevel(max(level, logging.WARNING))
    try:
        yield
    finally:
        logger.setLevel(level)


def _connected(Client, LocalCluster, scheduler: str | None, n_workers: int | None,
               processes: bool) -> Iterator:
    """The body of :func:`open_cluster`: yield a client of the chosen cluster, then close."""
    if scheduler:
        address = scheduler if "://" in scheduler else f"tcp://{scheduler}"
        try:
            client = Client(address, timeout=f"{CONNECT_TIMEOUT}s", set_as_default=False)
        except (OSError, TimeoutError, ValueError) as exc:
            raise StepError(
                f"cannot reach the dask scheduler at {scheduler!r} ({exc}). Check that "
                "'dask scheduler' is running there and that this machine can reach its port, "
                "or leave out --scheduler to use a local cluster."
            ) from None
        with contextlib.closing(client):
            yield client
        return

    workers = n_workers or max(1, min(DEFAULT_WORKERS, os.cpu_count() or 1))
    # Every listening socket on the loopback interface; the dashboard on a free port there.
    cluster = LocalCluster(
        host="127.0.0.1", protocol="tcp", scheduler_port=0, n_workers=workers,
        threads_per_worker=1, processes=processes, dashboard_address="127.0.0.1:0",
        silence_logs=logging.ERROR,
    )
    try:
        client = Client(cluster, set_as_default=False)
        with contextlib.closing(client):
            # a worker may still be joining when the cluster object is returned; wait for
            # every one, so the first step is spread over them all and the engine's note
            # counts them right
            client.wait_for_workers(workers, timeout=WORKERS_TIMEOUT)
            yield client
    finally:
        cluster.close()


def workers_of(client) -> dict:
    """The scheduler's description of each of its workers now, by address."""
    try:
        return client.scheduler_info(n_workers=-1)["workers"]
    except TypeError:   # distributed before n_workers= (it then lists every worker)
        return client.scheduler_info()["workers"]
