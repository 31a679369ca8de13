"""Subjects: the animals (or robots) that walk the arenas."""

from __future__ import annotations

from fastapi import APIRouter, status

from service.deps import ReadToken, SessionDep, UploadToken
from service.routes.arenas import Limit, Offset, StudyFilter
from service.schemas import SubjectCreate, SubjectPublic, SubjectsPublic
from storage import repo

router = APIRouter(prefix="/subjects", tags=["subjects"])


@router.post("", status_code=status.HTTP_201_CREATED)
def create_subject(body: SubjectCreate, session: SessionDep, token: UploadToken) -> SubjectPublic:
    """Register a subject with the roles of its markers."""
    subject = repo.create_subject(session=session, **body.model_dump())
    return SubjectPublic.model_validate(subject)


@router.get("")
def list_subjects(
    session: SessionDep,
    token: ReadToken,
    study_id: StudyFilter,
    offset: Offset = 0,
    limit: Limit = 100,
) -> SubjectsPublic:
    """List subjects, oldest first, optionally of one study."""
    rows, count = repo.list_subjects(session=session, study_id=study_id, offset=offset, limit=limit)
    return SubjectsPublic(data=[SubjectPublic.model_validate(r) for r in rows], count=count)


@router.get("/{subject_id}")
def get_subject(subject_id: int, session: SessionDep, token: ReadToken) -> SubjectPublic:
    """One subject."""
    return SubjectPublic.model_validate(repo.get_subject(session=session, subject_id=subject_id))
