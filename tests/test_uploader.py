"""The acquisition-PC upload client: planning, resume by hash, retries, summary."""

from __future__ import annotations

import io
import json
from pathlib import Path

import httpx
import numpy as np
import pytest
from fastapi.testclient import TestClient
from test_api import Lab, wide_csv

from service.uploader import classify, plan_uploads, run_upload, upload_files


def write_c3d(path: Path, rng: np.random.Generator, *, n_frames: int = 40) -> None:
    import ezc3d

    c3d = ezc3d.c3d()
    c3d["parameters"]["POINT"]["RATE"]["value"] = [300.0]  # 300 Hz: common practice
    c3d["parameters"]["POINT"]["LABELS"]["value"] = ("snout", "tail", "lf", "rf", "lh", "rh")
    points = np.ones((4, 6, n_frames))
    points[:3] = rng.normal(100.0, 5.0, size=(3, 6, n_frames))
    c3d["data"]["points"] = points
    c3d.write(str(path))


def write_ply(path: Path, rng: np.random.Generator, n: int = 300) -> None:
    import open3d as o3d

    pts = np.column_stack([rng.uniform(0, 100, n), rng.uniform(0, 100, n), rng.normal(0, 1, n)])
    cloud = o3d.geometry.PointCloud(o3d.utility.Vector3dVector(pts))
    assert o3d.io.write_point_cloud(str(path), cloud)


def build_folder(root: Path, lab: Lab, rng: np.random.Generator) -> None:
    (root / "trials").mkdir(parents=True)
    (root / "scans").mkdir()
    (root / "gaitscape.json").write_text(
        json.dumps({"arena": lab.arena_id, "subject": lab.subject_id, "units": "mm"})
    )
    (root / "trials" / "walk1.csv").write_bytes(wide_csv(rng))
    write_c3d(root / "trials" / "walk2.c3d", rng)
    write_ply(root / "scans" / "tray.ply", rng)
    np.save(root / "scans" / "height.npy", rng.normal(size=(12, 10)), allow_pickle=False)
    (root / "scans" / "height.npy.json").write_text(json.dumps({"dx": 0.5, "dy": 0.5}))
    (root / "notes.txt").write_text("not uploaded")


def test_classify_by_extension_and_metadata() -> None:
    assert classify(Path("a.ply"), {}) == ("scan", "")
    assert classify(Path("a.C3D"), {}) == ("trial", "")
    assert classify(Path("a.csv"), {}) == ("trial", "")
    assert classify(Path("a.csv"), {"dx": 1.0}) == ("scan", "")
    assert classify(Path("a.npy"), {"frame_rate_hz": 300}) == ("trial", "")
    assert classify(Path("a.npy"), {"kind": "scan"}) == ("scan", "")
    kind, problem = classify(Path("a.npy"), {})
    assert kind is None and "sidecar" in problem
    kind, problem = classify(Path("a.ply"), {"kind": "trial"})
    assert kind is None and "scan" in problem


def test_metadata_layers(tmp_path: Path) -> None:
    (tmp_path / "day1").mkdir()
    (tmp_path / "gaitscape.json").write_text(json.dumps({"arena": 1, "units": "m"}))
    (tmp_path / "day1" / "gaitscape.json").write_text(json.dumps({"units": "mm"}))
    (tmp_path / "day1" / "a.csv").write_text("x")
    (tmp_path / "day1" / "a.csv.json").write_text(json.dumps({"condition": "wet"}))
    planned = [p for p in plan_uploads([tmp_path], defaults={"arena": 9, "subject": 4})
               if not p.ignored]  # fmt: skip
    assert len(planned) == 1
    assert planned[0].meta == {"arena": 1, "subject": 4, "units": "mm", "condition": "wet"}


