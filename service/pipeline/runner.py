"""The job runner: claims jobs from the database, drives their flows, heartbeats leases.

One thread per server process. It is the only writer of job, artifact-link and score rows
(what SQLite wants); the heavy stages run on the executor, several jobs at a time (up to the
executor's capacity). A worker that dies fails its job, which goes back to the queue while
attempts remain; a runner that dies stops heartbeating, the lease runs out, and any runner
claims the job again. Scores are upserted, so a re-run never writes one twice.
"""

from __future__ import annotations

import logging
import threading
import time
import traceback
from collections.abc import Callable, Generator, Mapping
from dataclasses import dataclass
from typing import Any

from service.pipeline.flows import FLOWS, Compute, Flow, JobContext
from service.pipeline.recipes import resolve_recipe
from storage import repo
from storage.repo.jobs import release_job

__all__ = ["SCORE_JOB_KIND", "JobRunner"]

log = logging.getLogger("gaitscape.jobs")

SCORE_JOB_KIND = "score"
_MAX_ERROR = 4000


@dataclass
class _Active:
    job_id: int
    flow: Generator[Compute, Any, None]
    future: Any = None
    beat_at: float = 0.0


def _error_text(exc: BaseException) -> str:
    text = f"{type(exc).__name__}: {exc}"
    tail = "".join(traceback.format_exception(exc)[-3:])
    return (text + "\n" + tail)[:_MAX_ERROR]


class JobRunner:
    """Run scoring jobs from the database on ``executor``.

    ``start()`` runs the loop in a daemon thread; ``run_until_idle()`` runs it in the caller
    until the queue is empty (the demo, benchmarks and tests). ``listener(job_id, progress,
    message)`` hears every progress report.
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
    ) -> None:
        self.sessionmaker = sessionmaker
        self.store = store
        self._executor_arg = executor
        self._executor: Any = None
        self.flows = dict(flows)
        self.lease_s = float(lease_s)
        self.poll_s = float(poll_s)
        self.listener = listener
        self._active: dict[int, _Active] = {}
        self._wake = threading.Event()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None

    # -- lifecycle ---------------------------------------------------------------------------
    @property
    def executor(self) -> Any:
        if self._executor is None:  # built lazily: a Dask client connects here, off the loop
            arg = self._executor_arg
            self._executor = arg() if callable(arg) and not hasattr(arg, "submit") else arg
        return self._executor

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

    def run_until_idle(self, timeout: float = 600.0) -> None:
        """Process jobs in this thread until none is queued or running here."""
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            claimed = self._step()
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
        for active in [a for a in self._active.values() if a.future.done()]:
            self._collect(active)
        claimed = self._claim()
        self._heartbeat()
        return claimed

    def _claim(self) -> bool:
        claimed = False
        while not self._stop.is_set() and len(self._active) < self.executor.capacity():
            with self.sessionmaker() as session:
                job = repo.claim_job(session=session, lease_s=self.lease_s, kinds=[SCORE_JOB_KIND])
            if job is None:
                break
            claimed = True
            self._begin(job)
        return claimed

    def _begin(self, job: Any) -> None:
        try:
            with self.sessionmaker() as session:
                recipe = resolve_recipe(session, job.recipe_hash)
            flow = self.flows[job.target_kind]
            ctx = JobContext(
                job_id=job.id, target_kind=job.target_kind, target_id=job.target_id,
                recipe_hash=recipe.hash, parameters=recipe.parameters,
                sessionmaker=self.sessionmaker, store=self.store, listener=self.listener,
            )  # fmt: skip
            active = _Active(job.id, flow(ctx), beat_at=time.monotonic())
        except Exception as exc:
            self._fail(job.id, exc)
            return
        self._active[job.id] = active
        self._advance(active, None, None)

    def _collect(self, active: _Active) -> None:
        try:
            result = active.future.result()
        except Exception as exc:  # the task raised, or its worker died
            self._advance(active, None, exc)
        else:
            self._advance(active, result, None)

    def _advance(self, active: _Active, value: Any, error: BaseException | None) -> None:
        try:
            step = active.flow.throw(error) if error is not None else active.flow.send(value)
        except StopIteration:
            self._active.pop(active.job_id, None)
            with self.sessionmaker() as session:
                repo.finish_job(session=session, job_id=active.job_id, message="done")
            if self.listener is not None:
                self.listener(active.job_id, 1.0, "done")
            return
        except Exception as exc:
            self._active.pop(active.job_id, None)
            self._fail(active.job_id, exc)
            return
        try:
            active.future = self.executor.submit(step.fn, *step.args, **step.kwargs)
        except Exception as exc:
            self._active.pop(active.job_id, None)
            active.flow.close()
            self._fail(active.job_id, exc)
            return
        active.future.add_done_callback(lambda _f: self._wake.set())

    def _fail(self, job_id: int, exc: BaseException) -> None:
        log.warning("job %s failed: %s", job_id, exc)
        with self.sessionmaker() as session:
            repo.fail_job(session=session, job_id=job_id, error=_error_text(exc))

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
