"""A real ``gaitscape serve`` process on 127.0.0.1: start, wait for /healthz, upload, stop."""

from __future__ import annotations

import json
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx
import numpy as np
import pytest
from test_api import ROLES, wide_csv

pytestmark = pytest.mark.integration


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def test_serve_upload_stop(tmp_path: Path, rng: np.random.Generator) -> None:
    port = free_port()
    data = tmp_path / "data"
    proc = subprocess.Popen(
        [sys.executable, "-m", "service.cli", "serve", "--data", str(data), "--port", str(port)],
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
    )
    base = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 20
        while True:
            try:
                if httpx.get(f"{base}/healthz", timeout=1).status_code == 200:
                    break
            except httpx.TransportError:
                pass
            assert proc.poll() is None, proc.stdout.read()
            assert time.monotonic() < deadline, "server did not come up"
            time.sleep(0.1)
        secret = (data / "admin-token").read_text().strip()
        with httpx.Client(base_url=base, headers={"Authorization": f"Bearer {secret}"}) as client:
            arena = client.post("/v1/arenas", json={"name": "board", "kind": "runway"}).json()
            subject = client.post(
                "/v1/subjects", json={"label": "R1", "marker_roles": ROLES}
            ).json()
            meta = {"arena_id": arena["id"], "subject_id": subject["id"], "units": "mm"}
            files = {"file": ("run.csv", wide_csv(rng))}
            response = client.post("/v1/trials", files=files, data={"meta": json.dumps(meta)})
            assert response.status_code == 201, response.text
            again = client.post("/v1/trials", files=files, data={"meta": json.dumps(meta)})
            assert again.status_code == 200 and again.json()["id"] == response.json()["id"]
        assert httpx.get(f"{base}/v1/arenas").status_code == 401
    finally:
        proc.terminate()
        try:
            output, _ = proc.communicate(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            output, _ = proc.communicate()
    assert secret in output  # printed once on first start
