"""Jobs: the runner, retries after a dying worker or runner, attempt budget, idempotent scores.

Inputs are small synthetic heightmaps and trials from ``demo_arena`` (invented data, used as
inputs only). The checks are properties of the job machinery, stated beside each test.
"""

from __future__ import annotations

import os
from datetime import timedelta
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from sqlalchemy import func, select

import measures
from demo_arena import TRAYS, make_tray
from service.pipeline import (
    Compute,
    JobRunner,
    LocalPool,
    ensure_default_recipe,
    scan_flow,
)
from service.pipeline.recipes import default_parameters
from storage import repo
from storage.artifacts import ArtifactStore
from storage.db import make_engine, make_sessionmaker, sqlite_url, upgrade
from storage.models import Job, Score, utcnow

ROLES = {"anterior": "snout", "posterior": "tailbase",
         "feet": {f: f"foot_{f}" for f in ("LF", "RF", "LH", "RH")}}  # fmt: skip


class Store:
    """A migrated SQLite database and artifact store in ``root``, with one arena."""

    def __init__(self, root: Path, url: str | None = None) -> None:
        self.root = root
        self.engine = make_engine(url or sqlite_url(root / "data"))
        upgrade(self.engine)
        self.sessionmaker = make_sessionmaker(self.engine)
        self.store = ArtifactStore(root / "data" / "artifacts")
        with self.sessionmaker() as s:
            ensure_default_recipe(s)
            self.arena_id = repo.create_arena(
                session=s, name=f"tray-{root.name}", kind="runway", scale_band_m=(0.004, 0.05)
            ).id

    def add_heightmap(self, seed: int, shape_m: tuple[float, float] = (0.064, 0.064)) -> int:
        """A small tray heightmap (1 mm cells) as an NPY scan; returns the scan id."""
        z = make_tray(TRAYS[2], length_m=shape_m[1], width_m=shape_m[0], dx_m=0.001, seed=seed)
        path = self.root / f"hm-{seed}.npy"
        np.save(path, z, allow_pickle=False)
        with self.sessionmaker() as s:
            scan, _ = repo.ingest_scan(
                session=s, store=self.store, arena_id=self.arena_id,
                staged=self.store.put_file(path), filename=path.name,
                meta={"units": "m", "dx": 0.001, "dy": 0.001},
            )  # fmt: skip
            return scan.id

    def enqueue(self, kind: str, target_id: int, recipe_hash: str | None = None, **kw: Any) -> int:
        with self.sessionmaker() as s:
            return repo.enqueue_job(
                session=s, kind="score", target_kind=kind, target_id=target_id,
                recipe_hash=recipe_hash, **kw,
            ).id  # fmt: skip

    def job(self, job_id: int) -> Any:
        with self.sessionmaker() as s:
            return repo.get_job(session=s, job_id=job_id)

    def scores(self, kind: str, target_id: int) -> list[Any]:
        with self.sessionmaker() as s:
            return repo.list_scores(session=s, target_kind=kind, target_id=target_id, limit=1000)[0]

    def runner(self, pool: Any, **kw: Any) -> JobRunner:
        kw.setdefault("poll_s", 0.05)
        return JobRunner(sessionmaker=self.sessionmaker, store=self.store, executor=pool, **kw)


@pytest.fixture(scope="module")
def pool() -> Any:
    executor = LocalPool(1)
    yield executor
    executor.close()


@pytest.fixture
def lab(tmp_path: Path) -> Store:
    return Store(tmp_path)


def exit_on_first_call(flag: str) -> str:
    """Kill the worker process the first time (no cleanup, like a crash or an OOM kill)."""
    if not os.path.exists(flag):
        Path(flag).write_text("crashed once")
        os._exit(3)
    return "survived"


def always_fails(message: str) -> None:
    raise ValueError(message)


def crashing_scan_flow(flag: str):
    def flow(ctx):
        assert (yield Compute(exit_on_first_call, (flag,))) == "survived"
        yield from scan_flow(ctx)

    return flow


def test_scan_job_scores_with_reproducibility_fields_and_progress(lab: Store, pool: Any) -> None:
    scan_id = lab.add_heightmap(seed=1)
    job_id = lab.enqueue("scan", scan_id)
    events: list[tuple[int, float, str]] = []
    lab.runner(pool, listener=lambda *e: events.append(e)).run_until_idle(120)
    job = lab.job(job_id)
    assert (job.state, job.progress, job.attempts, job.error) == ("done", 1.0, 1, None)
    progress = [p for j, p, _ in events if j == job_id]
    # Progress rises through the stages and ends at 1 (the job contract in DESIGN.md).
    assert progress == sorted(progress) and progress[-1] == 1.0 and len(progress) >= 4
    rows = lab.scores("scan", scan_id)
    with lab.sessionmaker() as s:
        scan = repo.get_scan(session=s, scan_id=scan_id)
        default = repo.get_recipe(session=s, name="default")
    assert scan.heightmap_sha256 and lab.store.exists(scan.heightmap_sha256)
    names = {r.measure for r in rows}
    assert {"sq_m", "sdr", "hurst_psd", "permutation_entropy_2d"} <= names
    for r in rows:
        assert r.input_sha256 == scan.sha256
        assert r.recipe_hash == default.hash
        assert measures.__version__ in r.code_version
        assert r.unit is not None
    # Sq of the stored heightmap restricted to the arena band is positive and below the raw Sq.
    sq = next(r.value for r in rows if r.measure == "sq_m")
    assert 0 < sq < float(np.std(lab.store.get_array(scan.heightmap_sha256)))


