"""``gaitscape backup`` / ``restore``: a restored store serves the same rows and the same files."""

from __future__ import annotations

import io
import json
import tarfile
from pathlib import Path

import numpy as np
import pytest
from fastapi.testclient import TestClient
from test_api import Lab, wide_csv, xyz_points

from service.app import create_app
from service.backup import BackupError, backup_store, restore_store
from service.cli import main
from service.settings import get_settings


def _filled(tmp_path: Path, rng: np.random.Generator) -> Lab:
    lab = Lab(tmp_path / "src")
    for _ in range(2):
        assert lab.post_trial(wide_csv(rng)).status_code == 201
    response = lab.client.post(
        f"/v1/arenas/{lab.arena_id}/scans",
        files={"file": ("tray.xyz", xyz_points(rng))},
        data={"meta": json.dumps({"units": "mm"})},
    )
    assert response.status_code == 201
    return lab


def _snapshot(client: TestClient) -> dict:
    out = {}
    for path in ("/v1/arenas", "/v1/subjects", "/v1/trials", "/v1/scans", "/v1/jobs"):
        out[path] = client.get(path).json()
    for trial in out["/v1/trials"]["data"]:
        out[f"trial {trial['id']}"] = client.get(f"/v1/trials/{trial['id']}/file").content
    for scan in out["/v1/scans"]["data"]:
        out[f"scan {scan['id']}"] = client.get(f"/v1/scans/{scan['id']}/file").content
    return out


@pytest.mark.parametrize("target", ["backup.tar", "backup.tar.gz", "dir"])
def test_restored_store_serves_the_same(tmp_path: Path, rng: np.random.Generator, target) -> None:
    lab = _filled(tmp_path, rng)
    before = _snapshot(lab.client)
    out = tmp_path / target
    if target == "dir":
        out.mkdir()
    # The source app is still open (WAL not checkpointed): the backup API still sees every row.
    manifest = backup_store(settings=lab.app.state.settings, out=out)
    assert manifest["database"]["sha256"] and len(manifest["artifacts"]) == 3
    restored_dir = tmp_path / "restored"
    restore_store(settings=get_settings(data_dir=restored_dir), source=out)
    app = create_app(get_settings(data_dir=restored_dir))
    # The same admin token works: its hash came along with the database.
    client = TestClient(app, headers=dict(lab.client.headers))
    assert _snapshot(client) == before
    state = app.state
    from service.check import check_store

    assert check_store(sessionmaker=state.sessionmaker, store=state.store).clean


def test_restore_refuses_a_non_empty_directory(tmp_path: Path, rng) -> None:
    lab = _filled(tmp_path, rng)
    backup_store(settings=lab.app.state.settings, out=tmp_path / "b.tar")
    with pytest.raises(BackupError, match="not empty"):
        restore_store(settings=lab.app.state.settings, source=tmp_path / "b.tar")


def _rewrite_tar(src: Path, dst: Path, change) -> None:
    with tarfile.open(src) as tin, tarfile.open(dst, "w") as tout:
        for member in tin.getmembers():
            data = tin.extractfile(member).read() if member.isfile() else b""
            member, data = change(member, data)
            tout.addfile(member, io.BytesIO(data))


def test_tampered_backup_is_refused_before_anything_is_written(tmp_path: Path, rng) -> None:
    lab = _filled(tmp_path, rng)
    good = tmp_path / "b.tar"
    backup_store(settings=lab.app.state.settings, out=good)

    def flip_artifact(member, data):
        if member.name.startswith("artifacts/") and data:
            data = bytes([data[0] ^ 1]) + data[1:]
        return member, data

    bad = tmp_path / "bad.tar"
    _rewrite_tar(good, bad, flip_artifact)
    target = tmp_path / "restored"
    with pytest.raises(BackupError, match="missing or damaged"):
        restore_store(settings=get_settings(data_dir=target), source=bad)
    assert not target.exists() or not any(target.iterdir())


def test_path_traversal_member_is_refused(tmp_path: Path, rng) -> None:
    lab = _filled(tmp_path, rng)
    good = tmp_path / "b.tar"
    backup_store(settings=lab.app.state.settings, out=good)

    def escape(member, data):
        if member.name == "manifest.json":
            member.name = "../../escaped.json"
        return member, data

    bad = tmp_path / "bad.tar"
    _rewrite_tar(good, bad, escape)
    with pytest.raises(BackupError, match="cannot read backup"):
        restore_store(settings=get_settings(data_dir=tmp_path / "r"), source=bad)
    assert not (tmp_path / "escaped.json").exists()
    assert not (tmp_path.parent / "escaped.json").exists()


def test_postgres_points_at_pg_dump(tmp_path: Path) -> None:
    settings = get_settings(data_dir=tmp_path, database_url="postgresql+psycopg://u:p@127.0.0.1/x")
    with pytest.raises(BackupError, match="pg_dump"):
        backup_store(settings=settings, out=tmp_path / "b.tar")


def test_cli_backup_and_restore(tmp_path: Path, rng, capsys: pytest.CaptureFixture[str]) -> None:
    lab = _filled(tmp_path, rng)
    src = str(lab.app.state.settings.data_dir)
    assert main(["backup", "--data", src, "--out", str(tmp_path / "b.tar")]) == 0
    assert "3 artifacts" in capsys.readouterr().out
    assert not (tmp_path / "b.tar.partial").exists()
    dest = tmp_path / "restored"
    assert main(["restore", "--data", str(dest), "--from", str(tmp_path / "b.tar")]) == 0
    assert main(["restore", "--data", str(dest), "--from", str(tmp_path / "b.tar")]) == 1
    assert "not empty" in capsys.readouterr().err
    assert main(["check", "--data", str(dest)]) == 0
