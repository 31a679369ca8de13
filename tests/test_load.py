"""Load: 20 uploaders push 500 small trial and scan files to a real ``gaitscape serve`` on
127.0.0.1 while 20 readers query scores and correspondence. Every file stored exactly once,
every upload answered, no 5xx, "database is locked" never reaches a client; p50/p99 latencies
printed. Bounded: a fixed number of files, readers stop when the uploaders are done, and a
hard deadline. SQLite always; PostgreSQL too when GAITSCAPE_TEST_POSTGRES_URL is set (use an
empty, throwaway database)."""

from __future__ import annotations

import json
import os
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import httpx
import numpy as np
import pytest
from test_api import ROLES, wide_csv, xyz_points
from test_faults import Server, _offline_check

pytestmark = [pytest.mark.slow, pytest.mark.integration]

N_UPLOADERS, N_READERS, N_FILES = 20, 20, 500
DEADLINE_S = 600.0
BACKENDS = ["sqlite"] + (["postgres"] if os.environ.get("GAITSCAPE_TEST_POSTGRES_URL") else [])


def _pct(values: list[float], q: float) -> float:
    return float(np.percentile(np.asarray(values) * 1000.0, q)) if values else float("nan")


@pytest.mark.parametrize("backend", BACKENDS)
def test_concurrent_uploads_and_reads(tmp_path: Path, backend: str) -> None:
    env = {"GAITSCAPE_WORKERS": "1", "GAITSCAPE_JOB_POLL_S": "0.5"}
    if backend == "postgres":
        env["GAITSCAPE_DATABASE_URL"] = os.environ["GAITSCAPE_TEST_POSTGRES_URL"]
    data = tmp_path / "data"
    server = Server(data, tmp_path / "server.log", **env).start()
    secret = (data / "admin-token").read_text().strip()
    auth = {"Authorization": f"Bearer {secret}"}
    rng = np.random.default_rng(20261201)
    with httpx.Client(base_url=server.base, headers=auth, timeout=60) as client:
        arenas = [
            client.post("/v1/arenas", json={"name": f"tray {i}", "kind": "runway"}).json()
            for i in range(4)
        ]
        subject = client.post("/v1/subjects", json={"label": "L1", "marker_roles": ROLES}).json()
    # Half trials (small CSVs, 300 Hz is common practice), half point-cloud scans.
    files = []
    for i in range(N_FILES):
        arena = arenas[i % len(arenas)]["id"]
        if i % 2:
            files.append(("trial", f"t{i}.csv", wide_csv(rng, n_frames=40), arena))
        else:
            files.append(("scan", f"s{i}.xyz", xyz_points(rng, n=60), arena))
    uploads: list[tuple[int, float, str]] = []
    reads: list[tuple[int, float, str]] = []
    lock = threading.Lock()
    done = threading.Event()
    stop_at = time.monotonic() + DEADLINE_S

    def upload(part: list) -> None:
        with httpx.Client(base_url=server.base, headers=auth, timeout=120) as client:
            for kind, name, content, arena in part:
                if kind == "trial":
                    url = "/v1/trials"
                    meta = {"arena_id": arena, "subject_id": subject["id"], "units": "mm"}
                else:
                    url, meta = f"/v1/arenas/{arena}/scans", {"units": "mm"}
                t0 = time.perf_counter()
                r = client.post(
                    url, files={"file": (name, content)}, data={"meta": json.dumps(meta)}
                )
                with lock:
                    uploads.append((r.status_code, time.perf_counter() - t0, r.text[:300]))

    def read(k: int) -> None:
        paths = [
            ("/v1/scores", {"limit": 50}),
            ("/v1/correspondence", {"recipe": "default", "format": "json"}),
            ("/v1/trials", {"limit": 20}),
            ("/v1/jobs", {"state": "queued", "limit": 5}),
        ]
        with httpx.Client(base_url=server.base, headers=auth, timeout=120) as client:
            i = k
            while not done.is_set() and time.monotonic() < stop_at:
                path, params = paths[i % len(paths)]
                i += 1
                t0 = time.perf_counter()
                r = client.get(path, params=params)
                with lock:
                    reads.append((r.status_code, time.perf_counter() - t0, r.text[:300]))

    parts = [files[i::N_UPLOADERS] for i in range(N_UPLOADERS)]
    t_start = time.perf_counter()
    try:
        with ThreadPoolExecutor(N_UPLOADERS + N_READERS) as pool:
            readers = [pool.submit(read, k) for k in range(N_READERS)]
            writers = [pool.submit(upload, p) for p in parts]
            for w in writers:
                w.result(timeout=DEADLINE_S)
            done.set()
            for r in readers:
                r.result(timeout=60)
        wall = time.perf_counter() - t_start
        with httpx.Client(base_url=server.base, headers=auth, timeout=60) as client:
            n_trials = client.get("/v1/trials", params={"limit": 1}).json()["count"]
            n_scans = client.get("/v1/scans", params={"limit": 1}).json()["count"]
    finally:
        server.stop()
    up_codes = [c for c, _, _ in uploads]
    rd_codes = [c for c, _, _ in reads]
    five_xx = [(c, t) for c, _, t in uploads + reads if c >= 500]
    locked = [t for _, _, t in uploads + reads if "locked" in t.lower()]
    print(
        f"\nload [{backend}]: {len(uploads)} uploads in {wall:.1f} s "
        f"(201: {up_codes.count(201)}, other: {len(up_codes) - up_codes.count(201)}), "
        f"{len(reads)} reads; 5xx: {len(five_xx)}; stored {n_trials} trials + {n_scans} scans; "
        f"upload p50 {_pct([d for _, d, _ in uploads], 50):.0f} ms, "
        f"p99 {_pct([d for _, d, _ in uploads], 99):.0f} ms; "
        f"read p50 {_pct([d for _, d, _ in reads], 50):.0f} ms, "
        f"p99 {_pct([d for _, d, _ in reads], 99):.0f} ms"
    )
    assert len(uploads) == N_FILES  # every upload answered
    assert five_xx == [] and locked == []
    assert up_codes.count(201) == N_FILES, {c: up_codes.count(c) for c in set(up_codes)}
    assert n_trials + n_scans == N_FILES  # every file stored exactly once, none lost
    assert set(rd_codes) <= {
        200,
        400,
        404,
        409,
        422,
    }  # 400: too few arenas to fit yet, {c: rd_codes.count(c) for c in set(rd_codes)}
    if backend == "sqlite":
        report = _offline_check(data)
        assert report.count("missing") == report.count("orphan") == 0, report.table()
