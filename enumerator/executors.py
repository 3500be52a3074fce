"""Where units run: in this process, a local process pool, or a Dask cluster.
Each yields (index, result) as units finish, in any order; merging is exact
addition, so the order never matters."""
from __future__ import annotations

import os
import signal
import sys
import threading

from ..errors import CtmtabError
from .native import core as _core


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
        self.pool = self.client = self._sigterm = None

    def __enter__(self):
        if self.scheduler:
            self.client = _dask_client(self.scheduler)
        elif self.workers > 1:
            from concurrent.futures import ProcessPoolExecutor  # here: an inline build never pays for it

            self.pool = ProcessPoolExecutor(max_workers=self.workers, initializer=_worker_init,
                                            initargs=(os.getpid(),))
            self._sigterm = _on_sigterm_exit()
        return self

    def __exit__(self, kind, *exc):
        if self.pool is not None:
            manager = getattr(self.pool, "_executor_manager_thread", None)
            if kind is not None:  # killed, interrupted or failed: stop the workers now, not after their units
                for proc in list((getattr(self.pool, "_processes", None) or {}).values()):
                    proc.terminate()
            self.pool.shutdown(wait=kind is None, cancel_futures=True)
            if kind is not None and manager is not None:
                # let the pool's manager thread see the dead workers and close down, or Python's
                # exit hook races it into an "Exception ignored" traceback (CPython < 3.12)
                manager.join(timeout=5)
            if self._sigterm is not None:
                signal.signal(signal.SIGTERM, self._sigterm)
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
            from concurrent.futures import as_completed

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


def _worker_init(parent: int) -> None:
    """In each pool worker: die with the parent, even when it is SIGKILLed (Linux), instead of
    running on under PID 1; and take SIGTERM's default, not the parent's handler."""
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    if sys.platform.startswith("linux"):
        try:
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(1, signal.SIGKILL, 0, 0, 0)  # PR_SET_PDEATHSIG = 1
        except (OSError, AttributeError):
            pass
    if os.getppid() != parent:  # the parent died before the prctl took hold
        os._exit(1)


def _on_sigterm_exit():
    """Make SIGTERM end a parallel build through the normal exit path, so Runner.__exit__ stops
    the workers; returns the handler to restore, or None if another handler is in place."""
    if threading.current_thread() is not threading.main_thread():
        return None
    if signal.getsignal(signal.SIGTERM) is not signal.SIG_DFL:
        return None

    def terminated(signum, frame):
        raise SystemExit(128 + signum)

    return signal.signal(signal.SIGTERM, terminated)


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
