"""Tokens and scopes: every route but /healthz needs a token, and the right scope."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from fastapi.routing import APIRoute
from fastapi.testclient import TestClient
from sqlalchemy import text

from service.app import create_app
from service.dashboard import PAGE_PATHS
from service.deps import FailedAuthLimiter
from service.settings import get_settings
from storage import repo

# The interactive docs and their own script and style files (served by gaitscape, no CDN).
OPEN_PATHS = {
    "/healthz",
    "/openapi.json",
    "/docs",
    "/docs/oauth2-redirect",
    "/favicon.ico",  # an empty 204: browsers ask for it on every page
    "/redoc",
    "/docs/static/{name}",
}
# Dashboard HTML shells and static assets hold no data (a followed link cannot carry a Bearer
# header); every data call they make goes to /v1 with the token and is checked below.
OPEN_PATHS |= PAGE_PATHS
SHA = "ab" * 32


def make_app(tmp_path: Path, **overrides):
    return create_app(get_settings(data_dir=tmp_path / "data", **overrides))


def make_token(app, *scopes: str, label: str = "") -> str:
    with app.state.sessionmaker() as session:
        _, secret = repo.create_token(session=session, scopes=list(scopes), label=label)
    return secret


def bearer(secret: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {secret}"}


def _required_scope(route: APIRoute) -> str | None:
    """The scope a route's dependencies demand (deps.require_scope names its checks)."""
    stack = list(route.dependant.dependencies)
    while stack:
        dep = stack.pop()
        name = getattr(dep.call, "__name__", "")
        if name.startswith("require_"):
            return name.removeprefix("require_")
        stack.extend(dep.dependencies)
    return None


def _walk(routes, prefix: str = ""):
    """(full path, APIRoute) for every route; recent FastAPI keeps included routers nested."""
    for route in routes:
        inner = getattr(route, "original_router", None)
        if inner is not None:
            context = getattr(route, "include_context", None)
            yield from _walk(inner.routes, prefix + getattr(context, "prefix", ""))
        elif isinstance(route, APIRoute):
            yield prefix + route.path, route


def _api_routes(app) -> list[tuple[str, str, APIRoute]]:
    out = []
    walked = {full for full, _ in _walk(app.routes)}
    # The walk must see every documented path, so no route escapes the check.
    assert walked >= set(app.openapi()["paths"])
    for full, route in _walk(app.routes):
        if full in OPEN_PATHS:
            continue
        path = re.sub(r"\{sha256\}", SHA, full)
        path = re.sub(r"\{[^}]+\}", "1", path)
        for method in sorted(route.methods):
            out.append((method, path, route))
    return out


@pytest.fixture
def app(tmp_path: Path):
    return make_app(tmp_path)


def test_route_walk_without_token_is_401(tmp_path: Path) -> None:
    # Each wrong token counts as a failed authentication: lift the limit for the walk.
    app = make_app(tmp_path, auth_failure_limit=10_000)
    client = TestClient(app)
    routes = _api_routes(app)
    assert len(routes) >= 15  # the walk saw the API, not an empty table
    for method, path, _ in routes:
        response = client.request(method, path)
        assert response.status_code == 401, (method, path, response.status_code)
        assert response.headers.get("www-authenticate") == "Bearer"
        bad = client.request(method, path, headers=bearer("not-a-token"))
        assert bad.status_code == 401, (method, path)
    assert client.get("/healthz").status_code == 200


# Routes any valid token may call: they say what the token itself may do, nothing more.
ANY_TOKEN_PATHS = {"/v1/dashboard/whoami"}


def test_route_walk_wrong_scope_is_403(tmp_path: Path) -> None:
    app = make_app(tmp_path)
    client = TestClient(app)
    tokens = {scope: make_token(app, scope) for scope in ("read", "upload", "analyse")}
    for method, path, route in _api_routes(app):
        if path in ANY_TOKEN_PATHS:
            for secret in tokens.values():  # answers every scope, with that token's scopes
                body = client.request(method, path, headers=bearer(secret)).json()
                assert body["scopes"] and set(body["scopes"]) <= {"read", "upload", "analyse"}
            continue
        scope = _required_scope(route)
        assert scope is not None, f"{method} {path} checks no scope"
        allowed = scope.split("_or_")  # deps.require_any_scope names "read_or_upload"
        other = next(s for s in ("read", "upload", "analyse") if s not in allowed)
        response = client.request(method, path, headers=bearer(tokens[other]))
        assert response.status_code == 403, (method, path, scope, response.status_code)
        if method != "HEAD":  # HEAD answers carry no body
            assert all(s in response.json()["detail"] for s in allowed)


