"""Tokens: API credentials (admin only). The secret is shown once, at creation."""

from __future__ import annotations

from fastapi import APIRouter, status

from service.deps import AdminToken, SessionDep
from service.routes.arenas import Limit, Offset
from service.schemas import TokenCreate, TokenCreated, TokenPublic, TokensPublic
from storage import repo

router = APIRouter(prefix="/tokens", tags=["tokens"])


@router.post("", status_code=status.HTTP_201_CREATED)
def create_token(body: TokenCreate, session: SessionDep, token: AdminToken) -> TokenCreated:
    """Create a token; the response holds its secret, which is never shown again."""
    row, secret = repo.create_token(session=session, scopes=body.scopes, label=body.label)
    return TokenCreated.model_validate(
        {**TokenPublic.model_validate(row).model_dump(), "token": secret}
    )


@router.get("")
def list_tokens(
    session: SessionDep, token: AdminToken, offset: Offset = 0, limit: Limit = 100
) -> TokensPublic:
    """List tokens (never their secrets), revoked ones included."""
    rows, count = repo.list_tokens(
        session=session, include_revoked=True, offset=offset, limit=limit
    )
    return TokensPublic(data=[TokenPublic.model_validate(r) for r in rows], count=count)


@router.delete("/{token_id}")
def revoke_token(token_id: int, session: SessionDep, token: AdminToken) -> TokenPublic:
    """Revoke a token; it fails authentication from now on."""
    return TokenPublic.model_validate(repo.revoke_token(session=session, token_id=token_id))
