"""Faults: a full disk, and a server killed with SIGKILL in the middle of uploads and scoring.

The kill test runs a real ``gaitscape serve`` on 127.0.0.1 (a free port) and the real upload
client; every wait is bounded. After the restart: no row without its file, no file without its
row once check --repair has dropped what the kill left in flight, every interrupted job
re-claimed and finished, and the client's resume uploads the rest exactly once.
"""

from __future__ import annotations

import errno
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import httpx
import numpy as np
import pytest
from test_api import ROLES, Lab, wide_csv
from test_server_process import free_port

from service.check import check_store
from storage import artifacts

REPO_ROOT = Path(__file__).resolve().parents[1]


# -- disk full ----------------------------------------------------------------------------------
class _FullFile:
    """A staging file on a full disk: the first write fails with ENOSPC."""

    def __init__(self, real) -> None:
        self._real = real

    def write(self, data: bytes) -> int:
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    def __getattr__(self, name: str):
        return getattr(self._real, name)


def test_disk_full_is_507_and_loses_nothing(
    tmp_path: Path, rng: np.random.Generator, monkeypatch: pytest.MonkeyPatch
) -> None:
    lab = Lab(tmp_path)
    kept = wide_csv(rng)
    first = lab.post_trial(kept)
    assert first.status_code == 201
    before = sorted(lab.stored_files())
    real_init = artifacts.Stager.__init__

    def full_init(self, *args, **kwargs) -> None:
        real_init(self, *args, **kwargs)
        self._file = _FullFile(self._file)

    monkeypatch.setattr(artifacts.Stager, "__init__", full_init)
    response = lab.post_trial(wide_csv(rng))
    assert response.status_code == 507, response.text
    assert "full" in response.json()["detail"]
    assert lab.count("trial") == 1 and lab.count("job") == 1
    assert sorted(lab.stored_files()) == before  # no partial file, the old one intact
    assert lab.client.get(f"/v1/trials/{first.json()['id']}/file").content == kept


def test_disk_full_at_commit_is_507(
    tmp_path: Path, rng: np.random.Generator, monkeypatch: pytest.MonkeyPatch
) -> None:
    lab = Lab(tmp_path)

    def no_space(*args, **kwargs):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(artifacts.os, "link", no_space)
    response = lab.post_trial(wide_csv(rng))
    assert response.status_code == 507, response.text
    assert lab.count("trial") == 0 and lab.stored_files() == []


# -- kill -9 ------------------------------------------------------------------------------------
class Server:
    """``gaitscape serve`` in a subprocess on 127.0.0.1; stdout/stderr to a log file."""

    def __init__(self, data: Path, log: Path, *, port: int | None = None, **env: str) -> None:
        self.data, self.port = data, port or free_port()
        self.base = f"http://127.0.0.1:{self.port}"
        self.env = {**os.environ, **env}
        self.log = log

    def start(self) -> Server:
        cmd = [
            sys.executable,
            "-m",
            "service.cli",
            "serve",
            "--data",
            str(self.data),
            "--host",
            "127.0.0.1",
            "--port",
            str(self.port),
        ]
        with open(self.log, "ab") as log:  # the child keeps its own copy of the descriptor
            self.proc = subprocess.Popen(
                cmd,
                cwd=REPO_ROOT,
                env=self.env,
                stdout=log,
                stderr=subprocess.STDOUT,
                start_new_session=True,
            )
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            assert self.proc.poll() is None, self.log.read_text()[-3000:]
            try:
                if httpx.get(f"{self.base}/healthz", timeout=1).status_code == 200:
                    return self
            except httpx.TransportError:
                pass
            time.sleep(0.1)
        raise AssertionError("server did not come up")

    def kill9(self) -> None:
        os.killpg(self.proc.pid, signal.SIGKILL)  # the server and its worker processes
        self.proc.wait(timeout=30)

    def stop(self) -> None:
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
            try:
                self.proc.wait(timeout=30)
            except subprocess.TimeoutExpired:
                self.kill9()


def _wait_for(predicate, *, timeout: float, what: str, step: float = 0.1):
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        value = predicate()
        if value:
            return value
        time.sleep(step)
    raise AssertionError(f"timed out waiting for {what}")