def test_uploads_a_folder_then_nothing(tmp_path: Path, rng: np.random.Generator) -> None:
    lab = Lab(tmp_path / "server")
    root = tmp_path / "rig"
    build_folder(root, lab, rng)
    out = io.StringIO()
    assert run_upload([root], client=lab.client, progress=False, out=out) == 0, out.getvalue()
    table = out.getvalue()
    assert table.count(" new ") == 4
    # Every file not uploaded is listed with its reason (issue: the client lists each skip).
    notes = next(line for line in table.splitlines() if "notes.txt" in line)
    assert "ignored" in notes and "extension .txt is not a scan or trial format" in notes
    assert "gaitscape.json" in table and "metadata file, not uploaded" in table
    assert lab.client.get("/v1/trials").json()["count"] == 2
    assert lab.client.get("/v1/scans").json()["count"] == 2
    out = io.StringIO()
    assert run_upload([root], client=lab.client, progress=False, out=out) == 0
    assert out.getvalue().count(" skipped ") == 4 and " new " not in out.getvalue()
    assert lab.client.get("/v1/trials").json()["count"] == 2


def test_failures_make_the_exit_status_non_zero(tmp_path: Path, rng: np.random.Generator) -> None:
    lab = Lab(tmp_path / "server")
    (tmp_path / "bad").mkdir()
    (tmp_path / "bad" / "broken.csv").write_text("time,a_x\n0,1,2\n")
    (tmp_path / "bad" / "lonely.npy").write_bytes(b"")
    out = io.StringIO()
    code = run_upload(
        [tmp_path / "bad"],
        client=lab.client,
        arena=lab.arena_id,
        subject=lab.subject_id,
        progress=False,
        out=out,
    )
    assert code == 1
    assert out.getvalue().count(" failed ") == 2 and "HTTP 422" in out.getvalue()


def _flaky_transport(statuses: list[int]) -> tuple[httpx.MockTransport, list[str]]:
    seen: list[str] = []

    def handler(request: httpx.Request) -> httpx.Response:
        seen.append(request.method)
        if request.method == "HEAD":
            return httpx.Response(404)
        code = statuses.pop(0) if statuses else 201
        if code == 0:
            raise httpx.ConnectError("refused", request=request)
        body = {"id": 7, "sha256": "x", "job_id": 1} if code == 201 else {"detail": "busy"}
        return httpx.Response(code, json=body)

    return httpx.MockTransport(handler), seen


def test_retries_with_exponential_backoff(tmp_path: Path) -> None:
    (tmp_path / "a.c3d").write_bytes(b"c3d bytes")
    transport, seen = _flaky_transport([503, 0, 502])
    sleeps: list[float] = []
    planned = plan_uploads([tmp_path], defaults={"arena": 1, "subject": 1})
    with httpx.Client(transport=transport, base_url="http://lab") as client:
        (result,) = upload_files(
            planned, client=client, retries=4, backoff_s=0.1, sleep=sleeps.append, progress=False
        )
    assert result.status == "new" and result.id == 7 and result.attempts == 4
    assert sleeps == pytest.approx([0.1, 0.2, 0.4])
    assert seen.count("POST") == 4


def test_retries_are_bounded_and_507_is_final(tmp_path: Path) -> None:
    (tmp_path / "a.c3d").write_bytes(b"c3d bytes")
    planned = plan_uploads([tmp_path], defaults={"arena": 1, "subject": 1})
    transport, seen = _flaky_transport([503] * 10)
    with httpx.Client(transport=transport, base_url="http://lab") as client:
        (result,) = upload_files(
            planned, client=client, retries=2, backoff_s=0.0, sleep=lambda s: None, progress=False
        )
    assert result.status == "failed" and seen.count("POST") == 3 and "503" in result.message
    transport, seen = _flaky_transport([507])
    with httpx.Client(transport=transport, base_url="http://lab") as client:
        (result,) = upload_files(
            planned, client=client, retries=5, backoff_s=0.0, sleep=lambda s: None, progress=False
        )
    assert result.status == "failed" and seen.count("POST") == 1


