"""Jobs: queued in the database, claimed with a lease, retried up to max_attempts."""

from __future__ import annotations

from collections.abc import Iterable
from datetime import timedelta

from sqlalchemy import and_, or_, select, update
from sqlalchemy.orm import Session

from storage.errors import BadInput, Conflict
from storage.models import JOB_STATES, TARGET_KINDS, Job, utcnow
from storage.repo._common import get_or_404, need_text, paginate

__all__ = [
    "claim_job",
    "enqueue_job",
    "fail_job",
    "finish_job",
    "get_job",
    "latest_job",
    "list_jobs",
    "update_job",
]


def enqueue_job(
    *,
    session: Session,
    kind: str,
    target_kind: str,
    target_id: int,
    profile_hash: str | None = None,
    max_attempts: int = 3,
) -> Job:
    """Queue a job; an open (queued/running) job with the same key is returned instead."""
    if target_kind not in TARGET_KINDS:
        raise BadInput(f"target_kind must be one of {TARGET_KINDS}, got {target_kind!r}")
    if not isinstance(max_attempts, int) or max_attempts < 1:
        raise BadInput(f"max_attempts must be an integer >= 1, got {max_attempts!r}")
    kind = need_text(kind, name="kind", max_len=50)
    open_job = session.scalar(
        select(Job)
        .where(
            Job.kind == kind,
            Job.target_kind == target_kind,
            Job.target_id == target_id,
            Job.profile_hash.is_(None)
            if profile_hash is None
            else Job.profile_hash == profile_hash,
            Job.state.in_(("queued", "running")),
        )
        .order_by(Job.id)
        .limit(1)
    )
    if open_job is not None:
        return open_job
    job = Job(
        kind=kind,
        target_kind=target_kind,
        target_id=target_id,
        profile_hash=profile_hash,
        max_attempts=max_attempts,
        state="queued",
        progress=0.0,
        message="queued",
        attempts=0,
    )
    session.add(job)
    session.commit()
    session.refresh(job)
    return job


def get_job(*, session: Session, job_id: int) -> Job:
    """The job or NotFound."""
    return get_or_404(session, Job, job_id, "job")


def latest_job(*, session: Session, target_kind: str, target_id: int) -> Job | None:
    """The most recent job for a scan or trial, if any."""
    return session.scalar(
        select(Job)
        .where(Job.target_kind == target_kind, Job.target_id == target_id)
        .order_by(Job.id.desc())
        .limit(1)
    )


def list_jobs(
    *, session: Session, state: str | None = None, offset: int = 0, limit: int = 100
) -> tuple[list[Job], int]:
    """Jobs by id, optionally in one state."""
    stmt = select(Job).order_by(Job.id)
    if state is not None:
        if state not in JOB_STATES:
            raise BadInput(f"state must be one of {JOB_STATES}, got {state!r}")
        stmt = stmt.where(Job.state == state)
    return paginate(session, stmt, offset=offset, limit=limit)


def claim_job(
    *, session: Session, lease_s: float = 300.0, kinds: Iterable[str] | None = None
) -> Job | None:
    """Take the oldest queued job (or a running one whose lease ran out) for this worker.

    The state change is a conditional UPDATE, so two workers never claim the same job.
    """
    now = utcnow()
    claimable = or_(
        Job.state == "queued",
        and_(Job.state == "running", Job.lease_until.is_not(None), Job.lease_until < now),
    )
    for _ in range(10):
        stmt = select(Job.id, Job.state, Job.attempts).where(claimable)
        if kinds is not None:
            stmt = stmt.where(Job.kind.in_(list(kinds)))
        found = session.execute(stmt.order_by(Job.created_at, Job.id).limit(1)).first()
        if found is None:
            session.rollback()
            return None
        job_id, state, attempts = found
        result = session.execute(
            update(Job)
            .where(Job.id == job_id, Job.state == state, Job.attempts == attempts)
            .values(
                state="running",
                attempts=attempts + 1,
                lease_until=now + timedelta(seconds=lease_s),
                started_at=now,
                message="running",
                error=None,
            )
        )
        session.commit()
        if result.rowcount == 1:  # type: ignore[attr-defined]
            job = session.get(Job, job_id)
            session.refresh(job)
            return job
    return None


def update_job(
    *,
    session: Session,
    job_id: int,
    progress: float | None = None,
    message: str | None = None,
    lease_s: float | None = None,
) -> Job:
    """Report progress (0..1) and optionally extend the lease."""
    job = get_job(session=session, job_id=job_id)
    if progress is not None:
        if not 0.0 <= float(progress) <= 1.0:
            raise BadInput(f"progress must be in 0..1, got {progress!r}")
        job.progress = float(progress)
    if message is not None:
        job.message = message
    if lease_s is not None:
        job.lease_until = utcnow() + timedelta(seconds=lease_s)
    session.commit()
    return job


def finish_job(*, session: Session, job_id: int, message: str = "done") -> Job:
    """Mark a running job done."""
    job = get_job(session=session, job_id=job_id)
    if job.state not in ("running", "queued"):
        raise Conflict(f"job {job_id} is {job.state}, cannot finish it")
    job.state, job.progress, job.message = "done", 1.0, message
    job.finished_at, job.lease_until = utcnow(), None
    session.commit()
    return job


def fail_job(*, session: Session, job_id: int, error: str) -> Job:
    """Record a failure; the job goes back to the queue while attempts remain."""
    job = get_job(session=session, job_id=job_id)
    job.error = str(error)
    job.lease_until = None
    if job.attempts < job.max_attempts:
        job.state, job.message = "queued", f"retrying after attempt {job.attempts}"
    else:
        job.state, job.message, job.finished_at = "failed", "failed", utcnow()
    session.commit()
    return job