@pytest.mark.slow
@pytest.mark.integration
def test_kill9_during_uploads_and_scoring(tmp_path: Path, rng: np.random.Generator) -> None:
    data = tmp_path / "data"
    env = {"GAITSCAPE_WORKERS": "1", "GAITSCAPE_JOB_LEASE_S": "3", "GAITSCAPE_JOB_POLL_S": "0.2"}
    server = Server(data, tmp_path / "server.log", **env).start()
    secret = (data / "admin-token").read_text().strip()
    auth = {"Authorization": f"Bearer {secret}"}
    with httpx.Client(base_url=server.base, headers=auth, timeout=30) as client:
        arena = client.post("/v1/arenas", json={"name": "gravel", "kind": "runway"}).json()
        subject = client.post("/v1/subjects", json={"label": "Q1", "marker_roles": ROLES}).json()
    folder = tmp_path / "acquisition"
    folder.mkdir()
    (folder / "gaitscape.json").write_text(json.dumps({"units": "mm"}))
    n_files = 40
    for i in range(n_files):
        (folder / f"run{i:03d}.csv").write_bytes(wide_csv(rng, n_frames=600))
    upload_cmd = [
        sys.executable,
        "-m",
        "service.cli",
        "upload",
        str(folder),
        "--server",
        server.base,
        "--token",
        secret,
        "--arena",
        str(arena["id"]),
        "--subject",
        str(subject["id"]),
        "--no-progress",
        "--retries",
        "0",
    ]
    uploader = subprocess.Popen(
        upload_cmd, cwd=REPO_ROOT, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True
    )

    def trials() -> int:
        try:
            r = httpx.get(f"{server.base}/v1/trials", headers=auth, params={"limit": 1}, timeout=5)
            return r.json()["count"]
        except (httpx.TransportError, ValueError, KeyError):
            return 0

    def running() -> list:
        r = httpx.get(
            f"{server.base}/v1/jobs", headers=auth, params={"state": "running"}, timeout=5
        )
        return r.json()["data"]

    _wait_for(lambda: trials() >= 8, timeout=120, what="some uploads")
    interrupted = _wait_for(running, timeout=60, what="a running job")
    server.kill9()  # mid-upload and mid-scoring
    first_out, _ = uploader.communicate(timeout=120)

    # Restart on the same data directory and port (the acquisition PC's URL stays valid).
    after_kill = _offline_check(data)  # before the restart re-claims anything
    assert not after_kill.damaged, after_kill.table()  # no row without its file
    stranded_records = after_kill.count("no_job")  # a record whose first job was lost
    assert stranded_records == 0, after_kill.table()
    server = Server(data, tmp_path / "server.log", port=server.port, **env).start()
    try:
        # Resume: the client skips what the server holds and uploads the rest.
        resumed = subprocess.run(
            upload_cmd, cwd=REPO_ROOT, capture_output=True, text=True, timeout=300
        )
        assert resumed.returncode == 0, resumed.stdout + resumed.stderr
        with httpx.Client(base_url=server.base, headers=auth, timeout=30) as client:
            assert client.get("/v1/trials", params={"limit": 1}).json()["count"] == n_files

            def settled() -> bool:
                status = client.get("/v1/status").json()
                return status["queue_depth"] == 0

            _wait_for(settled, timeout=300, what="the queue to drain", step=0.5)
            for job in interrupted:
                final = client.get(f"/v1/jobs/{job['id']}").json()
                assert final["state"] == "done", final
                assert final["attempts"] >= 2, final  # claimed again after the kill
            jobs = client.get("/v1/jobs", params={"limit": 1000}).json()
            states = [j["state"] for j in jobs["data"]]
            assert states.count("done") == n_files, states
            # Every file stored exactly once: one row per distinct hash.
            rows = client.get("/v1/trials", params={"limit": 1000}).json()["data"]
            assert len({t["sha256"] for t in rows}) == n_files == len(rows)
            from service.uploader import file_sha256

            on_disk = {file_sha256(p) for p in folder.glob("*.csv")}
            lost = len(on_disk - {t["sha256"] for t in rows})
            duplicated = len(rows) - len({t["sha256"] for t in rows})
            stranded_jobs = len([j for j in jobs["data"] if j["state"] != "done"])
            assert (lost, duplicated, stranded_jobs) == (0, 0, 0)
    finally:
        server.stop()
    report = _offline_check(data, repair=True)
    assert not report.damaged, report.table()
    assert _offline_check(data).clean, _offline_check(data).table()
    print(
        f"\nkill -9 test: first run {first_out.count(' new ')} new before the kill; "
        f"interrupted jobs {[j['id'] for j in interrupted]}; lost {lost}, duplicated "
        f"{duplicated}, stranded records {stranded_records}, stranded jobs {stranded_jobs}; "
        f"left by the kill: {after_kill.count('orphan')} orphan, "
        f"{after_kill.count('staging')} staging, {after_kill.count('stuck_job')} stuck"
    )