def test_token_header_is_sent(tmp_path: Path) -> None:
    lab = Lab(tmp_path / "server")
    anonymous = TestClient(lab.app)
    (tmp_path / "t.csv").write_text("time,a_x,a_y,a_z\n0,1,2,3\n")
    out = io.StringIO()
    code = run_upload(
        [tmp_path / "t.csv"],
        client=anonymous,
        token="wrong",
        arena=1,
        subject=1,
        progress=False,
        out=out,
    )
    assert code == 1 and "401" in out.getvalue()


def test_study_from_the_command_line_reaches_the_server_meta(tmp_path):
    from service.uploader import _server_meta

    trial = tmp_path / "run1.csv"
    trial.write_text("time,a_x,a_y,a_z\n0,1,2,3\n")
    (tmp_path / "run1.csv.json").write_text(json.dumps({"units": "mm", "frame_rate_hz": 300}))
    planned = plan_uploads([tmp_path], defaults={"arena": 1, "subject": 2, "study": "winter"})
    [item] = [p for p in planned if not p.ignored]
    meta, problem = _server_meta(item.kind, item.meta)
    assert problem == ""
    assert meta["study"] == "winter" and meta["arena_id"] == 1 and meta["subject_id"] == 2


def _recording_transport(
    answers: dict[str, int],
) -> tuple[httpx.MockTransport, list[httpx.Request]]:
    seen: list[httpx.Request] = []

    def handler(request: httpx.Request) -> httpx.Response:
        seen.append(request)
        code = answers.get(request.method, 201)
        if request.method == "HEAD":
            return httpx.Response(code)
        body = {"id": 7, "sha256": "x", "job_id": 1} if code in (200, 201) else {
            "detail": f"server says no ({code})"}  # fmt: skip
        return httpx.Response(code, json=body)

    return httpx.MockTransport(handler), seen


def test_resume_check_names_the_target(tmp_path: Path) -> None:
    (tmp_path / "a.c3d").write_bytes(b"c3d bytes")
    (tmp_path / "b.ply").write_bytes(b"ply bytes")
    planned = plan_uploads([tmp_path], defaults={"arena": 3, "subject": 5})
    transport, seen = _recording_transport({"HEAD": 404})
    with httpx.Client(transport=transport, base_url="http://lab") as client:
        upload_files(planned, client=client, retries=0, sleep=lambda s: None, progress=False)
    heads = [r for r in seen if r.method == "HEAD"]
    assert dict(heads[0].url.params) == {"kind": "trial", "arena_id": "3", "subject_id": "5"}
    assert dict(heads[1].url.params) == {"kind": "scan", "arena_id": "3"}


def test_stops_at_the_first_401_and_prints_the_servers_detail(tmp_path: Path) -> None:
    for name in ("a.c3d", "b.c3d", "c.c3d"):
        (tmp_path / name).write_bytes(name.encode())
    planned = plan_uploads([tmp_path], defaults={"arena": 1, "subject": 1})
    transport, seen = _recording_transport({"HEAD": 404, "POST": 403})
    with httpx.Client(transport=transport, base_url="http://lab") as client:
        results = upload_files(planned, client=client, retries=3, sleep=lambda s: None,
                               progress=False)  # fmt: skip
    assert [r.status for r in results] == ["failed", "not attempted", "not attempted"]
    assert results[0].message == "HTTP 403: server says no (403)"
    assert sum(r.method == "POST" for r in seen) == 1  # no retry, no second file
    transport, seen = _recording_transport({"HEAD": 401})
    with httpx.Client(transport=transport, base_url="http://lab") as client:
        results = upload_files(planned, client=client, retries=3, sleep=lambda s: None,
                               progress=False)  # fmt: skip
    assert results[0].message.startswith("HTTP 401: the token is missing")
    assert len(seen) == 1


