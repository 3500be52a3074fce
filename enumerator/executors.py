"""Where units run: in this process, a local process pool, or a Dask cluster.
Each yields (index, result) as units finish, in any order; merging is exact
addition, so the order never matters."""
from __future__ import annotations

import itertools
import math
import os
import signal
import sys
import threading

from ..errors import CtmtabError
from ..extras import require
from .native import core as _core

IN_FLIGHT = 4  # tasks submitted ahead per worker: enough to keep every worker busy


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
        """(index, result) as tasks finish, in any order. tasks may be any iterable, even an
        endless generator: at most IN_FLIGHT per worker are submitted ahead, so neither the task
        list nor the futures ever grow with the build. Closing the stream early leaves the tasks
        already submitted to the runner's exit (cancelled there, or failed by a killed pool)."""
        tasks = iter(tasks)
        if self.client is not None:
            yield from self._dask_stream(tasks, fn)
        elif self.pool is not None:
            from concurrent.futures import FIRST_COMPLETED, wait

            # No cancel() here: a future cancelled before __exit__ kills the workers makes the
            # pool's manager thread fail on it (InvalidStateError, CPython 3.11)
            running = {self.pool.submit(fn, t) for t in itertools.islice(tasks, IN_FLIGHT * self.workers)}
            while running:
                self._check()
                finished, running = wait(running, return_when=FIRST_COMPLETED)
                self._check()
                for f in finished:
                    for t in itertools.islice(tasks, 1):  # keep the workers fed while the caller merges
                        running.add(self.pool.submit(fn, t))
                    yield f.result()
        else:
            for task in tasks:
                yield fn(task)

    def _dask_stream(self, tasks, fn):
        from distributed import as_completed as dask_completed

        ahead = IN_FLIGHT * max(4, sum(self.client.nthreads().values()))
        live = {self.client.submit(fn, t, pure=False) for t in itertools.islice(tasks, ahead)}
        done = dask_completed(list(live))
        try:
            for f in done:
                live.discard(f)
                for t in itertools.islice(tasks, 1):
                    nxt = self.client.submit(fn, t, pure=False)
                    live.add(nxt)
                    done.add(nxt)
                yield f.result()
        finally:
            if live:
                self.client.cancel(list(live))


def _worker_init(parent: int) -> None:
    """In each pool worker: die with the parent, even when it is SIGKILLed (Linux), instead of
    running on under PID 1; take SIGTERM's default, not the parent's handler; and leave Ctrl-C to
    the parent (which stops them), so that it prints one line, not one traceback per worker."""
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if sys.platform.startswith("linux"):
        try:
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(1, signal.SIGKILL, 0, 0, 0)  # PR_SET_PDEATHSIG = 1
        except (OSError, AttributeError):
            pass
    if os.getppid() != parent:  # the parent died before the prctl took hold
        os._exit(1)


SCHEDULER_TIMEOUT_ENV = "CTMTAB_SCHEDULER_TIMEOUT"
SCHEDULER_TIMEOUT = 15.0  # seconds for the whole handshake: a scheduler answers in well under one


def _dask_client(address: str):
    require("distributed")
    from distributed import Client

    limit = _scheduler_timeout()
    _handshake(address, limit)
    try:
        return Client(address, timeout=limit)
    except Exception as exc:  # whatever answered the handshake would not take a client
        raise _unreachable(address, exc, limit) from None


def _scheduler_timeout() -> float:
    text = os.environ.get(SCHEDULER_TIMEOUT_ENV, "")
    if not text:
        return SCHEDULER_TIMEOUT
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not 0 < value <= 3600:
        raise CtmtabError(f"${SCHEDULER_TIMEOUT_ENV} is {text!r}; give the seconds to wait for a Dask "
                          "scheduler, e.g. 15")
    return value


def _handshake(address: str, limit: float) -> None:
    """Connect and exchange Dask's handshake under a hard time limit, so that a malformed address,
    a closed port, a silent listener or a server speaking another protocol fails in one line
    instead of hanging or raising from inside Dask."""
    import asyncio
    from concurrent.futures import ThreadPoolExecutor

    from distributed.comm import connect

    _reachable(address)

    async def once():
        comm = await asyncio.wait_for(connect(address, timeout=limit), limit)
        await comm.close()

    try:
        # in a thread of its own: the caller may be inside a running event loop (a notebook)
        with ThreadPoolExecutor(1) as one:
            one.submit(asyncio.run, once()).result()
    except Exception as exc:  # malformed address, unknown scheme, garbage from the peer, time out
        raise _unreachable(address, exc, limit) from None


def _unreachable(address: str, exc: BaseException, limit: float | None = None) -> CtmtabError:
    reason = " ".join(str(exc).split())[:200] or type(exc).__name__
    if limit is not None and (isinstance(exc, TimeoutError) or "Timed out" in reason):
        return CtmtabError(f"no Dask scheduler answered at {address!r} within {limit:g} s (something listens "
                           "there but does not speak Dask's protocol); check the address and port, or set "
                           f"${SCHEDULER_TIMEOUT_ENV} to wait longer")
    return CtmtabError(f"cannot use the Dask scheduler at {address!r} ({reason}); check the address, "
                       "e.g. tcp://host:8786")


def _reachable(address: str) -> None:
    """Fail in a second, with the reason, when nothing listens at a tcp:// address (Dask itself
    retries a refused connection until its time limit)."""
    import socket
    from urllib.parse import urlsplit

    url = address if "://" in address else "tcp://" + address  # tcp: Dask's default protocol
    if not url.startswith("tcp://"):
        return
    try:
        parts = urlsplit(url)
        socket.create_connection((parts.hostname, parts.port or 8786), timeout=5).close()
    except (OSError, ValueError) as exc:
        raise _unreachable(address, exc) from None


def cores() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1
