"""``gaitscape check``: the store verified against the database; repair never loses a row's file."""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pytest
from test_api import Lab, wide_csv, xyz_points

from service.check import check_store
from service.cli import main
from storage import repo


def _check(lab: Lab, **kwargs):
    state = lab.app.state
    return check_store(sessionmaker=state.sessionmaker, store=state.store, **kwargs)


def _filled(tmp_path: Path, rng: np.random.Generator) -> tuple[Lab, dict]:
    lab = Lab(tmp_path)
    trial = lab.post_trial(wide_csv(rng)).json()
    scan = lab.client.post(
        f"/v1/arenas/{lab.arena_id}/scans",
        files={"file": ("tray.xyz", xyz_points(rng))},
        data={"meta": json.dumps({"units": "mm"})},
    ).json()
    with lab.app.state.sessionmaker() as session:  # a derived array, as the pipeline leaves one
        repo.attach_artifact(
            session=session,
            store=lab.app.state.store,
            target_kind="trial",
            target_id=trial["id"],
            role="preprocessed",
            array=rng.normal(size=(5, 6, 3)),
        )
        # plot arrays as a scoring job stores them: named by a `derived` row, never orphans
        repo.save_derived(
            session=session,
            store=lab.app.state.store,
            target_kind="trial",
            target_id=trial["id"],
            recipe_hash="0" * 64,
            kind="movement_plots",
            arrays={"path_m": rng.normal(size=(10, 3))},
        )
        session.commit()
    return lab, {"trial": trial, "scan": scan}


@pytest.fixture
def filled(tmp_path: Path, rng: np.random.Generator) -> tuple[Lab, dict]:
    return _filled(tmp_path, rng)


def test_fresh_uploads_are_clean(filled) -> None:
    lab, _ = filled
    report = _check(lab)
    assert report.clean, report.table()
    assert report.rows_checked == 4 and report.artifacts_checked == 4
    assert "store is clean" in report.table()


def test_missing_file_is_reported_never_repaired_away(filled) -> None:
    lab, rows = filled
    store = lab.app.state.store
    store.path(rows["trial"]["sha256"]).unlink()
    report = _check(lab, repair=True, grace_s=0)
    assert report.damaged and report.count("missing") == 1
    assert report.count("missing", repaired=True) == 0
    assert lab.count("trial") == 1  # the row stays: it may be the only record there is


def test_corrupt_file_is_reported(filled) -> None:
    lab, rows = filled
    path = lab.app.state.store.path(rows["scan"]["sha256"])
    os.chmod(path, 0o644)
    path.write_bytes(path.read_bytes()[:-3] + b"999")
    report = _check(lab)
    assert report.count("corrupt") == 1 and report.damaged
    assert _check(lab, verify=False).count("corrupt") == 0  # existence-only mode skips hashing


def test_orphans_and_staging_respect_the_grace_period(filled) -> None:
    lab, _ = filled
    store = lab.app.state.store
    stray = store.put_bytes(b"an object no row names")
    (store.tmp_dir / "stage-crash.part").write_bytes(b"half an upl")
    report = _check(lab, repair=True)  # default grace: both are fresh, left alone
    assert report.count("orphan") == 1 and report.count("orphan", repaired=True) == 0
    assert report.count("staging") == 1 and store.exists(stray)
    repaired = _check(lab, repair=True, grace_s=0)
    assert repaired.count("orphan", repaired=True) == 1
    assert repaired.count("staging", repaired=True) == 1
    assert not store.exists(stray) and not any(store.tmp_dir.iterdir())
    assert _check(lab).clean  # and every row's file survived the repair


def test_stuck_job_is_requeued_spending_its_attempt(filled) -> None:
    lab, _ = filled
    with lab.app.state.sessionmaker() as session:
        # The upload queued a job; claim it with a lease already over (a runner that died).
        job = repo.claim_job(session=session, lease_s=-60.0)
        assert job is not None and job.state == "running"
        fresh = repo.enqueue_job(session=session, kind="other", target_kind="scan", target_id=1)
        live = repo.claim_job(session=session, lease_s=600.0, kinds=["other"])
        assert live is not None and live.id == fresh.id
    report = _check(lab)
    assert report.count("stuck_job") == 1 and report.jobs_checked == 2
    fixed = _check(lab, repair=True)
    assert fixed.count("stuck_job", repaired=True) == 1
    with lab.app.state.sessionmaker() as session:
        again = repo.get_job(session=session, job_id=job.id)
        assert again.state == "queued" and again.attempts == 1
        assert repo.get_job(session=session, job_id=live.id).state == "running"  # live lease


def test_cli_exit_status_and_table(filled, capsys: pytest.CaptureFixture[str]) -> None:
    lab, rows = filled
    data = str(lab.app.state.settings.data_dir)
    assert main(["check", "--data", data]) == 0
    assert "store is clean" in capsys.readouterr().out
    lab.app.state.store.put_bytes(b"stray")
    assert main(["check", "--data", data]) == 1
    assert main(["check", "--data", data, "--repair", "--grace-s", "0"]) == 0
    out = capsys.readouterr().out
    assert "orphan" in out and "yes" in out
    lab.app.state.store.path(rows["trial"]["sha256"]).unlink()
    assert main(["check", "--data", data, "--repair", "--grace-s", "0"]) == 2