def test_upload_only_token_uploads_resumes_and_reaches_a_new_target(
    tmp_path: Path, rng: np.random.Generator
) -> None:
    """A rig PC with nothing but the upload scope (what the README tells labs to give it)."""
    from service.settings import get_settings  # noqa: F401  (the Lab builds the app)
    from storage import repo

    lab = Lab(tmp_path / "server")
    with lab.app.state.sessionmaker() as session:
        _, secret = repo.create_token(session=session, scopes=["upload"], label="rig")
    rig = TestClient(lab.app)
    trial = tmp_path / "rig" / "walk.csv"
    trial.parent.mkdir()
    trial.write_bytes(wide_csv(rng))
    (trial.parent / "walk.csv.json").write_text(json.dumps({"units": "mm"}))
    out = io.StringIO()
    args = {"client": rig, "token": secret, "progress": False}
    code = run_upload([trial.parent], arena=lab.arena_id, subject=lab.subject_id, out=out, **args)
    assert code == 0, out.getvalue()
    assert " new " in out.getvalue()
    out = io.StringIO()
    code = run_upload([trial.parent], arena=lab.arena_id, subject=lab.subject_id, out=out, **args)
    assert code == 0 and " skipped " in out.getvalue(), out.getvalue()
    # The same file for a second arena is uploaded there, not "already on the server".
    arena2 = lab.client.post("/v1/arenas", json={"name": "gravel", "kind": "runway"}).json()["id"]
    out = io.StringIO()
    code = run_upload([trial.parent], arena=arena2, subject=lab.subject_id, out=out, **args)
    assert code == 0 and " new " in out.getvalue(), out.getvalue()
    arenas = sorted(t["arena_id"] for t in lab.client.get("/v1/trials").json()["data"])
    assert arenas == sorted([lab.arena_id, arena2])


def test_las_and_laz_are_scans() -> None:
    assert classify(Path("tile.las"), {}) == ("scan", "")
    assert classify(Path("tile.LAZ"), {}) == ("scan", "")


def test_hidden_entries_are_listed(tmp_path: Path) -> None:
    (tmp_path / ".cache").mkdir()
    (tmp_path / ".cache" / "x.c3d").write_bytes(b"x")
    (tmp_path / ".partial.c3d").write_bytes(b"x")
    planned = plan_uploads([tmp_path])
    reasons = {p.path.name: p.ignored for p in planned}
    assert reasons == {
        ".cache": "hidden folder, not walked",
        ".partial.c3d": "hidden file, not walked",
    }


