"""Server status for the lab's admin: queue depth, workers, store size, database, version."""

from __future__ import annotations

import os
from typing import Any

from fastapi import APIRouter, Request
from pydantic import BaseModel, Field
from sqlalchemy import func, select
from starlette.concurrency import run_in_threadpool

from service import __version__
from service.deps import AdminToken, SessionDep

router = APIRouter(tags=["status"])


class StatusPublic(BaseModel):
    """What ``GET /v1/status`` reports."""

    version: str
    database_backend: str = Field(description="SQLAlchemy dialect name: sqlite, postgresql, ...")
    jobs_by_state: dict[str, int] = Field(description="Job count per state; every state listed.")
    queue_depth: int = Field(description="Jobs waiting or running (queued + running).")
    workers: int = Field(description="Compute slots of this server's job runner (0 when off).")
    job_runner: bool = Field(description="Whether this process runs a job runner.")
    store_bytes: int = Field(description="Bytes held in the artifact store (staging included).")
    store_objects: int = Field(description="Objects in the artifact store.")
    staging_files: int = Field(description="Partial uploads in the staging area right now.")


def _store_usage(root: Any, tmp_dir: Any) -> tuple[int, int, int]:
    total = objects = staging = 0
    for dirpath, _dirnames, filenames in os.walk(root):
        in_tmp = os.path.abspath(dirpath).startswith(os.path.abspath(tmp_dir))
        for name in filenames:
            try:
                total += os.stat(os.path.join(dirpath, name)).st_size
            except FileNotFoundError:  # committed or discarded while we looked
                continue
            if in_tmp:
                staging += 1
            else:
                objects += 1
    return total, objects, staging


def _workers(app_state: Any) -> int:
    runner = getattr(app_state, "job_runner", None)
    if runner is None:
        return 0
    executor = getattr(runner, "_executor", None)
    if executor is not None:
        try:
            return int(executor.capacity())
        except Exception:  # a Dask scheduler gone away: report what settings asked for
            pass
    return int(getattr(app_state.settings, "workers", 0))


@router.get("/status")
async def get_status(request: Request, session: SessionDep, token: AdminToken) -> StatusPublic:
    """Queue depth by job state, worker count, artifact-store size, database backend."""
    from storage.models import JOB_STATES, Job

    state = request.app.state

    def counts() -> dict[str, int]:
        rows = session.execute(select(Job.state, func.count()).group_by(Job.state)).all()
        found = {str(s): int(n) for s, n in rows}
        return {s: found.get(s, 0) for s in JOB_STATES}

    by_state = await run_in_threadpool(counts)
    store = state.store
    total, objects, staging = await run_in_threadpool(_store_usage, store.root, store.tmp_dir)
    return StatusPublic(
        version=__version__,
        database_backend=state.engine.dialect.name,
        jobs_by_state=by_state,
        queue_depth=by_state.get("queued", 0) + by_state.get("running", 0),
        workers=_workers(state),
        job_runner=getattr(state, "job_runner", None) is not None,
        store_bytes=total,
        store_objects=objects,
        staging_files=staging,
    )
