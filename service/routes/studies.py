"""Studies: named groups of arenas, subjects and trials within one store."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated

from fastapi import APIRouter, Query, status
from pydantic import BaseModel, ConfigDict, Field

from service.deps import ReadToken, SessionDep, UploadToken
from storage import repo

router = APIRouter(prefix="/studies", tags=["studies"])

Offset = Annotated[int, Query(ge=0)]
Limit = Annotated[int, Query(ge=1, le=1000)]


class StudyCreate(BaseModel):
    """A new study."""

    model_config = ConfigDict(extra="forbid")

    name: str = Field(min_length=1, max_length=200)
    notes: str = ""


class StudyMembersIn(BaseModel):
    """Ids to add to a study (existing memberships are kept)."""

    model_config = ConfigDict(extra="forbid")

    arena_ids: list[int] = []
    subject_ids: list[int] = []
    trial_ids: list[int] = []


class StudyPublic(BaseModel):
    """A study and its explicit members (a trial also counts when its arena and subject do)."""

    id: int
    name: str
    notes: str
    created_at: datetime
    arena_ids: list[int]
    subject_ids: list[int]
    trial_ids: list[int]
    n_trials_in_study: int = Field(description="Explicit trials plus arena-and-subject members.")


class StudiesPublic(BaseModel):
    """A page of studies."""

    data: list[StudyPublic]
    count: int


def _public(session: SessionDep, study: object) -> StudyPublic:
    sid = study.id  # type: ignore[attr-defined]
    members = repo.study_members(session=session, study_id=sid)
    return StudyPublic(
        id=sid,
        name=study.name,  # type: ignore[attr-defined]
        notes=study.notes,  # type: ignore[attr-defined]
        created_at=study.created_at,  # type: ignore[attr-defined]
        n_trials_in_study=len(repo.study_trial_ids(session=session, study_id=sid)),
        **members,
    )


@router.post("", status_code=status.HTTP_201_CREATED)
def create_study(body: StudyCreate, session: SessionDep, token: UploadToken) -> StudyPublic:
    """Create a study (409 when the name is taken)."""
    study = repo.create_study(session=session, name=body.name, notes=body.notes)
    return _public(session, study)


@router.get("")
def list_studies(
    session: SessionDep, token: ReadToken, offset: Offset = 0, limit: Limit = 100
) -> StudiesPublic:
    """List studies, oldest first, with their members."""
    rows, count = repo.list_studies(session=session, offset=offset, limit=limit)
    return StudiesPublic(data=[_public(session, r) for r in rows], count=count)


@router.get("/{study_id}")
def get_study(study_id: int, session: SessionDep, token: ReadToken) -> StudyPublic:
    """One study with its members."""
    return _public(session, repo.get_study(session=session, study_id=study_id))


@router.post("/{study_id}/members")
def add_members(
    study_id: int, body: StudyMembersIn, session: SessionDep, token: UploadToken
) -> StudyPublic:
    """Add arenas, subjects and trials to a study (404 naming an unknown id)."""
    repo.add_study_members(
        session=session,
        study_id=study_id,
        arena_ids=body.arena_ids,
        subject_ids=body.subject_ids,
        trial_ids=body.trial_ids,
    )
    return _public(session, repo.get_study(session=session, study_id=study_id))
