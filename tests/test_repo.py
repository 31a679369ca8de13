"""Repository: duplicates, all-or-nothing ingestion, filters, pagination, tokens, jobs.

Files are written with outside writers (numpy.save, ezc3d) as in test_readers.py.
Token secrets: ``secrets.token_urlsafe(32)`` gives 43 url-safe base64 characters
(Python docs, ``secrets`` module; RFC 4648 section 5 alphabet).
"""

from __future__ import annotations

import hashlib
import re
from datetime import UTC, datetime, timedelta
from types import SimpleNamespace

import numpy as np
import pytest

from storage import repo
from storage.artifacts import ArtifactStore
from storage.db import make_engine, make_sessionmaker, sqlite_url, upgrade
from storage.errors import BadInput, Conflict, NotFound, ReaderError
from storage.models import Scan, Trial

ROLES = {"anterior": "nose", "posterior": "tail",
         "feet": {"LF": "lf", "RF": "rf", "LH": "lh", "RH": "rh"}}  # fmt: skip


@pytest.fixture
def session(tmp_path):
    engine = make_engine(sqlite_url(tmp_path / "data"))
    upgrade(engine)
    with make_sessionmaker(engine)() as s:
        yield s
    engine.dispose()


@pytest.fixture
def store(tmp_path):
    return ArtifactStore(tmp_path / "data" / "artifacts")


@pytest.fixture
def arena(session):
    return repo.create_arena(session=session, name="sand tray", kind="open field",
                             scale_band_m=[0.002, 0.05])  # fmt: skip


@pytest.fixture
def subject(session):
    return repo.create_subject(session=session, label="q1", species="robot", marker_roles=ROLES)


def _npy_stage(store, tmp_path, arr, name="h.npy"):
    path = tmp_path / name
    np.save(path, arr)
    return store.put_file(path)


def _scan(session, store, tmp_path, arena, arr, **meta):
    staged = _npy_stage(store, tmp_path, arr)
    return repo.ingest_scan(session=session, store=store, arena_id=arena.id, staged=staged,
                            filename="h.npy", meta={"units": "mm", "dx": 1.0, **meta})  # fmt: skip


def _only_row_artifacts(store, session):
    referenced = {r.sha256 for r in session.query(Scan)} | {r.sha256 for r in session.query(Trial)}
    return set(store.iter_shas()) == referenced and not any(store.tmp_dir.iterdir())


# --- catalog ----------------------------------------------------------------------------
def test_arena_kind_normalised_and_validated(session, arena):
    assert arena.kind == "open_field" and arena.scale_band_m == (0.002, 0.05)
    with pytest.raises(BadInput, match="arena kind"):
        repo.create_arena(session=session, name="x", kind="swamp")
    with pytest.raises(BadInput, match="0 < low < high"):
        repo.create_arena(session=session, name="x", kind="runway", scale_band_m=[0.1, 0.01])
    with pytest.raises(Conflict):
        repo.create_arena(session=session, name="sand tray", kind="runway")
    with pytest.raises(NotFound):
        repo.get_arena(session=session, arena_id=12345)


def test_subject_with_roles_makes_a_marker_set(session, subject):
    assert subject.marker_set.name == "q1 markers"
    assert subject.marker_set.marker_names == ["nose", "tail", "lf", "rf", "lh", "rh"]
    bad = {**ROLES, "posterior": "nose"}
    with pytest.raises(BadInput, match="both anterior and posterior"):
        repo.create_subject(session=session, label="q2", species="x", marker_roles=bad)
    with pytest.raises(BadInput, match="feet"):
        one_leg = {"anterior": "a", "posterior": "b", "feet": {"LF": "c"}}
        repo.create_subject(session=session, label="q3", species="x", marker_roles=one_leg)


def test_pagination_and_filters(session):
    for i in range(7):
        repo.create_arena(session=session, name=f"a{i}", kind="runway" if i % 2 else "treadmill")
    rows, count = repo.list_arenas(session=session, offset=2, limit=3)
    assert count == 7 and [r.name for r in rows] == ["a2", "a3", "a4"]
    rows, count = repo.list_arenas(session=session, kind="runway", limit=100)
    assert count == 3 and all(r.kind == "runway" for r in rows)
    with pytest.raises(BadInput):
        repo.list_arenas(session=session, limit=0)
    with pytest.raises(BadInput):
        repo.list_arenas(session=session, offset=-1)


# --- scans ------------------------------------------------------------------------------
def test_scan_ingest_and_duplicate(session, store, tmp_path, arena, rng):
    z = rng.normal(size=(8, 9))
    scan, created = _scan(session, store, tmp_path, arena, z)
    assert created and scan.kind == "heightmap" and scan.dx_m == 1e-3
    assert scan.sha256 == hashlib.sha256((tmp_path / "h.npy").read_bytes()).hexdigest()
    again, created = _scan(session, store, tmp_path, arena, z)
    assert not created and again.id == scan.id
    assert repo.list_scans(session=session, arena_id=arena.id)[1] == 1
    assert _only_row_artifacts(store, session)
    other = repo.create_arena(session=session, name="gravel", kind="runway")
    moved, created = _scan(session, store, tmp_path, other, z)  # same file, other target
    assert created and moved.id != scan.id and len(list(store.iter_shas())) == 1
    assert [r.id for r in repo.find_by_sha256(session=session, sha256=scan.sha256)] == [
        scan.id, moved.id]  # fmt: skip
    data = repo.load_scan_data(session=session, store=store, scan_id=scan.id)
    np.testing.assert_allclose(data.z, z * 1e-3)


