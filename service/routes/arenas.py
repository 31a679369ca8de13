"""Arenas: the physical environments animals move in."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Query, status

from service.deps import ReadToken, SessionDep, UploadToken
from service.schemas import ArenaCreate, ArenaPublic, ArenasPublic
from storage import repo

router = APIRouter(prefix="/arenas", tags=["arenas"])

Offset = Annotated[int, Query(ge=0)]
Limit = Annotated[int, Query(ge=1, le=1000)]


def study_id_filter(
    session: SessionDep,
    study: Annotated[
        str | None,
        Query(
            description="Limit to this study (by name): its member arenas, subjects and "
            "trials, trials whose arena and subject both are members, and the scans and "
            "scores of those (404 for an unknown study)."
        ),
    ] = None,
) -> int | None:
    """The id of the study named ``study`` (None when not given); NotFound -> 404."""
    if study is None or not study.strip():
        return None
    return repo.get_study_by_name(session=session, name=study.strip()).id


#: The ``study=`` query parameter of every list and export, resolved to a study id.
StudyFilter = Annotated[int | None, Depends(study_id_filter)]


@router.post("", status_code=status.HTTP_201_CREATED)
def create_arena(body: ArenaCreate, session: SessionDep, token: UploadToken) -> ArenaPublic:
    """Register an arena."""
    arena = repo.create_arena(session=session, **body.model_dump())
    return ArenaPublic.model_validate(arena)


@router.get("")
def list_arenas(
    session: SessionDep,
    token: ReadToken,
    study_id: StudyFilter,
    offset: Offset = 0,
    limit: Limit = 100,
) -> ArenasPublic:
    """List arenas, oldest first, optionally of one study."""
    rows, count = repo.list_arenas(session=session, study_id=study_id, offset=offset, limit=limit)
    return ArenasPublic(data=[ArenaPublic.model_validate(r) for r in rows], count=count)


@router.get("/{arena_id}")
def get_arena(arena_id: int, session: SessionDep, token: ReadToken) -> ArenaPublic:
    """One arena."""
    return ArenaPublic.model_validate(repo.get_arena(session=session, arena_id=arena_id))
