"""API tokens: the secret is shown once; only its sha256 is stored."""

from __future__ import annotations

import hashlib
import hmac
import secrets
from collections.abc import Iterable
from datetime import datetime

from sqlalchemy import select
from sqlalchemy.orm import Session

from storage.errors import BadInput, Conflict
from storage.models import TOKEN_SCOPES, Token, utcnow
from storage.repo._common import get_or_404, paginate

__all__ = [
    "TOKEN_PREFIX",
    "authenticate",
    "create_token",
    "get_token",
    "hash_secret",
    "list_tokens",
    "revoke_token",
]

TOKEN_PREFIX = "gaitscape_"


def hash_secret(secret: str) -> str:
    """sha256 hex digest of a token secret."""
    return hashlib.sha256(secret.encode("utf-8")).hexdigest()


def _scopes(scopes: Iterable[str] | str) -> str:
    items = scopes.split(",") if isinstance(scopes, str) else list(scopes)
    clean = sorted({s.strip() for s in items if s and s.strip()})
    bad = [s for s in clean if s not in TOKEN_SCOPES]
    if not clean or bad:
        raise BadInput(f"scopes must be among {', '.join(TOKEN_SCOPES)}, got {list(items)!r}")
    return ",".join(clean)


def create_token(
    *,
    session: Session,
    scopes: Iterable[str] | str,
    label: str = "",
    expires_at: datetime | None = None,
) -> tuple[Token, str]:
    """A new token and its secret (``gaitscape_`` + 43 url-safe characters; shown only now)."""
    if expires_at is not None and expires_at.tzinfo is None:
        raise BadInput("expires_at must be timezone-aware")
    secret = TOKEN_PREFIX + secrets.token_urlsafe(32)
    token = Token(
        label=(label or "").strip(),
        scopes=_scopes(scopes),
        prefix=secret[:14],
        secret_sha256=hash_secret(secret),
        expires_at=expires_at,
    )
    session.add(token)
    session.commit()
    session.refresh(token)
    return token, secret


def authenticate(*, session: Session, secret: str | None) -> Token | None:
    """The active token for ``secret``; None when unknown, revoked or expired."""
    if not secret or not isinstance(secret, str) or len(secret) > 200:
        return None
    digest = hash_secret(secret)
    token = session.scalar(select(Token).where(Token.secret_sha256 == digest))
    # Compare digests in constant time (the lookup narrows, the compare decides).
    if token is None or not hmac.compare_digest(token.secret_sha256, digest):
        return None
    return token if token.active else None


def get_token(*, session: Session, token_id: int) -> Token:
    """The token row or NotFound."""
    return get_or_404(session, Token, token_id, "token")


def revoke_token(*, session: Session, token_id: int) -> Token:
    """Revoke a token now; Conflict if it was revoked already."""
    token = get_token(session=session, token_id=token_id)
    if token.revoked_at is not None:
        raise Conflict(f"token {token_id} is already revoked")
    token.revoked_at = utcnow()
    session.commit()
    return token


def list_tokens(
    *, session: Session, include_revoked: bool = False, offset: int = 0, limit: int = 100
) -> tuple[list[Token], int]:
    """Tokens by id (never their secrets)."""
    stmt = select(Token).order_by(Token.id)
    if not include_revoked:
        stmt = stmt.where(Token.revoked_at.is_(None))
    return paginate(session, stmt, offset=offset, limit=limit)
