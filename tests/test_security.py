"""Security properties: tokens at rest and in use, headers, request ids and logs, body caps,
CORS, no pickle on the upload path."""

from __future__ import annotations

import json
import logging
import re
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest
from fastapi import FastAPI
from fastapi.responses import HTMLResponse
from fastapi.testclient import TestClient
from test_api import Lab
from test_auth import bearer, make_app, make_token

from service.cli import main
from service.security import HardeningMiddleware, JsonLogFormatter
from storage import repo

REPO_ROOT = Path(__file__).resolve().parents[1]


def test_secret_never_reaches_the_database_files(tmp_path: Path) -> None:
    app = make_app(tmp_path)
    secret = make_token(app, "read")
    assert TestClient(app).get("/v1/arenas", headers=bearer(secret)).status_code == 200
    blobs = b"".join(p.read_bytes() for p in (tmp_path / "data").glob("gaitscape.sqlite*"))
    assert secret.encode() not in blobs and secret[4:].encode() not in blobs
    with app.state.sessionmaker() as session:
        (token,), _ = repo.list_tokens(session=session)
        assert token.secret_sha256 != secret and len(token.secret_sha256) == 64


def test_comparison_is_constant_time(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import storage.repo.tokens as tokens

    calls = []
    real = tokens.hmac.compare_digest

    def spy(a, b):
        calls.append((a, b))
        return real(a, b)

    monkeypatch.setattr(tokens.hmac, "compare_digest", spy)
    app = make_app(tmp_path)
    secret = make_token(app, "read")
    assert TestClient(app).get("/v1/arenas", headers=bearer(secret)).status_code == 200
    assert calls, "authenticate must compare digests with hmac.compare_digest"


def test_expired_and_revoked_tokens_fail(tmp_path: Path) -> None:
    app = make_app(tmp_path)
    client = TestClient(app)
    with app.state.sessionmaker() as session:
        past = datetime.now(UTC) - timedelta(seconds=1)
        _, expired = repo.create_token(session=session, scopes=["read"], expires_at=past)
        soon = datetime.now(UTC) + timedelta(days=1)
        row, valid = repo.create_token(session=session, scopes=["read"], expires_at=soon)
    assert client.get("/v1/arenas", headers=bearer(expired)).status_code == 401
    assert client.get("/v1/arenas", headers=bearer(valid)).status_code == 200
    with app.state.sessionmaker() as session:
        repo.revoke_token(session=session, token_id=row.id)
    assert client.get("/v1/arenas", headers=bearer(valid)).status_code == 401


def test_cli_token_expires_days(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    data = tmp_path / "data"
    assert (
        main(["token", "create", "--data", str(data), "--scope", "read", "--expires-days", "2"])
        == 0
    )
    secret = capsys.readouterr().out.strip()
    assert re.fullmatch(r"gaitscape_\S+", secret)
    app = make_app(tmp_path)
    with app.state.sessionmaker() as session:
        token = repo.authenticate(session=session, secret=secret)
        expires = token.expires_at.replace(tzinfo=token.expires_at.tzinfo or UTC)
    assert (
        timedelta(days=2) - timedelta(minutes=5) < expires - datetime.now(UTC) <= timedelta(days=2)
    )
    with pytest.raises(SystemExit):
        main(["token", "create", "--data", str(data), "--scope", "read", "--expires-days", "-1"])


def test_security_headers_and_request_id(tmp_path: Path) -> None:
    lab = Lab(tmp_path)
    response = lab.client.get("/v1/arenas")
    assert response.headers["x-content-type-options"] == "nosniff"
    assert response.headers["x-frame-options"] == "DENY"
    assert response.headers["referrer-policy"] == "no-referrer"
    assert response.headers["cache-control"] == "no-store"
    assert re.fullmatch(r"[0-9a-f]{32}", response.headers["x-request-id"])
    kept = lab.client.get("/v1/arenas", headers={"X-Request-ID": "acq-pc-7.42"})
    assert kept.headers["x-request-id"] == "acq-pc-7.42"
    hostile = lab.client.get("/v1/arenas", headers={"X-Request-ID": "a\tb" + "x" * 100})
    assert re.fullmatch(r"[0-9a-f]{32}", hostile.headers["x-request-id"])


def test_html_pages_get_a_content_security_policy() -> None:
    app = FastAPI()

    @app.get("/page", response_class=HTMLResponse)
    def page() -> str:
        return "<p>hello</p>"

    @app.get("/own", response_class=HTMLResponse)
    def own() -> HTMLResponse:
        return HTMLResponse("<p>x</p>", headers={"Content-Security-Policy": "default-src 'none'"})

    app.add_middleware(HardeningMiddleware)
    client = TestClient(app)
    csp = client.get("/page").headers["content-security-policy"]
    assert "frame-ancestors 'none'" in csp and "script-src 'self'" in csp
    assert client.get("/own").headers["content-security-policy"] == "default-src 'none'"


def test_access_log_is_json_with_the_request_id(tmp_path: Path, caplog) -> None:
    lab = Lab(tmp_path)
    with caplog.at_level(logging.INFO, logger="gaitscape.access"):
        lab.client.get("/v1/arenas", headers={"X-Request-ID": "trace-1"})
    records = [r for r in caplog.records if r.name == "gaitscape.access"]
    entry = json.loads(JsonLogFormatter().format(records[-1]))
    assert entry["request_id"] == "trace-1" and entry["status"] == 200
    assert entry["path"] == "/v1/arenas" and entry["method"] == "GET"
    assert entry["duration_ms"] >= 0


def test_json_bodies_are_capped(tmp_path: Path) -> None:
    lab = Lab(tmp_path)
    big = json.dumps({"name": "x", "kind": "runway", "notes": "n" * (2 * 1024**2)})
    response = lab.client.post(
        "/v1/arenas", content=big, headers={"Content-Type": "application/json"}
    )
    assert response.status_code == 413 and "larger than" in response.json()["detail"]

    def chunks():  # no Content-Length: the cap must count the streamed bytes
        yield b'{"name": "y", "kind": "runway", "notes": "'
        for _ in range(40):
            yield b"n" * 65536
        yield b'"}'

    streamed = lab.client.post(
        "/v1/arenas", content=chunks(), headers={"Content-Type": "application/json"}
    )
    assert streamed.status_code == 413, streamed.text
    assert lab.count("arena") == 1  # only the Lab's own arena


def test_cors_preflight_is_refused_by_default(tmp_path: Path) -> None:
    lab = Lab(tmp_path)
    response = lab.client.options(
        "/v1/arenas",
        headers={"Origin": "https://elsewhere.example", "Access-Control-Request-Method": "GET"},
    )
    assert "access-control-allow-origin" not in response.headers


def test_no_pickle_in_service_or_storage() -> None:
    offenders = []
    for path in [*(REPO_ROOT / "service").rglob("*.py"), *(REPO_ROOT / "storage").rglob("*.py")]:
        text = path.read_text()
        if re.search(
            r"allow_pickle\s*=\s*True|^\s*import (c?pickle|dill)\b|pickle\.loads?\(", text, re.M
        ):
            offenders.append(str(path.relative_to(REPO_ROOT)))
    assert offenders == []


def test_object_npy_upload_is_refused(tmp_path: Path) -> None:
    import io

    lab = Lab(tmp_path)
    # NEP 1 layout with an object dtype and an opaque body; refused from the header alone.
    header = b"{'descr': '|O', 'fortran_order': False, 'shape': (2,), }"
    header += b" " * (64 - (10 + len(header) + 1) % 64) + b"\n"
    buf = io.BytesIO(b"\x93NUMPY\x01\x00" + len(header).to_bytes(2, "little") + header + bytes(32))
    meta = json.dumps({"units": "mm", "dx": 1.0})
    response = lab.client.post(
        f"/v1/arenas/{lab.arena_id}/scans",
        files={"file": ("z.npy", buf.getvalue())},
        data={"meta": meta},
    )
    assert response.status_code == 422, response.text
    assert lab.stored_files() == [] and lab.count("scan") == 0