def test_reader_failure_stores_nothing(session, store, tmp_path, arena, rng):
    with pytest.raises(ReaderError, match="no grid spacing"):
        _scan(session, store, tmp_path, arena, rng.normal(size=(4, 4)), dx=None)
    assert repo.list_scans(session=session)[1] == 0
    assert list(store.iter_shas()) == [] and not any(store.tmp_dir.iterdir())


def test_failure_between_artifact_and_commit_leaves_no_orphan(session, store, tmp_path,
                                                              arena, rng, monkeypatch):  # fmt: skip
    real_commit = session.commit

    def broken_commit():
        raise RuntimeError("database went away")

    monkeypatch.setattr(session, "commit", broken_commit)
    with pytest.raises(RuntimeError):
        _scan(session, store, tmp_path, arena, rng.normal(size=(4, 4)))
    monkeypatch.setattr(session, "commit", real_commit)
    assert repo.list_scans(session=session)[1] == 0
    assert list(store.iter_shas()) == [] and not any(store.tmp_dir.iterdir())


def test_failed_commit_keeps_an_artifact_another_row_uses(session, store, tmp_path, arena,
                                                          rng, monkeypatch):  # fmt: skip
    z = rng.normal(size=(4, 4))
    first, _ = _scan(session, store, tmp_path, arena, z)
    other = repo.create_arena(session=session, name="b", kind="runway")
    monkeypatch.setattr(session, "commit", lambda: (_ for _ in ()).throw(RuntimeError("x")))
    with pytest.raises(RuntimeError):
        _scan(session, store, tmp_path, other, z)
    monkeypatch.undo()
    assert store.exists(first.sha256) and store.verify(first.sha256)


def test_unknown_arena_discards_the_upload(session, store, tmp_path, rng):
    staged = _npy_stage(store, tmp_path, rng.normal(size=(4, 4)))
    with pytest.raises(NotFound):
        repo.ingest_scan(session=session, store=store, arena_id=99, staged=staged,
                         filename="h.npy", meta={"units": "mm", "dx": 1})  # fmt: skip
    assert not staged.path.exists()


def test_attach_heightmap(session, store, tmp_path, arena, rng):
    scan, _ = _scan(session, store, tmp_path, arena, rng.normal(size=(4, 4)))
    z = rng.normal(size=(5, 6))
    valid = z > 0
    row = repo.attach_heightmap(session=session, store=store, scan_id=scan.id, z=z, valid=valid,
                                dx_m=1e-3, dy_m=2e-3)  # fmt: skip
    np.testing.assert_array_equal(store.get_array(row.heightmap_sha256), z)
    np.testing.assert_array_equal(store.get_array(row.valid_mask_sha256), valid)
    assert (row.grid_ny, row.grid_nx, row.dy_m) == (5, 6, 2e-3)
    with pytest.raises(BadInput, match="unknown artifact role"):
        repo.attach_artifact(session=session, store=store, target_kind="scan", target_id=scan.id,
                             role="preprocessed", array=z)  # fmt: skip


# --- trials -----------------------------------------------------------------------------
def _trial(session, store, tmp_path, arena, subject, arr, name="t.npy", **meta):
    staged = _npy_stage(store, tmp_path, arr, name)
    base = {"arena_id": arena.id, "subject_id": subject.id, "units": "mm",
            "frame_rate_hz": 300, "marker_names": ["nose", "tail"]}  # fmt: skip
    return repo.ingest_trial(session=session, store=store, staged=staged, filename=name,
                             meta={**base, **meta})  # fmt: skip


def test_trial_ingest_duplicate_and_filters(session, store, tmp_path, arena, subject, rng):
    walk = rng.normal(size=(20, 2, 3))
    t1, created = _trial(session, store, tmp_path, arena, subject, walk, condition="dry",
                         recorded_at="2026-03-01T10:00:00+00:00")  # fmt: skip
    assert created and t1.frame_rate_hz == 300 and t1.marker_names == ["nose", "tail"]
    dup, created = _trial(session, store, tmp_path, arena, subject, walk, condition="dry")
    assert not created and dup.id == t1.id
    t2, _ = _trial(session, store, tmp_path, arena, subject, walk + 1, name="u.npy",
                   condition="wet", recorded_at="2026-04-01T10:00:00Z")  # fmt: skip
    rows, n = repo.list_trials(session=session, condition="wet")
    assert n == 1 and rows[0].id == t2.id
    cut = datetime(2026, 3, 15, tzinfo=UTC)
    assert [r.id for r in repo.list_trials(session=session, recorded_after=cut)[0]] == [t2.id]
    assert [r.id for r in repo.list_trials(session=session, recorded_before=cut)[0]] == [t1.id]
    assert repo.list_trials(session=session, subject_id=subject.id)[1] == 2
    data = repo.load_trial_data(session=session, store=store, trial_id=t1.id)
    np.testing.assert_allclose(data.markers, walk * 1e-3)