@pytest.mark.slow
@pytest.mark.integration
def test_acquisition_pc_with_an_upload_only_token(tmp_path: Path, rng: np.random.Generator) -> None:
    """A live ``gaitscape serve`` and the real ``gaitscape upload`` command with a token that
    has nothing but the upload scope, as the README tells labs to set rig PCs up."""
    import subprocess
    import sys

    from test_faults import REPO_ROOT, Server

    data = tmp_path / "data"
    server = Server(data, tmp_path / "server.log", GAITSCAPE_WORKERS="0").start()
    try:
        admin = {"Authorization": f"Bearer {(data / 'admin-token').read_text().strip()}"}
        with httpx.Client(base_url=server.base, headers=admin, timeout=30) as client:
            a1 = client.post("/v1/arenas", json={"name": "sand", "kind": "runway"}).json()["id"]
            a2 = client.post("/v1/arenas", json={"name": "mesh", "kind": "runway"}).json()["id"]
            roles = {"anterior": "snout", "posterior": "tail",
                     "feet": {"LF": "lf", "RF": "rf", "LH": "lh", "RH": "rh"}}  # fmt: skip
            subject = client.post("/v1/subjects", json={"label": "R1", "marker_roles": roles})
            sid = subject.json()["id"]

        def cli(*args: str) -> subprocess.CompletedProcess[str]:
            return subprocess.run([sys.executable, "-m", "service.cli", *args], cwd=REPO_ROOT,
                                  capture_output=True, text=True, timeout=300)  # fmt: skip

        made = cli("token", "create", "--data", str(data), "--scope", "upload", "--label", "rig",
                   "--expires-days", "30")  # fmt: skip
        assert made.returncode == 0, made.stderr
        rig_token = made.stdout.strip()
        listing = cli("token", "list", "--data", str(data)).stdout
        rig_line = next(line for line in listing.splitlines() if " rig " in line)
        assert "upload" in rig_line and "active" in rig_line and "never" not in rig_line
        assert "expires" in listing.splitlines()[0]

        folder = tmp_path / "rig"
        folder.mkdir()
        (folder / "gaitscape.json").write_text(json.dumps({"units": "mm"}))
        for i in range(3):
            (folder / f"walk{i}.csv").write_bytes(wide_csv(rng))
        (folder / "camera.log").write_text("not data")

        def upload(arena: int, token: str = rig_token) -> subprocess.CompletedProcess[str]:
            return cli("upload", str(folder), "--server", server.base, "--token", token,
                       "--arena", str(arena), "--subject", str(sid), "--no-progress")  # fmt: skip

        first = upload(a1)
        assert first.returncode == 0, first.stdout + first.stderr
        assert first.stdout.count(" new ") == 3 and "camera.log" in first.stdout
        again = upload(a1)
        assert again.returncode == 0 and again.stdout.count(" skipped ") == 3, again.stdout
        other = upload(a2)  # the same files for another arena go there too
        assert other.returncode == 0 and other.stdout.count(" new ") == 3, other.stdout
        wrong = upload(a1, token="gaitscape_wrong")
        assert wrong.returncode == 1
        assert "1 failed, 2 not attempted" in wrong.stdout and "HTTP 401" in wrong.stdout
        with httpx.Client(base_url=server.base, headers=admin, timeout=30) as client:
            trials = client.get("/v1/trials", params={"limit": 100}).json()["data"]
            jobs = client.get("/v1/jobs", params={"limit": 100}).json()["data"]
        assert sorted(t["arena_id"] for t in trials) == [a1] * 3 + [a2] * 3
        assert len(jobs) == 6  # each record with its first job
    finally:
        server.stop()
    # One access log, JSON, without query strings (the resume checks carried ?arena_id=...).
    log = (tmp_path / "server.log").read_text()
    access = [line for line in log.splitlines() if '"gaitscape.access"' in line]
    assert any('"HEAD /v1/uploads/' in line for line in access)
    assert "arena_id=" not in log and '" 200 OK' not in log  # uvicorn's own format is off


def test_one_overall_progress_line_for_the_whole_run(tmp_path, capsys) -> None:
    # Issue 18: one bar for the run, not one per file; off a terminal, plain lines.
    from service.progress import Progress

    lines = []

    class Stream:
        def write(self, text: str) -> None:
            lines.append(text)

        def flush(self) -> None:
            pass

    bar = Progress("upload", total=3.0, unit="MiB", stream=Stream(), interval_s=0.0)
    for k in (1.0, 2.0, 3.0):
        bar.update(k)
    bar.close()
    assert all(t.startswith("upload: ") and t.endswith("\n") for t in lines)
    assert "3/3 MiB (100 %)" in lines[-1]


def test_a_name_where_an_id_belongs_is_refused_before_sending():
    # Metadata names records by id; a name used to reach the server's resume check, whose
    # HEAD answer has no body, and came back as a bare "HTTP 422".
    from service.uploader import _server_meta

    _, problem = _server_meta("scan", {"arena": "volcano-field", "units": "m"})
    assert "'arena' must be an arena id" in problem and "gaitscape arena list" in problem
    _, problem = _server_meta("trial", {"arena": "3", "subject": "biped", "units": "mm"})
    assert "'subject' must be a subject id" in problem
    meta, problem = _server_meta("trial", {"arena": "3", "subject": 4, "units": "mm"})
    assert problem == "" and meta["arena_id"] == "3" and meta["subject_id"] == 4
