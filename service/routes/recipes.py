"""Analysis recipes: named, immutable, versioned parameter sets."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Response, status

from service.deps import AnalyseToken, ReadToken, SessionDep
from service.pipeline import complete_parameters
from service.routes.arenas import Limit, Offset
from service.schemas import RecipeCreate, RecipeCreated, RecipePublic, RecipesPublic
from storage import repo

router = APIRouter(prefix="/recipes", tags=["recipes"])


@router.post("", status_code=status.HTTP_201_CREATED)
def create_recipe(
    body: RecipeCreate, response: Response, session: SessionDep, token: AnalyseToken
) -> RecipeCreated:
    """Add a version of a recipe (201); equal parameters return the latest version (200)."""
    parameters = complete_parameters(body.parameters)
    recipe, created = repo.create_recipe(session=session, name=body.name, parameters=parameters)
    if not created:
        response.status_code = status.HTTP_200_OK
    return RecipeCreated.model_validate({**_public(recipe), "created": created})


def _public(recipe: object) -> dict[str, Any]:
    return RecipePublic.model_validate(recipe).model_dump()


@router.get("")
def list_recipes(
    session: SessionDep, token: ReadToken, offset: Offset = 0, limit: Limit = 100
) -> RecipesPublic:
    """Every version of every recipe, oldest first."""
    rows, count = repo.list_recipes(session=session, offset=offset, limit=limit)
    return RecipesPublic(data=[RecipePublic.model_validate(r) for r in rows], count=count)


@router.get("/{name}")
def get_recipe(
    name: str, session: SessionDep, token: ReadToken, version: int | None = None
) -> RecipePublic:
    """Recipe ``name`` at ``version`` (the latest by default)."""
    return RecipePublic.model_validate(repo.get_recipe(session=session, name=name, version=version))