def test_dead_worker_job_is_retried_and_scores_are_written_once(lab: Store, pool: Any) -> None:
    scan_id = lab.add_heightmap(seed=2)
    job_id = lab.enqueue("scan", scan_id)
    flag = str(lab.root / "crash-flag")
    runner = lab.runner(pool, flows={"scan": crashing_scan_flow(flag)})
    runner.run_until_idle(180)
    job = lab.job(job_id)
    assert Path(flag).exists()  # the worker really died once
    assert (job.state, job.attempts) == ("done", 2)
    first = {r.measure: (r.id, r.value) for r in lab.scores("scan", scan_id)}
    # Score the same target under the same recipe again: rows are updated in place.
    with lab.sessionmaker() as s:
        default_hash = repo.get_recipe(session=s, name="default").hash
    lab.enqueue("scan", scan_id, recipe_hash=default_hash)
    lab.runner(pool).run_until_idle(120)
    again = {r.measure: (r.id, r.value) for r in lab.scores("scan", scan_id)}
    assert again == first
    with lab.sessionmaker() as s:
        n = s.scalar(select(func.count()).select_from(Score))
    assert n == len(first)


def test_job_failing_every_attempt_ends_failed_with_its_error(lab: Store, pool: Any) -> None:
    scan_id = lab.add_heightmap(seed=3)
    job_id = lab.enqueue("scan", scan_id, max_attempts=3)

    def bad_flow(ctx):
        yield Compute(always_fails, ("terrain file unreadable: boom",))

    lab.runner(pool, flows={"scan": bad_flow}).run_until_idle(60)
    job = lab.job(job_id)
    assert (job.state, job.attempts) == ("failed", 3)
    assert "ValueError: terrain file unreadable: boom" in job.error
    assert lab.scores("scan", scan_id) == []


def test_expired_lease_of_a_dead_runner_is_claimed_again(lab: Store, pool: Any) -> None:
    scan_id = lab.add_heightmap(seed=4)
    job_id = lab.enqueue("scan", scan_id)
    with lab.sessionmaker() as s:  # a runner claims the job, then its process dies
        assert repo.claim_job(session=s, lease_s=300).id == job_id
    runner = lab.runner(pool)
    runner.run_until_idle(5)  # lease still valid: nobody may take the job
    assert lab.job(job_id).state == "running"
    with lab.sessionmaker() as s:
        s.get(Job, job_id).lease_until = utcnow() - timedelta(seconds=1)
        s.commit()
    runner.run_until_idle(120)
    job = lab.job(job_id)
    assert (job.state, job.attempts) == ("done", 2)


def test_new_recipe_version_leaves_old_scores_untouched(lab: Store, pool: Any) -> None:
    scan_id = lab.add_heightmap(seed=5)
    lab.enqueue("scan", scan_id)
    lab.runner(pool).run_until_idle(120)
    before = {
        (r.measure, r.recipe_hash): (r.value, r.computed_at) for r in lab.scores("scan", scan_id)
    }
    params = default_parameters()
    params["terrain"]["slope_bin_deg"] = 3.0
    with lab.sessionmaker() as s:
        v2, created = repo.create_recipe(session=s, name="default", parameters=params)
    assert created and v2.version == 2
    lab.enqueue("scan", scan_id, recipe_hash=v2.hash)
    lab.runner(pool).run_until_idle(120)
    rows = lab.scores("scan", scan_id)
    old = {
        (r.measure, r.recipe_hash): (r.value, r.computed_at)
        for r in rows
        if (r.measure, r.recipe_hash) in before
    }
    assert old == before
    new = {r.measure: r.value for r in rows if r.recipe_hash == v2.hash}
    assert len(new) == len(before)
    # Coarser slope bins hold fewer distinct outcomes: the plug-in entropy cannot grow
    # (grouping outcomes never increases Shannon entropy; Cover & Thomas 2006, ch. 2).
    old_h = next(v for (m, _), (v, _) in before.items() if m == "slope_entropy_bits")
    assert new["slope_entropy_bits"] <= old_h


def test_stop_hands_running_jobs_back_without_spending_an_attempt(lab: Store) -> None:
    scan_id = lab.add_heightmap(seed=6)
    job_id = lab.enqueue("scan", scan_id)
    slow = LocalPool(1)
    runner = lab.runner(slow)
    runner._claim()  # claims and submits the first stage, then we stop at once
    assert lab.job(job_id).state == "running"
    runner.stop()
    job = lab.job(job_id)
    assert (job.state, job.attempts) == ("queued", 0)
