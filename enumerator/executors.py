"""Where units run: in this process, a local process pool, or a Dask cluster.
Each yields (index, result) as units finish, in any order; merging is exact
addition, so the order never matters."""
from __future__ import annotations

import os
from concurrent.futures import ProcessPoolExecutor, as_completed

from ..errors import CtmtabError
from . import _core


def run_task(task: tuple) -> tuple:
    """One unit: (dims, n, m, cap, bits, index, prefix[, holdouts]) -> (index, result). Top level,
    so it pickles."""
    dims, n, m, cap, bits, index, prefix = task[:7]
    return index, _core.run_unit(dims, n, m, cap, bits, prefix, -1, len(task) > 7 and bool(task[7]))


def run_sample_task(task: tuple) -> tuple:
    """One sampling unit: (dims, n, m, cap, bits, index, seed, count) -> (index, result)."""
    dims, n, m, cap, bits, index, seed, count = task
    return index, _core.sample_unit(dims, n, m, cap, bits, seed, count)


def stream(tasks, workers: int = 1, scheduler: str | None = None, fn=run_task):
    """(index, result) pairs from a Dask cluster, a local pool, or this process."""
    with Runner(workers if len(tasks) > 1 else 1, scheduler) as runner:
        yield from runner.stream(tasks, fn)


class Runner:
    """One place to run batches of tasks: this process, a local process pool or a Dask
    cluster, kept open across batches (a sampled build runs in rounds)."""

    def __init__(self, workers: int = 1, scheduler: str | None = None):
        self.workers, self.scheduler = workers, scheduler
        self.pool = self.client = None

    def __enter__(self):
        if self.scheduler:
            self.client = _dask_client(self.scheduler)
        elif self.workers > 1:
            self.pool = ProcessPoolExecutor(max_workers=self.workers)
        return self

    def __exit__(self, *exc):
        if self.pool is not None:
            self.pool.shutdown(wait=True, cancel_futures=True)
        if self.client is not None:
            self.client.close()

    def stream(self, tasks, fn=run_task):
        """(index, result) as tasks finish, in any order. Closing the stream early cancels the
        tasks not yet started."""
        if self.client is not None:
            from distributed import as_completed as dask_completed
            futures = self.client.map(fn, tasks, pure=False)
            done = dask_completed(futures)
        elif self.pool is not None:
            futures = [self.pool.submit(fn, t) for t in tasks]
            done = as_completed(futures)
        else:
            for task in tasks:
                yield fn(task)
            return
        try:
            for f in done:
                yield f.result()
        finally:
            for f in futures:
                f.cancel()


def _dask_client(address: str):
    try:
        from distributed import Client
    except ImportError:
        raise CtmtabError("--scheduler needs Dask: pip install 'ctmtab[cluster]'") from None
    _reachable(address)
    try:
        return Client(address, timeout="30s")
    except (OSError, TimeoutError) as exc:
        raise CtmtabError(f"cannot reach the Dask scheduler at {address} ({exc}); check the address") from None


def _reachable(address: str) -> None:
    """Fail in a second, with the reason, when nothing listens at a tcp:// address."""
    import socket
    from urllib.parse import urlsplit

    if not address.startswith("tcp://"):
        return
    parts = urlsplit(address)
    try:
        socket.create_connection((parts.hostname, parts.port or 8786), timeout=5).close()
    except (OSError, ValueError) as exc:
        raise CtmtabError(f"cannot reach the Dask scheduler at {address} ({exc}); check the address") from None


def cores() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1
