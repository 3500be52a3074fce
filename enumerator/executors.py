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
    """One unit: (dims, n, m, cap, bits, index, prefix[, holdouts[, keep_size[, settle_size]]]) ->
    (index, result). Top level, so it pickles."""
    dims, n, m, cap, bits, index, prefix = task[:7]
    holdouts = len(task) > 7 and bool(task[7])
    keep_size = task[8] if len(task) > 8 and task[8] else 0
    settle_size = task[9] if len(task) > 9 and task[9] else 0
    return index, _core.run_unit(dims, n, m, cap, bits, prefix, -1, holdouts, -1, keep_size, settle_size)


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
    cluster, kept open across batches (a sampled build runs in rounds).

    A pool's workers die with the build: on SIGKILL by PR_SET_PDEATHSIG (Linux), on SIGTERM by a
    handler that kills them, which breaks the pool, so the build unwinds through its normal exit
    path (spool kept) and ends with status 128 + SIGTERM. The handler raises nothing itself: an
    exception at an arbitrary point could leave a lock of the pool held and hang the exit."""

    def __init__(self, workers: int = 1, scheduler: str | None = None):
        self.workers, self.scheduler = workers, scheduler
        self.pool = self.client = None
        self._previous = self._signalled = self._previous_pipe = None

    def __enter__(self):
        if self.scheduler:
            self.client = _dask_client(self.scheduler)
        elif self.workers > 1:
            from concurrent.futures import ProcessPoolExecutor  # here: an inline build never pays for it

            self.pool = ProcessPoolExecutor(max_workers=self.workers, initializer=_worker_init,
                                            initargs=(os.getpid(),))
            if threading.current_thread() is threading.main_thread():
                if signal.getsignal(signal.SIGTERM) is signal.SIG_DFL:
                    self._previous = signal.signal(signal.SIGTERM, self._on_sigterm)
                # the pool's manager thread may still write to a worker killed on SIGTERM: that
                # must be an EPIPE it handles, not a SIGPIPE (the CLI's default, for `| head`)
                # that ends the build before it can unwind
                if hasattr(signal, "SIGPIPE"):
                    self._previous_pipe = signal.signal(signal.SIGPIPE, signal.SIG_IGN)
        return self

    def _kill_workers(self) -> None:
        try:
            procs = list((getattr(self.pool, "_processes", None) or {}).values())
        except RuntimeError:  # changed size under us: the manager thread is already at it
            procs = []
        for proc in procs:
            try:
                os.kill(proc.pid, signal.SIGKILL)
            except (OSError, TypeError):
                pass

    def _on_sigterm(self, signum, frame):
        self._signalled = signum
        self._kill_workers()

    def _check(self) -> None:
        if self._signalled:
            raise SystemExit(128 + self._signalled)

    def __exit__(self, kind, *exc):
        if self.pool is not None:
            manager = getattr(self.pool, "_executor_manager_thread", None)
            if kind is not None:  # killed, interrupted or failed: stop the workers now, not after their units
                self._kill_workers()
                if manager is not None:
                    # the manager thread sees the dead workers, fails every future and closes
                    # down; cancelling or exiting meanwhile races it into tracebacks (CPython 3.11)
                    manager.join(timeout=5)
            self.pool.shutdown(wait=kind is None, cancel_futures=True)
            if self._previous is not None:
                signal.signal(signal.SIGTERM, self._previous)
            if self._previous_pipe is not None and kind is None and not self._signalled:
                # after a failure the pool's threads may still write to dead workers on the way out
                signal.signal(signal.SIGPIPE, self._previous_pipe)
            self._check()
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

            futures = []
            for t in tasks:
                self._check()
                futures.append(self.pool.submit(fn, t))
            done = as_completed(futures)
        else:
            for task in tasks:
                yield fn(task)
            return
        try:
            for f in done:
                self._check()
                yield f.result()
        finally:
            if not self._signalled:  # else the pool's manager fails them, and must not be raced
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
