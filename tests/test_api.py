"""The HTTP API through the real ASGI app: resources, uploads, duplicates, caps, errors."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pytest
from fastapi.testclient import TestClient
from sqlalchemy import text

from service.app import create_app
from service.settings import get_settings
from storage import repo

ROLES = {
    "anterior": "snout",
    "posterior": "tail",
    "feet": {"LF": "lf", "RF": "rf", "LH": "lh", "RH": "rh"},
}
MARKERS = ["snout", "tail", "lf", "rf", "lh", "rh"]


def wide_csv(rng: np.random.Generator, *, n_frames: int = 60, rate_hz: float = 300.0) -> bytes:
    """A small wide-form trial: time, then <marker>_x,_y,_z (mm). 300 Hz is common practice."""
    header = ["time"] + [f"{m}_{a}" for m in MARKERS for a in "xyz"]
    t = np.arange(n_frames) / rate_hz
    xyz = rng.normal(scale=5.0, size=(n_frames, len(MARKERS) * 3)) + 100.0
    lines = [",".join(header)]
    lines += [
        ",".join([f"{ti:.9f}", *(f"{v:.4f}" for v in row)]) for ti, row in zip(t, xyz, strict=True)
    ]
    return ("\n".join(lines) + "\n").encode()


def xyz_points(rng: np.random.Generator, n: int = 400) -> bytes:
    pts = np.column_stack([rng.uniform(0, 100, n), rng.uniform(0, 100, n), rng.normal(0, 1, n)])
    return "".join(f"{x:.4f} {y:.4f} {z:.4f}\n" for x, y, z in pts).encode()


class Lab:
    """An isolated app with an admin client and one arena and subject."""

    def __init__(self, tmp_path: Path, **overrides) -> None:
        self.app = create_app(get_settings(data_dir=tmp_path / "data", **overrides))
        with self.app.state.sessionmaker() as session:
            _, secret = repo.create_token(session=session, scopes=["admin"], label="test")
        self.client = TestClient(self.app, headers={"Authorization": f"Bearer {secret}"})
        self.arena_id = self.client.post(
            "/v1/arenas", json={"name": "sand", "kind": "runway"}
        ).json()["id"]
        subject = {"label": "M1", "species": "Mus musculus", "marker_roles": ROLES}
        self.subject_id = self.client.post("/v1/subjects", json=subject).json()["id"]

    def trial_meta(self, **extra) -> str:
        return json.dumps(
            {"arena_id": self.arena_id, "subject_id": self.subject_id, "units": "mm", **extra}
        )

    def post_trial(self, content: bytes, name: str = "walk.csv", meta: str | None = None):
        return self.client.post(
            "/v1/trials",
            files={"file": (name, content, "text/csv")},
            data={"meta": self.trial_meta() if meta is None else meta},
        )

    def count(self, table: str) -> int:
        with self.app.state.engine.connect() as conn:
            return conn.execute(text(f"SELECT count(*) FROM {table}")).scalar_one()

    def stored_files(self) -> list[str]:
        store = self.app.state.store
        staged = [p for p in store.tmp_dir.iterdir()]
        return list(store.iter_shas()) + [str(p) for p in staged]


@pytest.fixture
def lab(tmp_path: Path) -> Lab:
    return Lab(tmp_path)


def test_healthz_needs_no_token(lab: Lab) -> None:
    response = TestClient(lab.app).get("/healthz")
    assert response.status_code == 200 and response.json()["status"] == "ok"


def test_arenas_create_list_get(lab: Lab) -> None:
    created = lab.client.post(
        "/v1/arenas",
        json={"name": "gravel", "kind": "open field", "scale_band_m": [0.005, 0.2], "notes": "n"},
    )
    assert created.status_code == 201
    body = created.json()
    assert body["kind"] == "open_field" and body["scale_band_m"] == [0.005, 0.2]
    listing = lab.client.get("/v1/arenas", params={"limit": 1, "offset": 1}).json()
    assert listing["count"] == 2 and [a["name"] for a in listing["data"]] == ["gravel"]
    assert lab.client.get(f"/v1/arenas/{body['id']}").json()["name"] == "gravel"
    missing = lab.client.get("/v1/arenas/999")
    assert missing.status_code == 404 and "999" in missing.json()["detail"]
    dup = lab.client.post("/v1/arenas", json={"name": "gravel", "kind": "runway"})
    assert dup.status_code == 409
    bad = lab.client.post("/v1/arenas", json={"name": "x", "kind": "lake", "scale_band_m": [2, 1]})
    assert bad.status_code == 422


def test_subjects_and_marker_sets(lab: Lab) -> None:
    subject = lab.client.get(f"/v1/subjects/{lab.subject_id}").json()
    assert subject["label"] == "M1" and subject["marker_roles"]["feet"]["LH"] == "lh"
    assert lab.client.get("/v1/subjects").json()["count"] == 1
    ms = lab.client.post("/v1/marker-sets", json={"name": "quad6", "roles": ROLES})
    assert ms.status_code == 201
    assert set(ms.json()["marker_names"]) == set(MARKERS)
    assert lab.client.get(f"/v1/marker-sets/{ms.json()['id']}").status_code == 200
    no_feet = {"label": "M2", "marker_roles": {"anterior": "a", "posterior": "b", "feet": {}}}
    assert lab.client.post("/v1/subjects", json=no_feet).status_code == 422


def test_trial_upload_duplicate_download_and_job(lab: Lab, rng: np.random.Generator) -> None:
    content = wide_csv(rng)
    first = lab.post_trial(content, meta=lab.trial_meta(condition="dry"))
    assert first.status_code == 201, first.text
    body = first.json()
    assert body["sha256"] == hashlib.sha256(content).hexdigest()
    assert body["job_id"] is not None
    job = lab.client.get(f"/v1/jobs/{body['job_id']}").json()
    assert job["state"] == "queued" and job["target_id"] == body["id"]
    again = lab.post_trial(content, name="copy.csv", meta=lab.trial_meta(condition="dry"))
    assert again.status_code == 200 and again.json()["id"] == body["id"]
    assert lab.count("trial") == 1
    trial = lab.client.get(f"/v1/trials/{body['id']}").json()
    # The rate comes from the 9-decimal time column, so agreement is to ~1e-6.
    assert trial["frame_rate_hz"] == pytest.approx(300.0, rel=1e-6) and trial["n_frames"] == 60
    assert trial["condition"] == "dry" and trial["filename"] == "walk.csv"
    download = lab.client.get(f"/v1/trials/{body['id']}/file")
    assert download.status_code == 200 and download.content == content
    assert lab.client.get(f"/v1/uploads/{body['sha256']}").json()["records"][0]["id"] == body["id"]
    assert lab.client.head(f"/v1/uploads/{body['sha256']}").status_code == 200
    assert lab.client.head(f"/v1/uploads/{'0' * 64}").status_code == 404
    assert lab.client.get("/v1/jobs/9999").status_code == 404


def test_trial_list_filters_and_pages(lab: Lab, rng: np.random.Generator) -> None:
    for i, condition in enumerate(["dry", "wet", "dry"]):
        recorded = f"2026-0{i + 1}-01T00:00:00Z"
        meta = lab.trial_meta(condition=condition, recorded_at=recorded)
        assert lab.post_trial(wide_csv(rng), meta=meta).status_code == 201
    dry = lab.client.get("/v1/trials", params={"condition": "dry"}).json()
    assert dry["count"] == 2 and {t["condition"] for t in dry["data"]} == {"dry"}
    page = lab.client.get("/v1/trials", params={"limit": 2, "offset": 2}).json()
    assert page["count"] == 3 and len(page["data"]) == 1
    since = lab.client.get("/v1/trials", params={"recorded_after": "2026-01-15T00:00:00Z"}).json()
    assert since["count"] == 2
    other = lab.client.get("/v1/trials", params={"arena_id": lab.arena_id + 100}).json()
    assert other["count"] == 0


def test_scan_upload_and_duplicate(lab: Lab, rng: np.random.Generator) -> None:
    content = xyz_points(rng)
    url = f"/v1/arenas/{lab.arena_id}/scans"
    files = {"file": ("tray.xyz", content)}
    first = lab.client.post(url, files=files, data={"meta": json.dumps({"units": "mm"})})
    assert first.status_code == 201, first.text
    again = lab.client.post(url, files=files, data={"meta": json.dumps({"units": "mm"})})
    assert again.status_code == 200 and again.json()["id"] == first.json()["id"]
    scan = lab.client.get(f"/v1/scans/{first.json()['id']}").json()
    assert scan["kind"] == "points" and scan["arena_id"] == lab.arena_id
    assert lab.client.get(f"/v1/scans/{scan['id']}/file").content == content
    assert lab.client.get(url).json()["count"] == 1
    assert (
        lab.client.post(
            "/v1/arenas/999/scans", files=files, data={"meta": '{"units": "mm"}'}
        ).status_code
        == 404
    )


def test_heightmap_npy_scan(lab: Lab, rng: np.random.Generator, tmp_path: Path) -> None:
    path = tmp_path / "z.npy"
    np.save(path, rng.normal(size=(16, 20)), allow_pickle=False)
    meta = json.dumps({"units": "mm", "dx": 0.5, "dy": 0.5})
    response = lab.client.post(
        f"/v1/arenas/{lab.arena_id}/scans",
        files={"file": ("z.npy", path.read_bytes())},
        data={"meta": meta},
    )
    assert response.status_code == 201, response.text
    scan = lab.client.get(f"/v1/scans/{response.json()['id']}").json()
    assert scan["kind"] == "heightmap"


def test_size_cap_is_413_and_stores_nothing(tmp_path: Path, rng: np.random.Generator) -> None:
    lab = Lab(tmp_path, max_upload_bytes=1000)
    response = lab.post_trial(wide_csv(rng))  # about 4 kB
    assert response.status_code == 413
    assert "1000" in response.json()["detail"]
    assert lab.count("trial") == 0 and lab.count("job") == 0
    assert lab.stored_files() == []


@pytest.mark.parametrize(
    ("content", "name", "meta", "status", "needle"),
    [
        (b"time,a_x,a_y\n0,1\n", "broken.csv", None, 422, "broken.csv"),
        (b"", "empty.csv", None, 422, "empty"),
        (b"time,snout_x,snout_y,snout_z\n0,1,2,zz\n", "text.csv", None, 422, "line 2"),
        (b"anything", "walk.xyz123", None, 415, "xyz123"),
        (b"time,a_x,a_y,a_z\n0,1,2,3\n", "ok.csv", "{not json", 400, "meta is not valid JSON"),
        (b"time,a_x,a_y,a_z\n0,1,2,3\n", "ok.csv", '{"units": "mm"}', 400, "arena_id"),
        (b"time,a_x,a_y,a_z\n0,1,2,3\n", "ok.csv", "UNKNOWN_ARENA", 404, "999"),
    ],
)
def test_bad_uploads_give_4xx_and_store_nothing(
    lab: Lab, content, name, meta, status, needle
) -> None:
    if meta == "UNKNOWN_ARENA":
        meta = json.dumps({"arena_id": 999, "subject_id": lab.subject_id, "units": "mm"})
    response = lab.post_trial(content, name=name, meta=meta)
    assert response.status_code == status, response.text
    assert needle in response.json()["detail"]
    assert lab.count("trial") == 0 and lab.count("job") == 0
    assert lab.stored_files() == []


def test_upload_must_be_multipart(lab: Lab) -> None:
    response = lab.client.post(
        "/v1/trials", content=b"raw bytes", headers={"Content-Type": "text/csv"}
    )
    assert response.status_code == 415 and "multipart" in response.json()["detail"]
    no_file = lab.client.post(
        "/v1/trials", data={"meta": lab.trial_meta()}, files={"other": ("x", b"1")}
    )
    assert no_file.status_code == 400 and "'file'" in no_file.json()["detail"]


def test_openapi_documents_uploads_and_examples(lab: Lab) -> None:
    spec = TestClient(lab.app).get("/openapi.json").json()
    body = spec["paths"]["/v1/trials"]["post"]["requestBody"]["content"]["multipart/form-data"]
    assert {"file", "meta"} <= set(body["schema"]["properties"])
    assert json.loads(body["schema"]["properties"]["meta"]["example"])["frame_rate_hz"] == 300
    assert spec["components"]["schemas"]["ArenaCreate"]["examples"]
    assert "bearer" in json.dumps(spec["components"]["securitySchemes"]).lower()


def test_cors_off_by_default_and_on_when_set(tmp_path: Path) -> None:
    preflight = {"Origin": "https://lab.example", "Access-Control-Request-Method": "GET"}
    off = TestClient(create_app(get_settings(data_dir=tmp_path / "a")))
    assert "access-control-allow-origin" not in off.options("/v1/arenas", headers=preflight).headers
    on = TestClient(
        create_app(get_settings(data_dir=tmp_path / "b", cors_origins=["https://lab.example"]))
    )
    allowed = on.options("/v1/arenas", headers=preflight)
    assert allowed.headers["access-control-allow-origin"] == "https://lab.example"


def test_apps_are_isolated(tmp_path: Path) -> None:
    one, two = Lab(tmp_path / "1"), Lab(tmp_path / "2")
    one.client.post("/v1/arenas", json={"name": "extra", "kind": "other"})
    assert one.client.get("/v1/arenas").json()["count"] == 2
    assert two.client.get("/v1/arenas").json()["count"] == 1


# -- one unit of work per upload, metadata conflicts and corrections ------------------------------
def test_record_and_first_job_are_one_transaction(
    tmp_path: Path, rng: np.random.Generator, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A failure after the row is flushed but before its job is written leaves neither (and
    the 500 carries the security headers and the request id)."""
    import storage.repo.jobs as jobs

    lab = Lab(tmp_path, job_runner=False)

    def broken(**kwargs):
        raise RuntimeError("database went away")

    monkeypatch.setattr(jobs, "enqueue_job", broken)
    response = lab.post_trial(wide_csv(rng))
    assert response.status_code == 500
    assert "request id" in response.json()["detail"]
    assert response.headers["x-request-id"] in response.json()["detail"]
    assert response.headers["x-content-type-options"] == "nosniff"
    assert lab.count("trial") == 0 and lab.count("job") == 0
    assert lab.stored_files() == []


