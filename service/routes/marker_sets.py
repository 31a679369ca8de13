"""Marker sets: marker names and the roles they play."""

from __future__ import annotations

from fastapi import APIRouter, status

from service.deps import ReadToken, SessionDep, UploadToken
from service.routes.arenas import Limit, Offset
from service.schemas import MarkerSetCreate, MarkerSetPublic, MarkerSetsPublic
from storage import repo

router = APIRouter(prefix="/marker-sets", tags=["marker sets"])


@router.post("", status_code=status.HTTP_201_CREATED)
def create_marker_set(
    body: MarkerSetCreate, session: SessionDep, token: UploadToken
) -> MarkerSetPublic:
    """Register a marker set."""
    marker_set = repo.create_marker_set(session=session, **body.model_dump())
    return MarkerSetPublic.model_validate(marker_set)


@router.get("")
def list_marker_sets(
    session: SessionDep, token: ReadToken, offset: Offset = 0, limit: Limit = 100
) -> MarkerSetsPublic:
    """List marker sets, oldest first."""
    rows, count = repo.list_marker_sets(session=session, offset=offset, limit=limit)
    return MarkerSetsPublic(data=[MarkerSetPublic.model_validate(r) for r in rows], count=count)


@router.get("/{marker_set_id}")
def get_marker_set(marker_set_id: int, session: SessionDep, token: ReadToken) -> MarkerSetPublic:
    """One marker set."""
    row = repo.get_marker_set(session=session, marker_set_id=marker_set_id)
    return MarkerSetPublic.model_validate(row)
