"""``gaitscape demo --quick`` end to end: the store it leaves is a normal store.

Slow (the quick demo targets < 1 min on 2 idle cores; shared CI machines take longer).
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

REPO = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="module")
def demo_dir(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, str]:
    out = tmp_path_factory.mktemp("demo") / "store"
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "service.cli",
            "demo",
            "--quick",
            "--no-progress",
            "--out",
            str(out),
        ],
        cwd=REPO,
        env=env,
        capture_output=True,
        text=True,
        timeout=1200,
    )
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-3000:]
    return out, proc.stdout


@pytest.mark.slow
def test_demo_prints_an_honest_summary(demo_dir) -> None:
    _, stdout = demo_dir
    assert stdout.startswith("INVENTED DATA")
    assert "Study: 7 arenas, 3 subjects, 21 trials" in stdout  # quick: 7 trays x 3 voles
    assert "Strongest pairs" in stdout and "Warnings" in stdout
    assert "Short trials" not in stdout or "4.0 s" in stdout


@pytest.mark.slow
def test_demo_store_is_a_normal_store(demo_dir) -> None:
    from service.app import create_app
    from service.settings import get_settings

    out, _ = demo_dir
    assert (out / "admin-token").stat().st_mode & 0o777 == 0o600
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    made = subprocess.run(
        [
            sys.executable,
            "-m",
            "service.cli",
            "token",
            "create",
            "--data",
            str(out),
            "--scope",
            "read",
        ],
        cwd=REPO,
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
        check=True,
    )
    secret = made.stdout.strip()
    assert secret.startswith("gaitscape_") and "\n" not in secret
    client = TestClient(create_app(get_settings(data_dir=out, job_runner=False)))
    auth = {"Authorization": f"Bearer {secret}"}
    assert client.get("/v1/arenas", headers=auth).json()["count"] == 7
    assert client.get("/v1/trials", headers=auth).json()["count"] == 21
    jobs = client.get("/v1/jobs?limit=1000", headers=auth).json()["data"]
    assert jobs and all(j["state"] == "done" for j in jobs)
    assert client.get("/v1/scores?limit=1", headers=auth).json()["count"] > 100
    # The demo's own token was revoked when it ended.
    tokens = client.get("/v1/tokens", headers={"Authorization": f"Bearer {admin(out)}"}).json()
    assert all(t["revoked_at"] for t in tokens["data"] if t["label"].startswith("gaitscape demo"))


def admin(out: Path) -> str:
    return (out / "admin-token").read_text().strip()


@pytest.mark.slow
def test_demo_report_has_the_sections(demo_dir) -> None:
    out, _ = demo_dir
    html = (out / "report.html").read_text()
    for section in (
        "summary",
        "warnings",
        "terrain",
        "movement",
        "correspondence",
        "complexity-entropy",
    ):
        assert f'<section id="{section}">' in html
    assert "Invented data" in html and "tray-f-boulders" in html
