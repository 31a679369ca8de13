"""End to end over HTTP: uploads get scored by the app's own runner, then re-scored."""

from __future__ import annotations

import io
import json
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from fastapi.testclient import TestClient

from demo_arena import SUBJECTS, TRAYS, make_tray, walk_over
from demo_arena.files import write_csv_wide
from service.app import create_app
from service.settings import get_settings
from storage import repo

ROLES = {"anterior": "snout", "posterior": "tailbase",
         "feet": {f: f"foot_{f}" for f in ("LF", "RF", "LH", "RH")}}  # fmt: skip


def wait_done(client: TestClient, job_id: int, timeout: float = 120.0) -> dict:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        job = client.get(f"/v1/jobs/{job_id}").json()
        if job["state"] in ("done", "failed"):
            return job
        time.sleep(0.2)
    raise AssertionError(f"job {job_id} not finished: {job}")


@pytest.mark.slow
def test_uploads_are_scored_without_asking_and_rescore_works(tmp_path: Path) -> None:
    settings = get_settings(data_dir=tmp_path / "data", workers=1, job_poll_s=0.1)
    app = create_app(settings)
    with app.state.sessionmaker() as s:
        _, secret = repo.create_token(session=s, scopes=["admin"])
    z = make_tray(TRAYS[2], length_m=0.4, width_m=0.12, dx_m=0.001, seed=7)
    np.save(tmp_path / "hm.npy", z, allow_pickle=False)
    rec = walk_over(z, 0.001, SUBJECTS[0], duration_s=4.0, seed=8)
    write_csv_wide(tmp_path / "walk.csv", rec.markers, rec.marker_names, rec.frame_rate_hz)
    with TestClient(app, headers={"Authorization": f"Bearer {secret}"}) as c:  # lifespan: runner
        arena = c.post("/v1/arenas", json={"name": "tray", "kind": "runway",
                                            "scale_band_m": [0.004, 0.05]}).json()  # fmt: skip
        subject = c.post("/v1/subjects", json={"label": "s1", "marker_roles": ROLES}).json()
        hm_meta = json.dumps({"units": "m", "dx": 0.001, "dy": 0.001})
        hm_file = {"file": ("hm.npy", (tmp_path / "hm.npy").read_bytes())}
        scan = c.post(f"/v1/arenas/{arena['id']}/scans", files=hm_file, data={"meta": hm_meta})
        scan = scan.json()
        meta = json.dumps({"arena_id": arena["id"], "subject_id": subject["id"], "units": "mm"})
        walk = {"file": ("walk.csv", (tmp_path / "walk.csv").read_bytes())}
        trial = c.post("/v1/trials", files=walk, data={"meta": meta}).json()
        for up in (scan, trial):
            job = wait_done(c, up["job_id"])
            assert job["state"] == "done", job
        rows = c.get("/v1/scores", params={"trial_id": trial["id"], "limit": 1000}).json()["data"]
        assert {"rqa_det", "stride_frequency_hz"} & {r["measure"] for r in rows}
        assert all(r["subject"] == "s1" and r["arena"] == "tray" for r in rows)
        v2 = c.post(
            "/v1/recipes", json={"name": "coarse", "parameters": {"heightmap": {"dx_m": 0.002}}}
        ).json()
        again = c.post("/v1/jobs/rescore", json={"recipe": "coarse", "arena_ids": [arena["id"]]})
        assert again.status_code == 202 and again.json()["count"] == 2
        for job_id in again.json()["job_ids"]:
            assert wait_done(c, job_id)["state"] == "done"
        wide = pd.read_csv(io.StringIO(c.get("/v1/export/scores", params={"shape": "wide"}).text))
        assert len(wide) == 4  # two targets under two recipe hashes
        assert set(wide["recipe_hash"]) == {
            v2["hash"],
            c.get("/v1/recipes/default").json()["hash"],
        }


#: Heavy numerics the web process must not load at start (workers import them): numba and
#: scipy.stats cost seconds of import; open3d and scikit-learn more; pandas half a second.
HEAVY = ("numba", "scipy.stats", "open3d", "sklearn", "pandas", "matplotlib")


def test_web_process_starts_without_heavy_numerics() -> None:
    # create_app on an empty data folder (first start): migrations and the default recipe
    # (built from measures.defaults, plain data) load none of the numerics either.
    code = (
        "import sys, tempfile, pathlib\n"
        "from service.app import create_app\n"
        "from service.settings import Settings\n"
        "create_app(Settings(data_dir=pathlib.Path(tempfile.mkdtemp()) / 'd', job_runner=False))\n"
        f"print(','.join(m for m in {HEAVY!r} if m in sys.modules))\n"
    )
    root = Path(__file__).resolve().parents[1]
    out = subprocess.run(
        [sys.executable, "-c", code], cwd=root, capture_output=True, text=True, timeout=300,
        check=True,
    )  # fmt: skip
    assert out.stdout.strip() == "", f"loaded at start: {out.stdout.strip()}"


def test_pipeline_package_imports_no_heavy_numerics() -> None:
    # The part of the web process this package owns: recipes, flows, runner, executors.
    code = (
        "import sys\n"
        "import service.pipeline, service.errors, service.settings, storage.repo\n"
        f"print(','.join(m for m in {HEAVY!r} if m in sys.modules))\n"
    )
    root = Path(__file__).resolve().parents[1]
    out = subprocess.run(
        [sys.executable, "-c", code], cwd=root, capture_output=True, text=True, timeout=300,
        check=True,
    )  # fmt: skip
    assert out.stdout.strip() == "", f"loaded: {out.stdout.strip()}"


def test_start_and_restart_load_no_alembic(tmp_path) -> None:
    # A database already at the newest revision needs no migration, and a new empty one is
    # built from the models at that revision, so neither imports Alembic (with Mako and
    # Pygments, half a second of start-up); a store at an older revision still migrates.
    code = (
        "import sys, pathlib\n"
        "from service.app import create_app\n"
        "from service.settings import Settings\n"
        f"create_app(Settings(data_dir=pathlib.Path({str(tmp_path / 'd')!r}), job_runner=False))\n"
        "print('alembic' in sys.modules)\n"
    )
    root = Path(__file__).resolve().parents[1]
    runs = [
        subprocess.run(
            [sys.executable, "-c", code], cwd=root, capture_output=True, text=True, timeout=300,
            check=True,
        ).stdout.strip()
        for _ in range(2)
    ]  # fmt: skip
    assert runs == ["False", "False"]