def test_duplicate_of_a_record_without_job_queues_one(
    tmp_path: Path, rng: np.random.Generator
) -> None:
    from service.check import check_store

    lab = Lab(tmp_path, job_runner=False)
    content = wide_csv(rng)
    store = lab.app.state.store
    path = tmp_path / "walk.csv"
    path.write_bytes(content)
    staged = store.put_file(path)
    meta = {"arena_id": lab.arena_id, "subject_id": lab.subject_id, "units": "mm"}
    with lab.app.state.sessionmaker() as session:  # as an older server left it: no job
        row, created = repo.ingest_trial(
            session=session, store=store, staged=staged, filename="walk.csv", meta=meta
        )
    assert created and lab.count("job") == 0
    report = check_store(sessionmaker=lab.app.state.sessionmaker, store=store)
    assert report.count("no_job") == 1 and not report.damaged
    again = lab.post_trial(content)
    assert again.status_code == 200 and again.json()["id"] == row.id
    assert again.json()["job_id"] is not None and lab.count("job") == 1
    assert check_store(sessionmaker=lab.app.state.sessionmaker, store=store).count("no_job") == 0


def test_check_repair_queues_jobs_for_jobless_records(
    tmp_path: Path, rng: np.random.Generator
) -> None:
    from service.check import check_store

    lab = Lab(tmp_path, job_runner=False)
    path = tmp_path / "walk.csv"
    path.write_bytes(wide_csv(rng))
    store = lab.app.state.store
    with lab.app.state.sessionmaker() as session:
        repo.ingest_trial(session=session, store=store, staged=store.put_file(path),
                          filename="walk.csv", meta={"arena_id": lab.arena_id,
                          "subject_id": lab.subject_id, "units": "mm"})  # fmt: skip
    report = check_store(sessionmaker=lab.app.state.sessionmaker, store=store, repair=True)
    assert report.count("no_job", repaired=True) == 1
    assert lab.count("job") == 1
    assert check_store(sessionmaker=lab.app.state.sessionmaker, store=store).clean


