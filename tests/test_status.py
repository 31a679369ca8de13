"""``GET /v1/status``: admin only; queue depth by state, workers, store size, backend, version."""

from __future__ import annotations

import numpy as np
from fastapi.testclient import TestClient
from test_api import Lab, wide_csv
from test_auth import bearer, make_token

from service import __version__
from storage import repo


def test_status_counts_jobs_and_bytes(tmp_path, rng: np.random.Generator) -> None:
    lab = Lab(tmp_path)
    contents = [wide_csv(rng) for _ in range(3)]
    for content in contents:
        assert lab.post_trial(content).status_code == 201
    with lab.app.state.sessionmaker() as session:
        job = repo.claim_job(session=session)
        repo.finish_job(session=session, job_id=job.id)
        repo.claim_job(session=session)
    (lab.app.state.store.tmp_dir / "stage-x.part").write_bytes(b"12345")
    body = lab.client.get("/v1/status").json()
    assert body["jobs_by_state"] == {"queued": 1, "running": 1, "done": 1, "failed": 0}
    assert body["queue_depth"] == 2
    assert body["store_objects"] == 3 and body["staging_files"] == 1
    assert body["store_bytes"] == sum(len(c) for c in contents) + 5
    assert body["database_backend"] == "sqlite" and body["version"] == __version__
    # No lifespan ran (TestClient used without ``with``): no runner, no workers.
    assert body["job_runner"] is False and body["workers"] == 0


def test_status_is_admin_only(tmp_path) -> None:
    lab = Lab(tmp_path)
    client = TestClient(lab.app)
    assert client.get("/v1/status").status_code == 401
    for scope in ("read", "upload", "analyse"):
        response = client.get("/v1/status", headers=bearer(make_token(lab.app, scope)))
        assert response.status_code == 403 and "admin" in response.json()["detail"]


def test_status_reports_the_runner_when_the_lifespan_runs(tmp_path) -> None:
    lab = Lab(tmp_path, workers=1, job_poll_s=0.05)
    with TestClient(lab.app, headers=dict(lab.client.headers)) as client:
        body = client.get("/v1/status").json()
    assert body["job_runner"] is True and body["workers"] == 1