def test_admin_implies_every_scope(app) -> None:
    client = TestClient(app)
    admin = bearer(make_token(app, "admin"))
    assert (
        client.post("/v1/arenas", json={"name": "a", "kind": "runway"}, headers=admin).status_code
        == 201
    )
    assert client.get("/v1/arenas", headers=admin).status_code == 200
    assert client.get("/v1/tokens", headers=admin).status_code == 200


def test_read_token_cannot_upload(app) -> None:
    client = TestClient(app)
    read = bearer(make_token(app, "read"))
    files = {"file": ("t.csv", b"time,a_x,a_y,a_z\n0,1,2,3\n")}
    response = client.post("/v1/trials", files=files, data={"meta": "{}"}, headers=read)
    assert response.status_code == 403
    assert client.post("/v1/arenas", json={"name": "a"}, headers=read).status_code == 403
    assert client.get("/v1/arenas", headers=read).status_code == 200


def test_token_routes_create_list_revoke(app) -> None:
    client = TestClient(app)
    admin = bearer(make_token(app, "admin", label="boss"))
    created = client.post("/v1/tokens", json={"scopes": ["read"], "label": "laptop"}, headers=admin)
    assert created.status_code == 201
    body = created.json()
    secret, token_id = body["token"], body["id"]
    assert body["scopes"] == ["read"]
    assert client.get("/v1/arenas", headers=bearer(secret)).status_code == 200
    listing = client.get("/v1/tokens", headers=admin).json()
    assert {t["label"] for t in listing["data"]} == {"boss", "laptop"}
    assert secret not in created.text.replace(secret, "", 1)  # shown once, in the one field
    assert secret not in str(listing)
    revoked = client.delete(f"/v1/tokens/{token_id}", headers=admin)
    assert revoked.status_code == 200 and revoked.json()["revoked_at"] is not None
    assert client.get("/v1/arenas", headers=bearer(secret)).status_code == 401
    assert client.delete("/v1/tokens/9999", headers=admin).status_code == 404
    unknown = client.post("/v1/tokens", json={"scopes": ["root"]}, headers=admin)
    assert unknown.status_code == 422


def test_only_hashes_are_stored(app) -> None:
    secret = make_token(app, "read")
    with app.state.engine.connect() as conn:
        rows = conn.execute(text("SELECT * FROM token")).fetchall()
    assert rows
    assert all(secret not in str(value) for row in rows for value in row)


def test_failed_authentication_is_rate_limited(tmp_path: Path) -> None:
    app = make_app(tmp_path, auth_failure_limit=3, auth_failure_window_s=60)
    client = TestClient(app)
    good = bearer(make_token(app, "read"))
    assert client.get("/v1/arenas", headers=good).status_code == 200
    for _ in range(3):
        assert client.get("/v1/arenas", headers=bearer("guess")).status_code == 401
    blocked = client.get("/v1/arenas", headers=bearer("guess"))
    assert blocked.status_code == 429
    assert int(blocked.headers["retry-after"]) >= 1
    assert blocked.json()["detail"].startswith("Too many failed authentications")
    # A valid token from the same address is never refused for others' failures.
    assert client.get("/v1/arenas", headers=good).status_code == 200
    assert client.get("/healthz").status_code == 200


def test_forwarded_for_is_ignored_without_trusted_proxies(tmp_path: Path) -> None:
    # 30 guesses, each claiming another address: all count against the real peer.
    app = make_app(tmp_path, auth_failure_limit=5)
    client = TestClient(app)
    codes = [
        client.get(
            "/v1/arenas", headers={**bearer("guess"), "X-Forwarded-For": f"10.9.{i}.1"}
        ).status_code
        for i in range(30)
    ]
    assert codes[:5] == [401] * 5 and set(codes[5:]) == {429}


