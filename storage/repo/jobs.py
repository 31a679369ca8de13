"""Jobs: queued in the database, claimed with a lease, retried up to max_attempts."""

from __future__ import annotations

from collections.abc import Iterable
from datetime import timedelta

from sqlalchemy import and_, or_, select, update
from sqlalchemy.orm import Session

from storage.errors import BadInput, Conflict, NotFound
from storage.models import JOB_STATES, TARGET_KINDS, Job, Scan, Trial, utcnow
from storage.repo._common import get_or_404, need_text, paginate

__all__ = [
    "claim_job",
    "enqueue_job",
    "enqueue_jobs",
    "fail_job",
    "finish_job",
    "get_job",
    "latest_job",
    "list_jobs",
    "release_job",
    "select_targets",
    "update_job",
]


def enqueue_job(
    *,
    session: Session,
    kind: str,
    target_kind: str,
    target_id: int,
    recipe_hash: str | None = None,
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
            Job.recipe_hash.is_(None) if recipe_hash is None else Job.recipe_hash == recipe_hash,
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
        recipe_hash=recipe_hash,
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
    *,
    session: Session,
    state: str | None = None,
    kind: str | None = None,
    target_kind: str | None = None,
    target_id: int | None = None,
    recipe_hash: str | None = None,
    offset: int = 0,
    limit: int = 100,
) -> tuple[list[Job], int]:
    """Jobs by id, optionally in one state, of one kind, for one target or recipe hash."""
    stmt = select(Job).order_by(Job.id)
    if state is not None:
        if state not in JOB_STATES:
            raise BadInput(f"state must be one of {JOB_STATES}, got {state!r}")
        stmt = stmt.where(Job.state == state)
    if kind is not None:
        stmt = stmt.where(Job.kind == kind)
    if target_kind is not None:
        stmt = stmt.where(Job.target_kind == target_kind)
    if target_id is not None:
        stmt = stmt.where(Job.target_id == target_id)
    if recipe_hash is not None:
        stmt = stmt.where(Job.recipe_hash == recipe_hash)
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


def release_job(*, session: Session, job_id: int, message: str = "released") -> Job:
    """Hand a running job back to the queue without spending an attempt (graceful stop)."""
    job = get_job(session=session, job_id=job_id)
    if job.state != "running":
        return job
    job.state, job.message, job.lease_until = "queued", message, None
    job.attempts = max(job.attempts - 1, 0)
    session.commit()
    return job


def select_targets(
    *,
    session: Session,
    scan_ids: Iterable[int] = (),
    trial_ids: Iterable[int] = (),
    arena_ids: Iterable[int] = (),
    everything: bool = False,
) -> list[tuple[str, int]]:
    """``(target_kind, id)`` of the named scans and trials, of every scan and trial in the
    named arenas, or of all of them; sorted, without repeats. Unknown ids -> NotFound."""
    out: set[tuple[str, int]] = set()
    for model, kind, ids in ((Scan, "scan", scan_ids), (Trial, "trial", trial_ids)):
        wanted = {int(i) for i in ids}
        found = (
            set(session.scalars(select(model.id).where(model.id.in_(wanted)))) if wanted else set()
        )
        if wanted - found:
            raise NotFound(kind, min(wanted - found))
        out |= {(kind, i) for i in found}
    arenas = {int(i) for i in arena_ids}
    if arenas:
        from storage.models import Arena

        known = set(session.scalars(select(Arena.id).where(Arena.id.in_(arenas))))
        if arenas - known:
            raise NotFound("arena", min(arenas - known))
    for model, kind in ((Scan, "scan"), (Trial, "trial")):
        if everything:
            out |= {(kind, i) for i in session.scalars(select(model.id))}
        elif arenas:
            stmt = select(model.id).where(model.arena_id.in_(arenas))
            out |= {(kind, i) for i in session.scalars(stmt)}
    return sorted(out)


def enqueue_jobs(
    *,
    session: Session,
    kind: str,
    targets: Iterable[tuple[str, int]],
    recipe_hash: str | None = None,
    max_attempts: int = 3,
) -> list[Job]:
    """``enqueue_job`` for many targets in one transaction (open jobs are reused)."""
    kind = need_text(kind, name="kind", max_len=50)
    if not isinstance(max_attempts, int) or max_attempts < 1:
        raise BadInput(f"max_attempts must be an integer >= 1, got {max_attempts!r}")
    targets = list(targets)
    open_jobs = {
        (j.target_kind, j.target_id): j
        for j in session.scalars(
            select(Job).where(
                Job.kind == kind,
                Job.recipe_hash.is_(None)
                if recipe_hash is None
                else Job.recipe_hash == recipe_hash,
                Job.state.in_(("queued", "running")),
            )
        )
    }
    out = []
    for target_kind, target_id in targets:
        if target_kind not in TARGET_KINDS:
            raise BadInput(f"target_kind must be one of {TARGET_KINDS}, got {target_kind!r}")
        job = open_jobs.get((target_kind, target_id))
        if job is None:
            job = Job(
                kind=kind, target_kind=target_kind, target_id=target_id,
                recipe_hash=recipe_hash, max_attempts=max_attempts, state="queued",
                progress=0.0, message="queued", attempts=0,
            )  # fmt: skip
            session.add(job)
            open_jobs[(target_kind, target_id)] = job
        out.append(job)
    session.commit()
    return out
