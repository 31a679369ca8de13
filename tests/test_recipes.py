"""Recipes over HTTP: default on start, versions, canonical-JSON hash, validation, scopes."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

import measures
from service.app import create_app
from service.settings import get_settings
from storage import repo


def client_for(app, scopes):
    with app.state.sessionmaker() as session:
        _, secret = repo.create_token(session=session, scopes=scopes)
    return TestClient(app, headers={"Authorization": f"Bearer {secret}"})


@pytest.fixture
def app(tmp_path: Path):
    return create_app(get_settings(data_dir=tmp_path / "data", job_runner=False))


def test_default_recipe_exists_with_every_default(app) -> None:
    body = client_for(app, ["read"]).get("/v1/recipes/default").json()
    assert body["version"] == 1
    # Stored in full: the JSON form of the measures' own defaults (tuples become lists).
    assert body["parameters"]["movement"] == json.loads(json.dumps(measures.MOVEMENT_DEFAULTS))
    assert body["parameters"]["terrain"] == json.loads(json.dumps(measures.TERRAIN_DEFAULTS))
    assert body["parameters"]["heightmap"]["cell_m"] is None  # from the cloud's point spacing
    # Hash: SHA-256 (FIPS 180-4, via hashlib) of the canonical JSON (sorted keys, no spaces).
    canonical = json.dumps(body["parameters"], sort_keys=True, separators=(",", ":"))
    assert body["hash"] == hashlib.sha256(canonical.encode()).hexdigest()


def test_versions_are_immutable_and_equal_parameters_reuse_the_latest(app) -> None:
    c = client_for(app, ["analyse", "read"])
    first = c.post(
        "/v1/recipes", json={"name": "fine", "parameters": {"heightmap": {"cell_m": 0.0005}}}
    )
    assert first.status_code == 201 and first.json()["version"] == 1
    same = c.post(
        "/v1/recipes", json={"name": "fine", "parameters": {"heightmap": {"cell_m": 0.0005}}}
    )
    assert same.status_code == 200 and same.json()["version"] == 1 and not same.json()["created"]
    second = c.post(
        "/v1/recipes", json={"name": "fine", "parameters": {"terrain": {"n_surrogates": 39}}}
    )
    assert second.status_code == 201 and second.json()["version"] == 2
    assert second.json()["parameters"]["heightmap"]["cell_m"] is None  # v2 starts from defaults
    v1 = c.get("/v1/recipes/fine", params={"version": 1}).json()
    assert v1["parameters"]["heightmap"]["cell_m"] == 0.0005 and v1["hash"] == first.json()["hash"]
    assert c.get("/v1/recipes/fine").json()["version"] == 2
    listed = c.get("/v1/recipes").json()
    assert listed["count"] == 3  # default v1, fine v1, fine v2
    assert c.get("/v1/recipes/nope").status_code == 404


@pytest.mark.parametrize(
    ("parameters", "named"),
    [
        ({"walking": {}}, "walking"),
        ({"movement": {"rqa_radius": 1}}, "movement.rqa_radius"),
        ({"terrain": {"n_surrogates": "many"}}, "terrain.n_surrogates"),
        ({"movement": {"remove_spikes": 1}}, "movement.remove_spikes"),
    ],
)
def test_bad_parameters_are_refused_naming_the_key(app, parameters, named) -> None:
    r = client_for(app, ["analyse"]).post(
        "/v1/recipes", json={"name": "x", "parameters": parameters}
    )
    assert r.status_code == 422 and named in r.json()["detail"]


def test_creating_a_recipe_needs_the_analyse_scope(app) -> None:
    r = client_for(app, ["read", "upload"]).post("/v1/recipes", json={"name": "x"})
    assert r.status_code == 403