def test_trial_needs_ids(session, store, tmp_path, arena, subject, rng):
    with pytest.raises(BadInput, match="subject_id"):
        _trial(session, store, tmp_path, arena, subject, rng.normal(size=(5, 2, 3)),
               subject_id=None)  # fmt: skip
    with pytest.raises(NotFound):
        _trial(session, store, tmp_path, arena, subject, rng.normal(size=(5, 2, 3)),
               subject_id=999)  # fmt: skip
    assert list(store.iter_shas()) == [] and not any(store.tmp_dir.iterdir())


# --- recipes, scores, jobs -------------------------------------------------------------
def test_recipes_version_and_hash(session):
    p1, c1 = repo.create_recipe(session=session, name="default", parameters={"b": 1, "a": 2})
    p1b, c1b = repo.create_recipe(session=session, name="default", parameters={"a": 2, "b": 1})
    p2, _ = repo.create_recipe(session=session, name="default", parameters={"a": 3})
    assert c1 and not c1b and p1b.id == p1.id and p2.version == 2
    # canonical JSON: sorted keys, no spaces
    assert p1.hash == hashlib.sha256(b'{"a":2,"b":1}').hexdigest()
    assert repo.get_recipe(session=session, name="default").version == 2


def test_scores_upsert_on_the_unique_key(session):
    s = [SimpleNamespace(name="Sq", value=1.5, unit="m", ci_low=None, ci_high=None,
                         surrogate_z=float("nan"))]  # fmt: skip
    kw = dict(session=session, target_kind="scan", target_id=1, recipe_hash="p" * 64,
              code_version="0.1.0", input_sha256="a" * 64)  # fmt: skip
    repo.save_scores(scores=s, **kw)
    s[0].value = 2.5
    repo.save_scores(scores=s, **kw)
    rows, n = repo.list_scores(session=session, target_kind="scan", target_id=1)
    assert n == 1 and rows[0].value == 2.5 and rows[0].surrogate_z is None


def test_jobs_enqueue_claim_fail_retry(session):
    job = repo.enqueue_job(session=session, kind="score", target_kind="trial", target_id=3,
                           max_attempts=2)  # fmt: skip
    same = repo.enqueue_job(session=session, kind="score", target_kind="trial", target_id=3)
    assert same.id == job.id and job.state == "queued"
    claimed = repo.claim_job(session=session, lease_s=60)
    assert claimed.id == job.id and claimed.state == "running" and claimed.attempts == 1
    assert repo.claim_job(session=session) is None
    assert repo.fail_job(session=session, job_id=job.id, error="boom").state == "queued"
    repo.claim_job(session=session)
    failed = repo.fail_job(session=session, job_id=job.id, error="boom")
    assert failed.state == "failed" and failed.error == "boom"
    job2 = repo.enqueue_job(session=session, kind="score", target_kind="scan", target_id=1)
    repo.claim_job(session=session, lease_s=-1)  # lease already expired: reclaimable
    again = repo.claim_job(session=session)
    assert again.id == job2.id and again.attempts == 2
    repo.update_job(session=session, job_id=job2.id, progress=0.5, message="half")
    done = repo.finish_job(session=session, job_id=job2.id)
    assert done.state == "done" and done.progress == 1.0
    assert repo.latest_job(session=session, target_kind="scan", target_id=1).id == job2.id


# --- tokens -----------------------------------------------------------------------------
def test_token_verify_revoke_expire(session):
    token, secret = repo.create_token(session=session, scopes=["upload", "read"], label="rig")
    assert re.fullmatch(r"gaitscape_[A-Za-z0-9_-]{43}", secret)  # token_urlsafe(32): 43 chars
    assert token.secret_sha256 == hashlib.sha256(secret.encode()).hexdigest()
    assert secret not in (token.scopes, token.label, token.secret_sha256)
    assert repo.authenticate(session=session, secret=secret).id == token.id
    assert token.allows("upload") and not token.allows("admin")
    assert repo.authenticate(session=session, secret=secret + "x") is None
    assert repo.authenticate(session=session, secret="") is None
    repo.revoke_token(session=session, token_id=token.id)
    assert repo.authenticate(session=session, secret=secret) is None
    with pytest.raises(Conflict):
        repo.revoke_token(session=session, token_id=token.id)
    past = datetime.now(UTC) - timedelta(seconds=1)
    _, old = repo.create_token(session=session, scopes="admin", expires_at=past)
    assert repo.authenticate(session=session, secret=old) is None
    future = datetime.now(UTC) + timedelta(days=1)
    _, fresh = repo.create_token(session=session, scopes="admin", expires_at=future)
    assert repo.authenticate(session=session, secret=fresh).allows("analyse")
    assert repo.list_tokens(session=session)[1] == 2  # revoked one hidden
    with pytest.raises(BadInput, match="scopes"):
        repo.create_token(session=session, scopes=["root"])
