"""Executors: where compute tasks run. The same task functions run on both.

``LocalPool`` wraps a ``ProcessPoolExecutor`` started with the "spawn" context: forking a
process that holds threads (the server, the runner) and open3d/numba state is unsafe.
``DaskPool`` submits to a ``distributed.Client``. Both return futures with ``done()``,
``result()`` and ``add_done_callback``. Every worker of either kind keeps BLAS to one thread
(``tasks.warm_up``): the executor already runs one task per core.
"""

from __future__ import annotations

import logging
import multiprocessing
import time
from collections.abc import Callable
from concurrent.futures import Future, ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from typing import Any, Protocol

from service.pipeline.tasks import prepare, run_pinned, warm_up

__all__ = ["DaskPool", "Executor", "LocalPool", "make_executor"]

log = logging.getLogger("gaitscape.jobs")


class Executor(Protocol):
    def submit(self, fn: Callable[..., Any], /, *args: Any, **kwargs: Any) -> Any: ...
    def capacity(self) -> int: ...
    def close(self) -> None: ...


class LocalPool:
    """``workers`` spawned processes; a pool broken by a dying worker is replaced on next use."""

    def __init__(self, workers: int) -> None:
        if workers < 1:
            raise ValueError(f"workers must be >= 1, got {workers}")
        self.workers = workers
        self._pool: ProcessPoolExecutor | None = None
        #: How many pools were started: futures of one generation broke together.
        self.generation = 0

    def _new_pool(self) -> ProcessPoolExecutor:
        self.generation += 1
        return ProcessPoolExecutor(
            max_workers=self.workers,
            mp_context=multiprocessing.get_context("spawn"),
            initializer=warm_up,
        )

    def start(self) -> list[Future[int]]:
        """Start every worker now and let each do its one-time costs (``tasks.prepare``).

        Otherwise workers start with the first job and pay their imports inside it. One
        ``prepare`` call per worker: the pool spawns a process for
        each call while none is idle, so each new worker takes one (a fast worker may take
        two; the other then prepares with its first job, as without ``start``).
        """
        if self._pool is None:
            self._pool = self._new_pool()
        return [self._pool.submit(prepare) for _ in range(self.workers)]

    def submit(self, fn: Callable[..., Any], /, *args: Any, **kwargs: Any) -> Any:
        if self._pool is None:
            self._pool = self._new_pool()
        try:
            return self._pool.submit(fn, *args, **kwargs)
        except BrokenProcessPool:
            # A worker died (killed, out of memory, os._exit): the runner decides whom to
            # charge (service.pipeline.runner); new work goes to a fresh pool.
            log.warning("process pool broken; starting a new one")
            self._pool.shutdown(wait=False, cancel_futures=True)
            self._pool = self._new_pool()
            return self._pool.submit(fn, *args, **kwargs)

    def capacity(self) -> int:
        """Compute slots: one per worker (what ``/v1/status`` reports)."""
        return self.workers

    def max_in_flight(self) -> int:
        """Stages the runner may have submitted at once: two per worker.

        The next stage waits in the pool's queue while the runner thread collects and
        stores the last one, so a worker does not idle between jobs.
        """
        return 2 * self.workers

    def worker_pids(self) -> list[int]:
        """Process ids of the live workers (for operators and tests)."""
        procs = getattr(self._pool, "_processes", None) or {}
        return [p.pid for p in procs.values() if p.pid is not None]

    def close(self) -> None:
        """Shut the pool down and end its workers, busy ones included.

        ``shutdown(wait=False)`` alone leaves a worker that is mid-task running (re-parented to
        init once the server exits, still holding its memory); the runner has already handed
        that job back to the queue, so the worker is terminated (SIGTERM, then SIGKILL).
        """
        if self._pool is not None:
            procs = list((getattr(self._pool, "_processes", None) or {}).values())
            self._pool.shutdown(wait=False, cancel_futures=True)
            for proc in procs:
                if proc.is_alive():
                    proc.terminate()
            for proc in procs:
                proc.join(timeout=5)
                if proc.is_alive():
                    proc.kill()
                    proc.join(timeout=5)
            self._pool = None


class DaskPool:
    """Tasks on a Dask distributed cluster (``tcp://host:port`` or a ``Client``)."""

    def __init__(self, address: str | Any, *, refresh_s: float = 10.0) -> None:
        from distributed import Client

        self._own = isinstance(address, str)
        self.client: Any = (
            # distributed does not annotate Client.__init__.
            Client(address, set_as_default=False)  # type: ignore[no-untyped-call]
            if self._own
            else address
        )
        self._refresh_s = refresh_s
        self._threads = 1
        self._checked = -float("inf")

    def submit(self, fn: Callable[..., Any], /, *args: Any, **kwargs: Any) -> Any:
        # pure=False: a retry of the same inputs must run again, not reuse a cached key.
        # run_pinned: Dask workers have no initializer; BLAS is pinned on first use.
        return self.client.submit(run_pinned, fn, *args, pure=False, **kwargs)

    def capacity(self) -> int:
        now = time.monotonic()
        if now - self._checked > self._refresh_s:
            try:
                self._threads = max(1, sum(self.client.nthreads().values()))
            except Exception as exc:  # scheduler unreachable: keep the last figure
                log.warning("cannot ask the Dask scheduler for its workers: %s", exc)
            self._checked = now
        return self._threads

    def close(self) -> None:
        if self._own:
            self.client.close()


def make_executor(settings: Any) -> Executor:
    """Dask when ``settings.dask_scheduler`` is set, else a local pool of ``settings.workers``."""
    if settings.dask_scheduler:
        return DaskPool(settings.dask_scheduler)
    return LocalPool(settings.workers)