def test_reupload_with_different_meta_is_409_naming_the_fields(
    tmp_path: Path, rng: np.random.Generator
) -> None:
    lab = Lab(tmp_path, job_runner=False)
    content = wide_csv(rng)
    first = lab.post_trial(content, meta=lab.trial_meta(condition="dry"))
    assert first.status_code == 201
    same = lab.post_trial(content, meta=lab.trial_meta(condition="dry"))
    assert same.status_code == 200 and same.json()["id"] == first.json()["id"]
    # The same file and target with units "m" instead of "mm": a conflict, not a silent 200.
    meta = json.dumps({"arena_id": lab.arena_id, "subject_id": lab.subject_id, "units": "m",
                       "condition": "wet"})  # fmt: skip
    clash = lab.post_trial(content, meta=meta)
    assert clash.status_code == 409
    detail = clash.json()["detail"]
    assert "condition: stored 'dry', sent 'wet'" in detail
    assert "units: stored 'mm', sent 'm'" in detail
    assert f"PATCH /v1/trials/{first.json()['id']}" in detail
    assert lab.count("trial") == 1 and lab.count("job") == 1


def test_metadata_correction_rereads_and_requeues(tmp_path: Path, rng: np.random.Generator) -> None:
    lab = Lab(tmp_path, job_runner=False)
    content = wide_csv(rng, rate_hz=300.0)
    first = lab.post_trial(content).json()
    tid = first["id"]
    before = lab.client.get(f"/v1/trials/{tid}").json()
    fixed = lab.client.patch(f"/v1/trials/{tid}", json={"units": "cm", "up_axis": "y"})
    assert fixed.status_code == 200, fixed.text
    body = fixed.json()
    # The upload's job has not started (no runner here): it is the one that will score the
    # corrected record; a running job would not count and a new one would be queued.
    assert body["changed"] == ["units", "up_axis"] and body["job_id"] == first["job_id"]
    after = lab.client.get(f"/v1/trials/{tid}").json()
    assert after["units"] == "cm" and before["units"] == "mm"
    job = lab.client.get(f"/v1/jobs/{body['job_id']}").json()
    assert job["state"] == "queued"
    with lab.app.state.sessionmaker() as session:
        row = repo.get_trial(session=session, trial_id=tid)
        assert row.meta["upload"]["up_axis"] == "y"
        assert row.meta["corrections"][0]["changed"]["units"] == ["mm", "cm"]
    # The corrected upload now matches: the re-upload is a plain duplicate again.
    meta = lab.trial_meta(units="cm", up_axis="y")
    meta = json.dumps({**json.loads(meta), "units": "cm"})
    assert lab.post_trial(content, meta=meta).status_code == 200
    # A correction the reader refuses changes nothing.
    bad = lab.client.patch(f"/v1/trials/{tid}", json={"frame_rate_hz": 200000})
    assert bad.status_code == 422
    none = lab.client.patch(f"/v1/trials/{tid}", json={"units": "cm"})
    assert none.status_code == 400 and "nothing to correct" in none.json()["detail"]
    assert lab.client.patch("/v1/trials/999", json={"units": "m"}).status_code == 404


