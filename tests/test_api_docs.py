"""Offline API docs: /docs and /redoc load only this service's files; every parameter has a
description; the upload, query and correspondence routes carry examples.

Outside reference: the OpenAPI Specification 3.1 (Parameter Object: ``description``; Media
Type Object: ``example``) and the HTML Living Standard (a ``src``/``href`` without a scheme
and host loads from the page's own origin).
"""

from __future__ import annotations

import re

import pytest
from fastapi.testclient import TestClient

from service.app import create_app
from service.settings import get_settings


@pytest.fixture(scope="module")
def client(tmp_path_factory: pytest.TempPathFactory) -> TestClient:
    app = create_app(get_settings(data_dir=tmp_path_factory.mktemp("docs"), job_runner=False))
    return TestClient(app)


@pytest.mark.parametrize("page", ["/docs", "/redoc"])
def test_docs_pages_load_nothing_from_another_origin(client: TestClient, page: str) -> None:
    r = client.get(page)
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/html")
    refs = re.findall(r'(?:src|href)="([^"]+)"', r.text)
    assert refs, r.text
    assert all(ref.startswith("/") and not ref.startswith("//") for ref in refs), refs
    assert "<script>" not in r.text  # no inline script: works under script-src 'self'
    for ref in refs:
        asset = client.get(ref)
        assert asset.status_code == 200, ref
        assert len(asset.content) > 100, ref


def test_unknown_docs_asset_is_404(client: TestClient) -> None:
    assert client.get("/docs/static/..%2Fapi_docs.py").status_code == 404
    assert client.get("/docs/static/app.js").status_code == 404


def test_every_parameter_is_described(client: TestClient) -> None:
    spec = client.get("/openapi.json").json()
    bare = [
        (path, method, prm["name"])
        for path, item in spec["paths"].items()
        for method, op in item.items()
        for prm in op.get("parameters", [])
        if not (prm.get("description") or prm.get("schema", {}).get("description"))
    ]
    assert bare == []


@pytest.mark.parametrize(
    ("method", "path"),
    [
        ("post", "/v1/trials"),
        ("post", "/v1/arenas/{arena_id}/scans"),
        ("get", "/v1/scores"),
        ("get", "/v1/export/scores"),
        ("get", "/v1/correspondence"),
    ],
)
def test_examples_for_upload_query_and_correspondence(
    client: TestClient, method: str, path: str
) -> None:
    op = client.get("/openapi.json").json()["paths"][path][method]
    assert "example" in str(op.get("requestBody", {})) or "example" in str(op["responses"])
