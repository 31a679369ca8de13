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
    assert body["parameters"]["heightmap"]["dx_m"] is None  # from the cloud's point spacing
    # Hash: SHA-256 (FIPS 180-4, via hashlib) of the canonical JSON (sorted keys, no spaces).
    canonical = json.dumps(body["parameters"], sort_keys=True, separators=(",", ":"))
    assert body["hash"] == hashlib.sha256(canonical.encode()).hexdigest()


def test_versions_are_immutable_and_equal_parameters_reuse_the_latest(app) -> None:
    c = client_for(app, ["analyse", "read"])
    first = c.post(
        "/v1/recipes", json={"name": "fine", "parameters": {"heightmap": {"dx_m": 0.0005}}}
    )
    assert first.status_code == 201 and first.json()["version"] == 1
    same = c.post(
        "/v1/recipes", json={"name": "fine", "parameters": {"heightmap": {"dx_m": 0.0005}}}
    )
    assert same.status_code == 200 and same.json()["version"] == 1 and not same.json()["created"]
    second = c.post(
        "/v1/recipes", json={"name": "fine", "parameters": {"terrain": {"n_surrogates": 39}}}
    )
    assert second.status_code == 201 and second.json()["version"] == 2
    assert second.json()["parameters"]["heightmap"]["dx_m"] is None  # v2 starts from defaults
    v1 = c.get("/v1/recipes/fine", params={"version": 1}).json()
    assert v1["parameters"]["heightmap"]["dx_m"] == 0.0005 and v1["hash"] == first.json()["hash"]
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


def _with_legacy_names(parameters: dict) -> dict:
    """``parameters`` as an earlier release stored them (LEGACY_NAMES run backwards)."""
    from service.pipeline.recipes import LEGACY_NAMES

    out = json.loads(json.dumps(parameters))
    for section, names in LEGACY_NAMES.items():
        for old, new in names.items():
            sec = out[section]
            sec[old] = None if new is None else sec.pop(new)
    return out


def test_legacy_names_map_onto_todays_defaults() -> None:
    from service.pipeline.recipes import LEGACY_NAMES, default_parameters

    defaults = default_parameters()
    for section, names in LEGACY_NAMES.items():
        for old, new in names.items():
            assert old not in defaults[section], f"{section}.{old} is still a current name"
            assert new is None or new in defaults[section], f"{section}.{new} is not a parameter"


def test_a_recipe_stored_under_old_names_keeps_its_hash_and_reads_with_new_names(app) -> None:
    # A store from before the renames: the default recipe's JSON under the old names. Its hash
    # (the key of its scores and jobs) must not change; jobs and views read today's names.
    from service.pipeline.recipes import current_parameters, default_parameters, resolve_recipe
    from storage.repo.scores import recipe_hash

    old = _with_legacy_names(default_parameters())
    with app.state.sessionmaker() as session:
        stored, created = repo.create_recipe(session=session, name="early", parameters=old)
        assert created and stored.hash == recipe_hash(old)
        again = resolve_recipe(session, stored.hash)
        assert again.id == stored.id and again.parameters == old
        assert current_parameters(again.parameters) == default_parameters()


def test_posting_old_names_stores_todays(app) -> None:
    c = client_for(app, ["analyse", "read"])
    r = c.post("/v1/recipes", json={"name": "old", "parameters": {"heightmap": {"cell_m": 0.002}}})
    assert r.status_code == 201, r.text
    heightmap = r.json()["parameters"]["heightmap"]
    assert heightmap["dx_m"] == 0.002 and "cell_m" not in heightmap