def test_scan_metadata_correction(tmp_path: Path, rng: np.random.Generator) -> None:
    lab = Lab(tmp_path, job_runner=False)
    grid = rng.normal(size=(10, 12))
    import io

    buf = io.BytesIO()
    np.save(buf, grid, allow_pickle=False)
    url = f"/v1/arenas/{lab.arena_id}/scans"
    up = lab.client.post(url, files={"file": ("g.npy", buf.getvalue())},
                         data={"meta": json.dumps({"units": "mm", "dx": 0.5})})  # fmt: skip
    assert up.status_code == 201
    sid = up.json()["id"]
    fixed = lab.client.patch(f"/v1/scans/{sid}", json={"dx": 0.25, "dy": 0.5})
    assert fixed.status_code == 200, fixed.text
    scan = lab.client.get(f"/v1/scans/{sid}").json()
    assert scan["dx_m"] == pytest.approx(0.25e-3) and scan["dy_m"] == pytest.approx(5e-4)
    too_far = lab.client.patch(f"/v1/scans/{sid}", json={"dx": 1e9})
    assert too_far.status_code == 422 and "outside the accepted" in too_far.json()["detail"]


def test_analyse_token_follows_the_job_it_started(tmp_path: Path, rng: np.random.Generator) -> None:
    lab = Lab(tmp_path, job_runner=False)
    tid = lab.post_trial(wide_csv(rng)).json()["id"]
    with lab.app.state.sessionmaker() as session:
        _, secret = repo.create_token(session=session, scopes=["analyse"])
    analyst = TestClient(lab.app, headers={"Authorization": f"Bearer {secret}"})
    started = analyst.post("/v1/jobs/rescore", json={"trial_ids": [tid]})
    assert started.status_code == 202, started.text
    job_id = started.json()["job_ids"][0]
    assert analyst.get(f"/v1/jobs/{job_id}").status_code == 200
    assert analyst.get("/v1/trials").status_code == 403  # analyse alone still reads no data


def test_resume_check_answers_an_upload_token_for_its_target_only(
    tmp_path: Path, rng: np.random.Generator
) -> None:
    lab = Lab(tmp_path, job_runner=False)
    content = wide_csv(rng)
    sha = lab.post_trial(content).json()["sha256"]
    with lab.app.state.sessionmaker() as session:
        _, secret = repo.create_token(session=session, scopes=["upload"])
    rig = TestClient(lab.app, headers={"Authorization": f"Bearer {secret}"})
    target = {"kind": "trial", "arena_id": lab.arena_id, "subject_id": lab.subject_id}
    assert rig.head(f"/v1/uploads/{sha}", params=target).status_code == 200
    found = rig.get(f"/v1/uploads/{sha}", params=target).json()["records"]
    assert [r["arena_id"] for r in found] == [lab.arena_id]
    elsewhere = {**target, "arena_id": lab.arena_id + 1}
    assert rig.head(f"/v1/uploads/{sha}", params=elsewhere).status_code == 404
    blind = rig.get(f"/v1/uploads/{sha}")  # no target: an upload token learns nothing
    assert blind.status_code == 400 and "must name the target" in blind.json()["detail"]
    assert lab.client.get(f"/v1/uploads/{sha}").status_code == 200  # read: everything
