"""Real-data runs go through the job path: ingest (as an upload does), queue, runner, flow,
tasks, scores. The executor here is a one-thread pool in the test process, so that
``tracemalloc`` sees the task's peak memory (numpy reports its buffers to it)."""

from __future__ import annotations

import json
import os
import time
import tracemalloc
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from service.pipeline import JobRunner, ensure_default_recipe
from storage import repo
from storage.artifacts import ArtifactStore
from storage.db import make_engine, make_sessionmaker, sqlite_url, upgrade


class InlinePool:
    """The executor protocol on one thread of this process (peak memory measurable)."""

    def __init__(self) -> None:
        self._pool = ThreadPoolExecutor(1)

    def submit(self, fn: Any, /, *args: Any, **kwargs: Any) -> Any:
        return self._pool.submit(fn, *args, **kwargs)

    def capacity(self) -> int:
        return 1

    def close(self) -> None:
        self._pool.shutdown(wait=True)


@dataclass
class Outcome:
    job: Any
    scores: dict[str, Any]
    notes: dict[str, str]
    seconds: float
    peak_mib: float
    rows: list[Any] = field(default_factory=list)

    def value(self, name: str) -> float:
        v = self.scores[name]
        return float("nan") if v is None else float(v)


class RealLab:
    """A migrated SQLite database and artifact store with one arena of ``kind``."""

    def __init__(self, root: Path) -> None:
        self.root = root
        self.engine = make_engine(sqlite_url(root / "data"))
        upgrade(self.engine)
        self.sessionmaker = make_sessionmaker(self.engine)
        self.store = ArtifactStore(root / "data" / "artifacts")
        with self.sessionmaker() as s:
            ensure_default_recipe(s)
            self.arena_id = repo.create_arena(session=s, name="field", kind="open_field").id

    def recipe(self, name: str, parameters: dict[str, Any]) -> str:
        with self.sessionmaker() as s:
            return repo.create_recipe(session=s, name=name, parameters=parameters)[0].hash

    def scan(self, path: Path, meta: dict[str, Any]) -> int:
        with self.sessionmaker() as s:
            row, _ = repo.ingest_scan(
                session=s, store=self.store, arena_id=self.arena_id,
                staged=self.store.put_file(path), filename=path.name, meta=meta,
            )  # fmt: skip
            return row.id

    def trial(self, path: Path, roles: dict[str, Any], meta: dict[str, Any]) -> int:
        with self.sessionmaker() as s:
            subject = repo.create_subject(session=s, label=path.stem, marker_roles=roles)
            row, _ = repo.ingest_trial(
                session=s, store=self.store, staged=self.store.put_file(path),
                filename=path.name,
                meta={"arena_id": self.arena_id, "subject_id": subject.id, **meta},
            )  # fmt: skip
            return row.id

    def score(self, kind: str, target_id: int, recipe_hash: str | None = None) -> Outcome:
        with self.sessionmaker() as s:
            job_id = repo.enqueue_job(
                session=s, kind="score", target_kind=kind, target_id=target_id,
                recipe_hash=recipe_hash, max_attempts=1,
            ).id  # fmt: skip
        pool = InlinePool()
        tracemalloc.start()
        t0 = time.perf_counter()
        try:
            JobRunner(
                sessionmaker=self.sessionmaker, store=self.store, executor=pool, poll_s=0.05
            ).run_until_idle()
        finally:
            seconds = time.perf_counter() - t0
            peak = tracemalloc.get_traced_memory()[1] / 2**20
            tracemalloc.stop()
            pool.close()
        with self.sessionmaker() as s:
            job = repo.get_job(session=s, job_id=job_id)
            rows = repo.list_scores(session=s, target_kind=kind, target_id=target_id,
                                    limit=1000)[0]  # fmt: skip
        if recipe_hash is not None:
            rows = [r for r in rows if r.recipe_hash == recipe_hash]
        return Outcome(
            job, {r.measure: r.value for r in rows}, {r.measure: r.note for r in rows},
            seconds, peak, rows,
        )  # fmt: skip


def record(name: str, outcome: Outcome, **extra: Any) -> None:
    """Append this input's job time and peak memory to GAITSCAPE_REALDATA_FIGURES (JSON lines)."""
    target = os.environ.get("GAITSCAPE_REALDATA_FIGURES")
    if not target:
        return
    line = {
        "input": name, "state": outcome.job.state, "seconds": round(outcome.seconds, 2),
        "peak_mib": round(outcome.peak_mib, 1), "error": outcome.job.error, **extra,
    }  # fmt: skip
    with open(target, "a", encoding="utf-8") as fh:
        fh.write(json.dumps(line, default=float) + "\n")


def every_missing_value_has_a_note(outcome: Outcome) -> None:
    missing = [m for m, v in outcome.scores.items() if v is None or not np.isfinite(v)]
    assert all(outcome.notes[m] for m in missing), [m for m in missing if not outcome.notes[m]]
