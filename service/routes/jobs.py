"""Jobs: the scoring work queued for each new upload."""

from __future__ import annotations

from fastapi import APIRouter

from service.deps import ReadToken, SessionDep
from service.schemas import JobPublic
from storage import repo

router = APIRouter(prefix="/jobs", tags=["jobs"])


@router.get("/{job_id}")
def get_job(job_id: int, session: SessionDep, token: ReadToken) -> JobPublic:
    """A job's state, progress, message and error."""
    return JobPublic.model_validate(repo.get_job(session=session, job_id=job_id))
