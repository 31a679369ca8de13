"""The job runner: claims jobs from the database, drives their flows, heartbeats leases.

One thread per server process. It is the only writer of job, artifact-link and score rows
(what SQLite wants); the heavy stages run on the executor, several jobs at a time (up to the
executor's capacity). Scores are upserted, so a re-run never writes one twice.

Failures are of two sorts. A deterministic one (bad input, a bad parameter, too little data:
anything the task itself raised) ends the job at once with its own message, ``Type: text``
(the traceback goes to the log only), and the scores it could not compute are stored as
missing with that reason. An infrastructure failure (a worker process died, the Dask worker
was lost, the database hiccuped) sends the job back to the queue while attempts remain; a
runner that dies stops heartbeating, the lease runs out, and any runner claims the job again.

A dying local worker breaks the whole process pool, and every stage in flight fails with
``BrokenProcessPool``, not only the one that killed it. The runner never charges those
jobs blindly: when one stage was in flight it is the culprit and spends an attempt; when
several were, none does, and they run again one at a time on a fresh pool until the culprit
shows itself (it is then the only stage in flight when the pool breaks).
"""

from __future__ import annotations

import contextlib
import logging
import threading
import time
from collections import deque
from collections.abc import Callable, Generator, Mapping
from concurrent.futures import CancelledError
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass
from typing import Any

from service.pipeline.flows import FLOWS, Compute, Flow, JobContext, record_missing
from service.pipeline.recipes import current_parameters, resolve_recipe
from service.pipeline.tasks import DEFAULT_MAX_GRID_CELLS
from storage import repo
from storage.repo.jobs import release_job

__all__ = ["SCORE_JOB_KIND", "JobRunner", "WorkerDied", "is_infrastructure_error"]

log = logging.getLogger("gaitscape.jobs")

SCORE_JOB_KIND = "score"
_MAX_ERROR = 4000
# Failures of the machinery rather than of the job's input, by class name so that the
# optional cluster packages need not be imported to recognise theirs.
_INFRASTRUCTURE = frozenset(
    {
        "BrokenProcessPool",  # a local worker process died (killed, out of memory, os._exit)
        "KilledWorker",  # Dask gave up after its workers died running the task
        "CommClosedError",  # Dask connection lost
        "FutureCancelledError",  # Dask cancelled the task (scheduler restart)
        "CancelledError",
        "OperationalError",  # SQLAlchemy: database unreachable or locked for too long
        "WorkerDied",
    }
)


class WorkerDied(RuntimeError):
    """The worker process running this job's stage died."""


def is_infrastructure_error(exc: BaseException) -> bool:
    """Whether ``exc`` is a failure of the machinery (retried), not of the job (not retried)."""
    return any(cls.__name__ in _INFRASTRUCTURE for cls in type(exc).__mro__)


@dataclass
class _Active:
    job_id: int
    flow: Generator[Compute, Any, None]
    ctx: JobContext | None = None
    step: Compute | None = None
    future: Any = None
    generation: int = 0
    beat_at: float = 0.0


def _error_text(exc: BaseException) -> str:
    # Type and message only: tracebacks are for the log, never the job record or a report.
    text = str(exc).strip() or "(no message)"
    return f"{type(exc).__name__}: {text}"[:_MAX_ERROR]


def _broke_pool(future: Any) -> bool:
    try:
        exc = future.exception(timeout=0)
    except (CancelledError, TimeoutError):
        return False
    return isinstance(exc, BrokenProcessPool)