def _offline_check(data: Path, *, repair: bool = False):
    from service.app import open_resources
    from service.settings import get_settings

    resources = open_resources(get_settings(data_dir=data))
    try:
        return check_store(
            sessionmaker=resources.sessionmaker, store=resources.store, repair=repair, grace_s=0.0
        )
    finally:
        resources.engine.dispose()


def _descendants(pid: int) -> list[int]:
    import psutil

    try:
        return [p.pid for p in psutil.Process(pid).children(recursive=True)]
    except psutil.NoSuchProcess:
        return []


def _alive(pid: int) -> bool:
    import psutil

    try:
        return psutil.Process(pid).status() != psutil.STATUS_ZOMBIE
    except psutil.NoSuchProcess:
        return False


@pytest.mark.slow
@pytest.mark.integration
@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGINT], ids=["SIGTERM", "SIGINT"])
def test_stop_signal_leaves_no_worker_and_hands_jobs_back(
    tmp_path: Path, rng: np.random.Generator, sig: signal.Signals
) -> None:
    data = tmp_path / "data"
    env = {"GAITSCAPE_WORKERS": "2", "GAITSCAPE_JOB_POLL_S": "0.2"}
    server = Server(data, tmp_path / "server.log", **env).start()
    secret = (data / "admin-token").read_text().strip()
    auth = {"Authorization": f"Bearer {secret}"}
    with httpx.Client(base_url=server.base, headers=auth, timeout=30) as client:
        arena = client.post("/v1/arenas", json={"name": "sand", "kind": "runway"}).json()
        subject = client.post("/v1/subjects", json={"label": "Q2", "marker_roles": ROLES}).json()
        meta = json.dumps({"arena_id": arena["id"], "subject_id": subject["id"], "units": "mm"})
        for i in range(15):
            files = {"file": (f"r{i}.csv", wide_csv(rng, n_frames=3000))}
            assert client.post("/v1/trials", files=files, data={"meta": meta}).status_code == 201
        running = _wait_for(
            lambda: client.get("/v1/jobs", params={"state": "running"}).json()["data"],
            timeout=60,
            what="a running job",
        )
    workers = _wait_for(lambda: _descendants(server.proc.pid), timeout=60, what="pool workers")
    time.sleep(1.0)  # the workers are busy scoring now
    server.proc.send_signal(sig)
    server.proc.wait(timeout=60)
    # uvicorn re-raises the signal after its graceful shutdown: that is a clean exit too.
    assert server.proc.returncode in (0, -sig), server.log.read_text()[-2000:]
    assert "Application shutdown complete" in server.log.read_text()
    deadline = time.monotonic() + 10  # terminate() then kill(): seconds, not minutes
    while any(_alive(p) for p in workers) and time.monotonic() < deadline:
        time.sleep(0.2)
    assert [p for p in workers if _alive(p)] == []
    report = _offline_check(data)
    assert report.count("stuck_job") == 0 and report.jobs_checked == 0, report.table()
    from service.app import open_resources
    from service.settings import get_settings
    from storage import repo

    resources = open_resources(get_settings(data_dir=data))
    try:
        with resources.sessionmaker() as session:
            for job in running:
                row = repo.get_job(session=session, job_id=job["id"])
                assert row.state in ("queued", "done"), (row.id, row.state)
                if row.state == "queued":  # handed back without spending an attempt
                    assert row.attempts == 0 and row.message == "runner stopped"
    finally:
        resources.engine.dispose()
