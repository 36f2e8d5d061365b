"""Dask clients for campaigns, the distributed compile and the calibration tools (``map_tasks``).

Dask is imported here only, and only when a client is opened, so the other
commands never pay for it. By default a ``LocalCluster`` of worker
*processes* (one thread each: the compile and verify code holds the GIL for
much of its work) listening on the loopback interface only; with an address,
the cluster already running there.
"""

from __future__ import annotations

import contextlib
import logging
import os
import secrets
from pathlib import Path

from emucompile.errors import InputError

CONNECT_TIMEOUT_S = 20


def dask_distributed():
    """The ``dask.distributed`` module, or an error saying how to install it (exit 2)."""
    try:
        from dask import distributed
    except ImportError:
        raise InputError("this needs Dask, which is not installed",
                         hint="pip install 'emucompile[dask]'") from None
    return distributed


@contextlib.contextmanager
def open_client(scheduler: str | None = None, workers: int | None = None):
    """A ``dask.distributed.Client``, closed (with its LocalCluster) on leaving.

    Parameters
    ----------
    scheduler : str, optional
        Address of a running scheduler (``tcp://HOST:PORT``). Default: a new
        ``LocalCluster`` on 127.0.0.1, no dashboard.
    workers : int, optional
        Worker processes of the LocalCluster (default: the machine's cores).
        With a scheduler the cluster's own workers are used and this must be None.
    """
    distributed = dask_distributed()
    if scheduler is not None:
        if workers is not None:
            raise InputError("--workers starts a local cluster; with --scheduler the cluster's own workers run",
                             hint="drop --workers, or --scheduler")
        try:
            client = distributed.Client(scheduler, timeout=f"{CONNECT_TIMEOUT_S}s")
        except (OSError, TimeoutError, ValueError) as error:
            raise InputError(f"cannot reach the Dask scheduler at {scheduler}: {error}",
                             hint="check the address (tcp://HOST:PORT) and that the scheduler runs") from None
        try:
            yield client
        finally:
            client.close()
        return
    n_workers = workers or os.cpu_count() or 1
    if n_workers < 1:
        raise InputError(f"--workers must be >= 1, got {n_workers}")
    cluster = distributed.LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=True,
                                       host="127.0.0.1", dashboard_address=None, silence_logs=logging.ERROR)
    try:
        client = distributed.Client(cluster)
        try:
            yield client
        finally:
            client.close()
    finally:
        cluster.close()


def worker_slots(client) -> int:
    """Tasks the cluster runs at once (the sum of its workers' threads)."""
    return max(1, sum(w.get("nthreads", 1) for w in client.scheduler_info()["workers"].values()))


def check_reachable(client, directory) -> None:
    """Refuse to start unless every worker sees ``directory`` as this process does.

    A token file written here must be read back, with the same bytes, by
    every worker; a worker that cannot is named in the error (exit 2).
    """
    directory = Path(directory).resolve()
    token = secrets.token_hex(8)
    probe = directory / f".campaign-probe-{token}"
    probe.write_text(token)
    try:
        answers = client.run(_read_probe, str(probe))
    finally:
        probe.unlink(missing_ok=True)
    blind = sorted(worker for worker, seen in answers.items() if seen != token)
    if blind or not answers:
        raise InputError(
            f"{directory}: not reachable from worker(s) {', '.join(blind) or '(none connected)'}; "
            "the workers write the bundles there",
            hint="give -o a directory on storage every worker mounts at the same path")


def _read_probe(path: str) -> str | None:
    try:
        return Path(path).read_text()
    except OSError:
        return None


def map_tasks(function, tasks, *, scheduler: str | None = None, processes: int = 1, chunksize: int = 1,
              paths=()):
    """Yield ``function(task)`` for every task in the order they finish (for the calibration tools).

    Parameters
    ----------
    function : callable
        A module-level function (pickled by reference, or by value from a script's ``__main__``).
    tasks : iterable
    scheduler : str, optional
        Run on the Dask cluster at this address; otherwise ``processes``
        local processes (``multiprocessing.Pool``), or this process when 1.
    chunksize : int
        Tasks sent together (fewer round trips for many short tasks).
    paths : sequence of str
        Prepended to each Dask worker's ``sys.path`` (a checkout the workers
        see at the same path, for modules such as ``tests/bundle_factory``).
    """
    tasks = list(tasks)
    if scheduler is None:
        if processes <= 1:
            yield from map(function, tasks)
            return
        import multiprocessing

        with multiprocessing.Pool(processes) as pool:
            yield from pool.imap_unordered(function, tasks, chunksize=chunksize)
        return
    distributed = dask_distributed()
    with open_client(scheduler) as client:
        if paths:
            client.run(_prepend_paths, [str(p) for p in paths])
        batches = [tasks[i:i + chunksize] for i in range(0, len(tasks), max(1, chunksize))]
        futures = client.map(_run_batch, [function] * len(batches), batches, pure=False)
        for future in distributed.as_completed(futures):
            yield from future.result()


def _run_batch(function, batch):
    return [function(task) for task in batch]


def _prepend_paths(paths):
    import sys

    sys.path[:0] = [p for p in paths if p not in sys.path]


__all__ = ["open_client", "worker_slots", "check_reachable", "map_tasks", "dask_distributed"]
