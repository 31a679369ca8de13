"""Job and score tables on a real PostgreSQL server (GAITSCAPE_TEST_POSTGRES_URL)."""

from __future__ import annotations

import os
import threading
import uuid
from pathlib import Path

import pytest
from sqlalchemy import func, select, text
from test_jobs import Store

from service.pipeline import LocalPool
from storage import repo
from storage.db import make_engine
from storage.models import Score

URL = os.environ.get("GAITSCAPE_TEST_POSTGRES_URL")
pytestmark = pytest.mark.postgres


@pytest.fixture
def pg_url():
    if not URL:
        if os.environ.get("GAITSCAPE_REQUIRE_SERVICES") == "1":
            pytest.fail("GAITSCAPE_TEST_POSTGRES_URL is unset but GAITSCAPE_REQUIRE_SERVICES=1")
        pytest.skip("no PostgreSQL (set GAITSCAPE_TEST_POSTGRES_URL)")
    schema = f"gs_jobs_{uuid.uuid4().hex[:8]}"  # a schema of our own: the database is shared
    admin = make_engine(URL)
    with admin.begin() as conn:
        conn.execute(text(f"CREATE SCHEMA {schema}"))
    sep = "&" if "?" in URL else "?"
    yield f"{URL}{sep}options=-csearch_path%3D{schema}"
    with admin.begin() as conn:
        conn.execute(text(f"DROP SCHEMA {schema} CASCADE"))
    admin.dispose()


def test_concurrent_claims_never_share_a_job(tmp_path: Path, pg_url: str) -> None:
    lab = Store(tmp_path, url=pg_url)
    scan_id = lab.add_heightmap(seed=1)
    with lab.sessionmaker() as s:
        for _ in range(20):
            repo.enqueue_job(session=s, kind="score", target_kind="scan", target_id=scan_id,
                             recipe_hash=uuid.uuid4().hex)  # fmt: skip
    claimed: list[int] = []

    def worker() -> None:
        while True:
            with lab.sessionmaker() as s:
                job = repo.claim_job(session=s)
            if job is None:
                return
            claimed.append(job.id)

    threads = [threading.Thread(target=worker) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert len(claimed) == 20 and len(set(claimed)) == 20


def test_scan_job_scores_once_on_postgres(tmp_path: Path, pg_url: str) -> None:
    lab = Store(tmp_path, url=pg_url)
    scan_id = lab.add_heightmap(seed=2)
    pool = LocalPool(1)
    try:
        for _ in range(2):  # the second run upserts the same rows
            job_id = lab.enqueue("scan", scan_id, recipe_hash=None)
            lab.runner(pool).run_until_idle(120)
            assert lab.job(job_id).state == "done"
    finally:
        pool.close()
    with lab.sessionmaker() as s:
        n = s.scalar(select(func.count()).select_from(Score))
        distinct = s.scalar(select(func.count(func.distinct(Score.measure))))
    assert n == distinct > 10


RESTART = os.environ.get("GAITSCAPE_TEST_PG_RESTART")  # a script that restarts the server


@pytest.mark.integration
def test_api_survives_a_database_restart(tmp_path: Path, pg_url: str) -> None:
    # The database goes away and comes back (PostgreSQL restart): pooled connections die
    # with it; pool_pre_ping replaces them, so the next requests succeed and nothing
    # written before the restart is lost.
    import subprocess

    from fastapi.testclient import TestClient

    from service.app import create_app
    from service.settings import get_settings
    from storage.repo import create_token

    if not RESTART:
        if os.environ.get("GAITSCAPE_REQUIRE_SERVICES") == "1":
            pytest.fail("GAITSCAPE_TEST_PG_RESTART is unset but GAITSCAPE_REQUIRE_SERVICES=1")
        pytest.skip("no restart command (set GAITSCAPE_TEST_PG_RESTART)")
    settings = get_settings(data_dir=tmp_path, database_url=pg_url, job_runner=False)
    with TestClient(create_app(settings)) as client:
        with client.app.state.sessionmaker() as s:
            _, secret = create_token(session=s, scopes=["admin"], label="t")
        client.headers["Authorization"] = f"Bearer {secret}"
        before = client.post("/v1/arenas", json={"name": "before", "kind": "runway"})
        assert before.status_code == 201
        subprocess.run([RESTART], check=True, timeout=120)
        answers = [client.get("/v1/arenas").status_code for _ in range(3)]
        assert answers[-1] == 200 and all(a in (200, 503) for a in answers)
        after = client.post("/v1/arenas", json={"name": "after", "kind": "runway"})
        assert after.status_code == 201
        names = {a["name"] for a in client.get("/v1/arenas").json()["data"]}
        assert names == {"before", "after"}
