"""Arenas: the physical environments animals move in."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Query, status

from service.deps import ReadToken, SessionDep, UploadToken
from service.schemas import ArenaCreate, ArenaPublic, ArenasPublic
from storage import repo

router = APIRouter(prefix="/arenas", tags=["arenas"])

Offset = Annotated[int, Query(ge=0)]
Limit = Annotated[int, Query(ge=1, le=1000)]


@router.post("", status_code=status.HTTP_201_CREATED)
def create_arena(body: ArenaCreate, session: SessionDep, token: UploadToken) -> ArenaPublic:
    """Register an arena."""
    arena = repo.create_arena(session=session, **body.model_dump())
    return ArenaPublic.model_validate(arena)


@router.get("")
def list_arenas(
    session: SessionDep, token: ReadToken, offset: Offset = 0, limit: Limit = 100
) -> ArenasPublic:
    """List arenas, oldest first."""
    rows, count = repo.list_arenas(session=session, offset=offset, limit=limit)
    return ArenasPublic(data=[ArenaPublic.model_validate(r) for r in rows], count=count)


@router.get("/{arena_id}")
def get_arena(arena_id: int, session: SessionDep, token: ReadToken) -> ArenaPublic:
    """One arena."""
    return ArenaPublic.model_validate(repo.get_arena(session=session, arena_id=arena_id))