class JobRunner:
    """Run scoring jobs from the database on ``executor``.

    ``start()`` runs the loop in a daemon thread; ``run_until_idle()`` runs it in the caller
    until the queue is empty (the demo, benchmarks and tests). ``listener(job_id, progress,
    message)`` hears every progress report. ``max_grid_cells`` caps the heightmap a scan job
    may allocate (settings: ``GAITSCAPE_MAX_GRID_CELLS``).
    """

    def __init__(
        self,
        *,
        sessionmaker: Any,
        store: Any,
        executor: Any | Callable[[], Any],
        flows: Mapping[str, Flow] = FLOWS,
        lease_s: float = 300.0,
        poll_s: float = 1.0,
        listener: Callable[[int, float, str], None] | None = None,
        max_grid_cells: int = DEFAULT_MAX_GRID_CELLS,
    ) -> None:
        self.sessionmaker = sessionmaker
        self.store = store
        self._executor_arg = executor
        self._executor: Any = None
        self._executor_lock = threading.Lock()
        self.flows = dict(flows)
        self.lease_s = float(lease_s)
        self.poll_s = float(poll_s)
        self.listener = listener
        self.max_grid_cells = int(max_grid_cells)
        self._active: dict[int, _Active] = {}
        self._ready: deque[_Active] = deque()  # stages waiting to be submitted
        self._suspects: set[int] = set()  # jobs in flight when the pool broke, not yet cleared
        self._wake = threading.Event()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None

    # -- lifecycle ---------------------------------------------------------------------------
    @property
    def executor(self) -> Any:
        if self._executor is None:
            # Built lazily (a Dask client connects here, off the loop), once: warm() may ask
            # from another thread while the runner thread does.
            with self._executor_lock:
                if self._executor is None:
                    arg = self._executor_arg
                    self._executor = arg() if callable(arg) and not hasattr(arg, "submit") else arg
        return self._executor

    def warm(self) -> None:
        """Start the executor's workers now, before any job, where it can (``LocalPool``).

        For a caller that knows jobs are coming (the demo, while it generates its files):
        the workers' imports and one-time compiles then overlap that work.
        """
        start = getattr(self.executor, "start", None)
        if callable(start):
            start()

    def start(self) -> None:
        self._thread = threading.Thread(target=self._loop, name="gaitscape-jobs", daemon=True)
        self._thread.start()

    def stop(self, timeout: float = 10.0) -> None:
        """Stop claiming, hand unfinished jobs back to the queue, close the executor."""
        self._stop.set()
        self._wake.set()
        if self._thread is not None:
            self._thread.join(timeout)
        self._release_all()
        if self._executor is not None:
            self._executor.close()

    def run_until_idle(
        self,
        timeout: float | None = None,
        *,
        on_progress: Callable[[dict[str, int]], None] | None = None,
    ) -> None:
        """Process jobs in this thread until none is queued or running here.

        Parameters
        ----------
        timeout : float or None, s
            Give up with ``TimeoutError`` after this long; None (the default) waits as long
            as jobs make progress: a loaded machine is slow, not broken.
        on_progress : callable, optional
            Called after every pass with the job counts by state (``repo.job_counts``),
            for progress bars.
        """
        deadline = None if timeout is None else time.monotonic() + timeout
        while deadline is None or time.monotonic() < deadline:
            claimed = self._step()
            if on_progress is not None:
                with self.sessionmaker() as session:
                    on_progress(repo.job_counts(session=session, kind=SCORE_JOB_KIND))
            if not claimed and not self._active:
                return
            self._wake.wait(min(self.poll_s, self.lease_s / 3, 0.2))
            self._wake.clear()
        raise TimeoutError(f"jobs still running after {timeout} s")

    def _loop(self) -> None:
        while not self._stop.is_set():
            try:
                self._step()
            except Exception:  # a database hiccup must not kill the runner thread
                log.exception("job runner step failed")
            self._wake.wait(min(self.poll_s, self.lease_s / 3))
            self._wake.clear()

    # -- one pass ----------------------------------------------------------------------------
    def _step(self) -> bool:
        done = [a for a in self._active.values() if a.future is not None and a.future.done()]
        broken = [a for a in done if _broke_pool(a.future)]
        for active in done:
            if active not in broken:
                self._collect(active)
        if broken:
            self._pool_broke(broken)
        self._submit_ready()
        claimed = self._claim()
        self._heartbeat()
        return claimed

    def _claim(self) -> bool:
        claimed = False
        while (
            not self._stop.is_set()
            and not self._suspects  # isolate the suspects first; new work waits
            and len(self._active) < self._in_flight_limit()
        ):
            with self.sessionmaker() as session:
                job = repo.claim_job(session=session, lease_s=self.lease_s, kinds=[SCORE_JOB_KIND])
            if job is None:
                break
            claimed = True
            self._begin(job)
        return claimed

    def _in_flight_limit(self) -> int:
        """Jobs to hold at once: the executor's ``max_in_flight()`` if it queues ahead of its
        workers (``LocalPool``), else its ``capacity()``."""
        ahead = getattr(self.executor, "max_in_flight", None)
        return int(ahead() if callable(ahead) else self.executor.capacity())

    def _begin(self, job: Any) -> None:
        ctx = None
        try:
            with self.sessionmaker() as session:
                recipe = resolve_recipe(session, job.recipe_hash)
            flow = self.flows[job.target_kind]
            ctx = JobContext(
                job_id=job.id, target_kind=job.target_kind, target_id=job.target_id,
                recipe_hash=recipe.hash, parameters=current_parameters(recipe.parameters),
                sessionmaker=self.sessionmaker, store=self.store, listener=self.listener,
                max_grid_cells=self.max_grid_cells,
            )  # fmt: skip
            active = _Active(job.id, flow(ctx), ctx=ctx, beat_at=time.monotonic())
        except Exception as exc:
            self._fail(job.id, exc, ctx)
            return
        self._active[job.id] = active
        self._advance(active, None, None)

    def _collect(self, active: _Active) -> None:
        try:
            result = active.future.result()
        except Exception as exc:  # the task raised, or its Dask worker was lost
            self._suspects.discard(active.job_id)
            self._advance(active, None, exc)
        else:
            self._suspects.discard(active.job_id)  # it ran: it did not break the pool
            self._advance(active, result, None)

    def _advance(self, active: _Active, value: Any, error: BaseException | None) -> None:
        active.future = None
        try:
            step = active.flow.throw(error) if error is not None else active.flow.send(value)
        except StopIteration:
            self._drop(active.job_id)
            with self.sessionmaker() as session:
                repo.finish_job(session=session, job_id=active.job_id, message="done")
            if self.listener is not None:
                self.listener(active.job_id, 1.0, "done")
            return
        except Exception as exc:
            self._drop(active.job_id)
            self._fail(active.job_id, exc, active.ctx)
            return
        active.step = step
        self._ready.append(active)
        self._submit_ready()

    def _submit_ready(self) -> None:
        """Submit waiting stages; while suspects remain, one stage at a time, suspects first."""
        while self._ready:
            if self._suspects:
                if any(a.future is not None and not a.future.done() for a in self._active.values()):
                    return
                suspects = [a for a in self._ready if a.job_id in self._suspects]
                active = suspects[0] if suspects else self._ready[0]
            else:
                active = self._ready[0]
            self._ready.remove(active)
            self._submit(active)
            if self._suspects:
                return

    def _submit(self, active: _Active) -> None:
        step = active.step
        assert step is not None
        try:
            active.future = self.executor.submit(step.fn, *step.args, **step.kwargs)
        except Exception as exc:
            self._drop(active.job_id)
            active.flow.close()
            self._fail(active.job_id, exc, active.ctx)
            return
        active.generation = int(getattr(self.executor, "generation", 0))
        active.future.add_done_callback(lambda _f: self._wake.set())

    def _pool_broke(self, broken: list[_Active]) -> None:
        """A worker died and took the pool down: find who was in flight, charge only a culprit."""
        generations = {a.generation for a in broken}
        victims = list(broken)
        for other in self._active.values():
            # Stages of the same pool that have not reported yet are doomed too: wait for them.
            if other in victims or other.future is None or other.generation not in generations:
                continue
            with contextlib.suppress(Exception):
                other.future.exception(timeout=30)
            if _broke_pool(other.future):
                victims.append(other)
            elif other.future.done():
                self._collect(other)
        if len(victims) == 1:
            active = victims[0]
            log.warning("job %s: its worker process died (it was alone in flight)", active.job_id)
            self._drop(active.job_id)
            active.flow.close()
            self._fail(
                active.job_id,
                WorkerDied("the worker process running this job died (killed or out of memory)"),
                active.ctx,
            )
            return
        ids = sorted(a.job_id for a in victims)
        log.warning("a worker process died with jobs %s in flight; rerunning them one at a time",
                    ids)  # fmt: skip
        for active in victims:
            active.future = None
            self._suspects.add(active.job_id)
            self._ready.append(active)
            with self.sessionmaker() as session:
                repo.update_job(
                    session=session, job_id=active.job_id,
                    message="a worker process died beside this job; running it again alone "
                    "(no attempt spent)",
                )  # fmt: skip

    def _drop(self, job_id: int) -> None:
        active = self._active.pop(job_id, None)
        self._suspects.discard(job_id)
        if active is not None and active in self._ready:
            self._ready.remove(active)

    def _fail(self, job_id: int, exc: BaseException, ctx: JobContext | None) -> None:
        retry = is_infrastructure_error(exc)
        # The traceback (with the worker's, which the executor chains as the cause) goes to
        # the log; the job record gets the type and message.
        log.warning("job %s failed (%s)", job_id, "will retry" if retry else "final",
                    exc_info=exc)  # fmt: skip
        if not retry and ctx is not None:
            try:
                record_missing(ctx, exc)
            except Exception:
                log.exception("job %s: could not store the reason for its missing scores", job_id)
        with self.sessionmaker() as session:
            repo.fail_job(session=session, job_id=job_id, error=_error_text(exc), retry=retry)

    def _heartbeat(self) -> None:
        now = time.monotonic()
        for active in self._active.values():
            if now - active.beat_at >= self.lease_s / 3:
                with self.sessionmaker() as session:
                    repo.update_job(session=session, job_id=active.job_id, lease_s=self.lease_s)
                active.beat_at = now

    def _release_all(self) -> None:
        for active in list(self._active.values()):
            try:
                if active.future is not None:
                    active.future.cancel()
                active.flow.close()
                with self.sessionmaker() as session:
                    release_job(session=session, job_id=active.job_id, message="runner stopped")
            except Exception:
                log.exception("could not release job %s", active.job_id)
        self._active.clear()
        self._ready.clear()
        self._suspects.clear()
