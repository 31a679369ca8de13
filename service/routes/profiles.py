"""Analysis profiles: named, immutable, versioned parameter sets."""

from __future__ import annotations

from fastapi import APIRouter, Response, status

from service.deps import AnalyseToken, ReadToken, SessionDep
from service.pipeline import complete_parameters
from service.routes.arenas import Limit, Offset
from service.schemas import ProfileCreate, ProfileCreated, ProfilePublic, ProfilesPublic
from storage import repo

router = APIRouter(prefix="/profiles", tags=["profiles"])


@router.post("", status_code=status.HTTP_201_CREATED)
def create_profile(
    body: ProfileCreate, response: Response, session: SessionDep, token: AnalyseToken
) -> ProfileCreated:
    """Add a version of a profile (201); equal parameters return the latest version (200)."""
    parameters = complete_parameters(body.parameters)
    profile, created = repo.create_profile(session=session, name=body.name, parameters=parameters)
    if not created:
        response.status_code = status.HTTP_200_OK
    return ProfileCreated.model_validate({**_public(profile), "created": created})


def _public(profile: object) -> dict:
    return ProfilePublic.model_validate(profile).model_dump()


@router.get("")
def list_profiles(
    session: SessionDep, token: ReadToken, offset: Offset = 0, limit: Limit = 100
) -> ProfilesPublic:
    """Every version of every profile, oldest first."""
    rows, count = repo.list_profiles(session=session, offset=offset, limit=limit)
    return ProfilesPublic(data=[ProfilePublic.model_validate(r) for r in rows], count=count)


@router.get("/{name}")
def get_profile(
    name: str, session: SessionDep, token: ReadToken, version: int | None = None
) -> ProfilePublic:
    """Profile ``name`` at ``version`` (the latest by default)."""
    return ProfilePublic.model_validate(
        repo.get_profile(session=session, name=name, version=version)
    )
