"""Request dependencies, written once: session, store, settings, token and scope checks.

Visibility is lab-wide: any token with the ``read`` scope sees every record. The ``*_for_token``
dependencies are the one place to narrow that later (per-project tokens, say).
"""

from __future__ import annotations

import functools
import ipaddress
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
from storage.models import TOKEN_SCOPES

__all__ = [
    "SCOPES",
    "AdminToken",
    "AnyToken",
    "FailedAuthLimiter",
    "ReadOrAnalyseToken",
    "ReadOrUploadToken",
    "ReadToken",
    "SessionDep",
    "SettingsDep",
    "StoreDep",
    "TokenDep",
    "UploadToken",
    "client_ip",
    "require_any_scope",
    "require_scope",
    "token_scopes",
]

SCOPES = TOKEN_SCOPES


class FailedAuthLimiter:
    """Sliding-window count of failed authentications per client IP, kept in memory.

    A failure is a presented token that is unknown, revoked or expired (a missing header is not
    counted: it guesses nothing). Past ``limit`` failures within ``window_s`` seconds, further
    *failing* requests from that address get HTTP 429 instead of 401 until its oldest failure
    leaves the window. A valid token is always accepted, whatever the count for its address:
    behind a proxy or NAT many clients share one address, and one client's bad guesses must not
    lock out the rest of the lab. (Tokens carry 256 random bits, so the limiter is there to slow
    scans and keep logs readable, not to make guessing feasible-but-slow.) The client address is
    the peer's, or taken from ``X-Forwarded-For`` only when the peer is one of
    ``trusted_proxies``. Per process: with several server processes, rate-limit at the proxy too.
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
    # app.state is untyped; the app factory stores a Settings here.
    settings: Settings = request.app.state.settings
    return settings


def get_session(request: Request) -> Iterator[Session]:
    with request.app.state.sessionmaker() as session:
        yield session


def get_store(request: Request) -> ArtifactStore:
    store: ArtifactStore = request.app.state.store
    return store


SettingsDep = Annotated[Settings, Depends(get_settings_dep)]
SessionDep = Annotated[Session, Depends(get_session)]
StoreDep = Annotated[ArtifactStore, Depends(get_store)]

_bearer = HTTPBearer(auto_error=False, description="A gaitscape API token: `Bearer TOKEN`.")


@functools.lru_cache(maxsize=64)
def _networks(
    proxies: tuple[str, ...],
) -> tuple[ipaddress.IPv4Network | ipaddress.IPv6Network, ...]:
    return tuple(ipaddress.ip_network(p, strict=False) for p in proxies)


def _trusted(address: str, networks: tuple[Any, ...]) -> bool:
    try:
        ip = ipaddress.ip_address(address)
    except ValueError:
        return False
    return any(ip in net for net in networks)


def client_ip(request: Request) -> str:
    """The client's address: the peer's, unless the peer is a trusted proxy.

    Behind trusted proxies, ``X-Forwarded-For`` is read from the right (each proxy appends the
    address it saw) and the first address that is not itself a trusted proxy is the client.
    From any other peer the header is ignored, so a client cannot pick its own address.
    """
    peer = request.client.host if request.client else "unknown"
    settings = getattr(request.app.state, "settings", None)
    proxies = tuple(getattr(settings, "trusted_proxies", None) or ())
    if not proxies:
        return peer
    networks = _networks(proxies)
    if not _trusted(peer, networks):
        return peer
    chain = [
        part.strip()
        for header in request.headers.getlist("x-forwarded-for")
        for part in header.split(",")
        if part.strip()
    ]
    for address in reversed(chain):
        if not _trusted(address, networks):
            return address[:64]
    return chain[0][:64] if chain else peer


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
    """The token row behind ``Authorization: Bearer TOKEN``; 401 without a valid one, 429 for
    a failing request from an address past the failure limit (a valid token always passes)."""
    if credentials is None or not credentials.credentials:
        raise _unauthorized("Missing token: send 'Authorization: Bearer TOKEN'.")
    token = repo.authenticate(session=session, secret=credentials.credentials)
    if token is not None:
        return token
    limiter: FailedAuthLimiter = request.app.state.auth_limiter
    ip = client_ip(request)
    wait = limiter.retry_after(ip)
    if wait is not None:
        raise HTTPException(
            status_code=status.HTTP_429_TOO_MANY_REQUESTS,
            detail="Too many failed authentications from this address; try again later.",
            headers={"Retry-After": str(int(wait) + 1)},
        )
    limiter.record_failure(ip)
    raise _unauthorized("Invalid, revoked or expired token.")


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


def require_any_scope(*scopes: str) -> Callable[..., Any]:
    """A dependency that passes the token through if it carries one of ``scopes``."""
    unknown = [s for s in scopes if s not in SCOPES]
    if unknown or not scopes:
        raise ValueError(f"unknown scopes {unknown}; allowed {SCOPES}")

    def check(token: TokenDep) -> Any:
        if not set(scopes) & token_scopes(token):
            names = " or ".join(repr(s) for s in scopes)
            raise HTTPException(
                status_code=status.HTTP_403_FORBIDDEN,
                detail=f"This token lacks the {names} scope.",
            )
        return token

    check.__name__ = "require_" + "_or_".join(scopes)
    return check


ReadToken = Annotated[Any, Depends(require_scope("read"))]
ReadOrUploadToken = Annotated[Any, Depends(require_any_scope("read", "upload"))]
ReadOrAnalyseToken = Annotated[Any, Depends(require_any_scope("read", "analyse"))]
UploadToken = Annotated[Any, Depends(require_scope("upload"))]
AnalyseToken = Annotated[Any, Depends(require_scope("analyse"))]
AdminToken = Annotated[Any, Depends(require_scope("admin"))]
