"""Where units run: in this process, a local process pool, or a Dask cluster.
Each yields (index, result) as units finish, in any order; merging is exact
addition, so the order never matters."""
from __future__ import annotations

import os
from concurrent.futures import ProcessPoolExecutor, as_completed

from ..errors import CtmtabError
from . import _core


def run_task(task: tuple) -> tuple:
    """One unit: (dims, n, m, cap, bits, index, prefix) -> (index, result). Top level, so it pickles."""
    dims, n, m, cap, bits, index, prefix = task
    return index, _core.run_unit(dims, n, m, cap, bits, prefix, -1)


def run_sample_task(task: tuple) -> tuple:
    """One sampling unit: (dims, n, m, cap, bits, index, seed, count) -> (index, result)."""
    dims, n, m, cap, bits, index, seed, count = task
    return index, _core.sample_unit(dims, n, m, cap, bits, seed, count)


def stream(tasks, workers: int = 1, scheduler: str | None = None, fn=run_task):
    """(index, result) pairs from a Dask cluster, a local pool, or this process."""
    if scheduler:
        return dask_cluster(tasks, scheduler, fn)
    if workers > 1 and len(tasks) > 1:
        return local_pool(tasks, workers, fn)
    return inline(tasks, fn)


def inline(tasks, fn=run_task):
    for task in tasks:
        yield fn(task)


def local_pool(tasks, workers: int, fn=run_task):
    with ProcessPoolExecutor(max_workers=workers) as pool:
        futures = [pool.submit(fn, t) for t in tasks]
        try:
            for f in as_completed(futures):
                yield f.result()
        except BaseException:
            for f in futures:
                f.cancel()
            raise


def dask_cluster(tasks, address: str, fn=run_task):
    try:
        from distributed import Client, as_completed as dask_completed
    except ImportError:
        raise CtmtabError("--scheduler needs Dask: pip install 'ctmtab[cluster]'") from None
    _reachable(address)
    try:
        client = Client(address, timeout="30s")
    except (OSError, TimeoutError) as exc:
        raise CtmtabError(f"cannot reach the Dask scheduler at {address} ({exc}); check the address") from None
    try:
        futures = client.map(fn, tasks, pure=False)
        for f in dask_completed(futures):
            yield f.result()
    finally:
        client.close()


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