def test_forwarded_for_is_believed_from_a_trusted_proxy(tmp_path: Path) -> None:
    # TestClient's peer is "testclient"; as a proxy we trust, name it by a network that
    # holds it: the Starlette test client reports host "testclient", which is no address, so
    # the app is given a peer through a raw ASGI scope instead.
    from starlette.requests import Request

    from service.deps import client_ip

    app = make_app(tmp_path, trusted_proxies=["10.0.0.0/8"])

    def request(peer: str, forwarded: str | None) -> Request:
        headers = [(b"x-forwarded-for", forwarded.encode())] if forwarded else []
        scope = {"type": "http", "app": app, "client": (peer, 1234), "headers": headers}
        return Request(scope)

    # From the proxy: the right-most address that is not a proxy is the client.
    assert client_ip(request("10.0.0.2", "203.0.113.9, 10.0.0.7")) == "203.0.113.9"
    # A client that forges the header in front of the proxy gets its real address.
    assert client_ip(request("10.0.0.2", "1.1.1.1, 198.51.100.4")) == "198.51.100.4"
    # From anyone else the header is ignored.
    assert client_ip(request("198.51.100.4", "10.0.0.9")) == "198.51.100.4"
    assert client_ip(request("10.0.0.2", None)) == "10.0.0.2"


def test_trusted_proxies_setting_is_checked() -> None:
    with pytest.raises(ValueError, match="trusted_proxies"):
        get_settings(trusted_proxies=["not-an-address"])
    assert get_settings(trusted_proxies="127.0.0.1, 10.0.0.0/8").trusted_proxies == [
        "127.0.0.1",
        "10.0.0.0/8",
    ]


def test_blocked_proxy_address_does_not_lock_out_the_lab(tmp_path: Path) -> None:
    # Behind a proxy every client shares one address: one client's bad guesses make its own
    # failing requests 429, and every valid token keeps working.
    app = make_app(tmp_path, auth_failure_limit=2)
    client = TestClient(app)
    tokens = [bearer(make_token(app, "read")) for _ in range(3)]
    for _ in range(20):
        client.get("/v1/arenas", headers=bearer("wrong"))
    assert all(client.get("/v1/arenas", headers=t).status_code == 200 for t in tokens)


def test_analyse_token_reads_the_jobs_it_starts(tmp_path: Path) -> None:
    app = make_app(tmp_path, job_runner=False)
    client = TestClient(app)
    analyse = bearer(make_token(app, "analyse"))
    started = client.post("/v1/jobs/rescore", json={"all": True}, headers=analyse)
    assert started.status_code == 202, started.text
    assert client.get("/v1/jobs", headers=analyse).status_code == 200
    upload = bearer(make_token(app, "upload"))
    assert client.get("/v1/jobs", headers=upload).status_code == 403


def test_limiter_window_slides() -> None:
    now = [0.0]
    limiter = FailedAuthLimiter(limit=2, window_s=10.0, clock=lambda: now[0])
    limiter.record_failure("1.2.3.4")
    now[0] = 5.0
    limiter.record_failure("1.2.3.4")
    assert limiter.retry_after("1.2.3.4") == pytest.approx(5.0)
    assert limiter.retry_after("5.6.7.8") is None  # per address
    now[0] = 10.5  # the first failure has left the window
    assert limiter.retry_after("1.2.3.4") is None


def test_token_list_shows_expiry_and_state(tmp_path: Path, capsys) -> None:
    from datetime import UTC, datetime, timedelta

    from service.cli import main

    data = tmp_path / "data"
    assert main(["token", "create", "--data", str(data), "--scope", "upload", "--label", "rig",
                 "--expires-days", "2"]) == 0  # fmt: skip
    app = make_app(tmp_path)
    with app.state.sessionmaker() as session:
        past = datetime.now(UTC) - timedelta(days=1)
        repo.create_token(session=session, scopes=["read"], label="old", expires_at=past)
        repo.create_token(session=session, scopes=["read"], label="forever")
    capsys.readouterr()
    assert main(["token", "list", "--data", str(data)]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0].split() == ["id", "label", "scopes", "created", "expires", "revoked", "state"]
    by_label = {line.split()[1]: line for line in lines[1:]}
    soon = (datetime.now(UTC) + timedelta(days=2)).date().isoformat()
    assert soon in by_label["rig"] and by_label["rig"].endswith("active")
    assert by_label["old"].endswith("expired") and "never" in by_label["forever"]
