"""Request dependencies, written once: session, store, settings, token and scope checks.

Visibility is lab-wide: any token with the ``read`` scope sees every record. The ``*_for_token``
dependencies are the one place to narrow that later (per-project tokens, say).
"""

from __future__ import annotations

import threading
import time
from collections import deque
from collections.abc import Callable, Iterator
from typing import Annotated, Any

from fastapi import Depends, HTTPException, Request, status
from fastapi.security import HTTPAuthorizationCredentials, HTTPBearer
from sqlalchemy.orm import Session

from service.settings import Settings
from storage import repo
from storage.artifacts import ArtifactStore

__all__ = [
    "SCOPES",
    "AdminToken",
    "AnyToken",
    "FailedAuthLimiter",
    "ReadToken",
    "SessionDep",
    "SettingsDep",
    "StoreDep",
    "TokenDep",
    "UploadToken",
    "client_ip",
    "require_scope",
    "token_scopes",
]

SCOPES = ("read", "upload", "analyse", "admin")


class FailedAuthLimiter:
    """Sliding-window count of failed authentications per client IP, kept in memory.

    A failure is a presented token that is unknown or revoked (a missing header is not counted:
    it guesses nothing). Past ``limit`` failures within ``window_s`` seconds the IP gets HTTP 429
    until its oldest failure leaves the window. Per process: behind several server processes or a
    proxy, rate-limit at the proxy as well.
    """

    def __init__(self, *, limit: int, window_s: float, clock: Callable[[], float] = time.monotonic):
        self.limit = limit
        self.window_s = window_s
        self._clock = clock
        self._failures: dict[str, deque[float]] = {}
        self._lock = threading.Lock()

    def _trim(self, ip: str, now: float) -> deque[float]:
        times = self._failures.setdefault(ip, deque())
        while times and now - times[0] > self.window_s:
            times.popleft()
        if not times:
            del self._failures[ip]
            return deque()
        return times

    def retry_after(self, ip: str) -> float | None:
        """Seconds until ``ip`` may try again, or None when it is not blocked."""
        with self._lock:
            now = self._clock()
            times = self._trim(ip, now)
            if len(times) < self.limit:
                return None
            return max(self.window_s - (now - times[0]), 0.0)

    def record_failure(self, ip: str) -> None:
        with self._lock:
            self._failures.setdefault(ip, deque()).append(self._clock())


def get_settings_dep(request: Request) -> Settings:
    return request.app.state.settings


def get_session(request: Request) -> Iterator[Session]:
    with request.app.state.sessionmaker() as session:
        yield session


def get_store(request: Request) -> ArtifactStore:
    return request.app.state.store


SettingsDep = Annotated[Settings, Depends(get_settings_dep)]
SessionDep = Annotated[Session, Depends(get_session)]
StoreDep = Annotated[ArtifactStore, Depends(get_store)]

_bearer = HTTPBearer(auto_error=False, description="A gaitscape API token: `Bearer TOKEN`.")


def client_ip(request: Request) -> str:
    return request.client.host if request.client else "unknown"


def token_scopes(token: Any) -> set[str]:
    """The scopes of a token row, with ``admin`` expanded to every scope."""
    raw = token.scopes
    if isinstance(raw, str):
        raw = raw.replace(",", " ").split()
    scopes = set(raw or ())
    if "admin" in scopes:
        scopes.update(SCOPES)
    return scopes


def _unauthorized(message: str) -> HTTPException:
    return HTTPException(
        status_code=status.HTTP_401_UNAUTHORIZED,
        detail=message,
        headers={"WWW-Authenticate": "Bearer"},
    )


def get_token(
    request: Request,
    session: SessionDep,
    credentials: Annotated[HTTPAuthorizationCredentials | None, Depends(_bearer)],
) -> Any:
    """The token row behind ``Authorization: Bearer TOKEN``; 401 without a valid one."""
    limiter: FailedAuthLimiter = request.app.state.auth_limiter
    ip = client_ip(request)
    wait = limiter.retry_after(ip)
    if wait is not None:
        raise HTTPException(
            status_code=status.HTTP_429_TOO_MANY_REQUESTS,
            detail="Too many failed authentications from this address; try again later.",
            headers={"Retry-After": str(int(wait) + 1)},
        )
    if credentials is None or not credentials.credentials:
        raise _unauthorized("Missing token: send 'Authorization: Bearer TOKEN'.")
    token = repo.authenticate(session=session, secret=credentials.credentials)
    if token is None:
        limiter.record_failure(ip)
        raise _unauthorized("Invalid or revoked token.")
    return token


TokenDep = Annotated[Any, Depends(get_token)]
AnyToken = TokenDep


def require_scope(scope: str) -> Callable[..., Any]:
    """A dependency that passes the token through if it carries ``scope`` (403 otherwise)."""
    if scope not in SCOPES:
        raise ValueError(f"unknown scope {scope!r}; allowed {SCOPES}")

    def check(token: TokenDep) -> Any:
        if scope not in token_scopes(token):
            raise HTTPException(
                status_code=status.HTTP_403_FORBIDDEN,
                detail=f"This token lacks the {scope!r} scope.",
            )
        return token

    check.__name__ = f"require_{scope}"
    return check


ReadToken = Annotated[Any, Depends(require_scope("read"))]
UploadToken = Annotated[Any, Depends(require_scope("upload"))]
AnalyseToken = Annotated[Any, Depends(require_scope("analyse"))]
AdminToken = Annotated[Any, Depends(require_scope("admin"))]
