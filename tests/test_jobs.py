"""Jobs: the runner, retries after a dying worker or runner, attempt budget, idempotent scores,
fault isolation (a bad job fails alone, with its own message, and costs nobody an attempt),
notes beside missing values, the grid cap and the arrays stored for later views.

Inputs are small synthetic heightmaps and trials from ``demo_arena`` (invented data, used as
inputs only). The checks are properties of the job machinery, stated beside each test.
"""

from __future__ import annotations

import importlib
import inspect
import os
import pickle
import pkgutil
import threading
import time
from concurrent.futures.process import BrokenProcessPool
from datetime import timedelta
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from sqlalchemy import func, select

import measures
import storage
from demo_arena import SUBJECTS, TRAYS, make_tray, walk_over
from demo_arena.files import write_csv_wide
from measures.errors import InsufficientDataError, InvalidParameterError
from service.pipeline import (
    Compute,
    JobRunner,
    LocalPool,
    ensure_default_recipe,
    is_infrastructure_error,
    scan_flow,
)
from service.pipeline.recipes import default_parameters
from service.pipeline.tasks import blas_threads, numba_threads
from storage import repo
from storage.artifacts import ArtifactStore
from storage.db import make_engine, make_sessionmaker, sqlite_url, upgrade
from storage.errors import BadInput, NotFound, StorageError
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

    def add_trial(
        self, seed: int, *, roles: dict[str, Any] | None = None, duration_s: float = 2.0
    ) -> int:
        """A demo walk (300 Hz, CSV in mm) of a new subject with ``roles``; the trial id."""
        z = make_tray(TRAYS[2], length_m=0.6, width_m=0.12, dx_m=0.001, seed=seed)
        rec = walk_over(z, 0.001, SUBJECTS[0], duration_s=duration_s, seed=seed)
        path = self.root / f"walk-{seed}.csv"
        write_csv_wide(path, rec.markers, rec.marker_names, rec.frame_rate_hz)
        with self.sessionmaker() as s:
            subject = repo.create_subject(session=s, label=f"s{seed}", marker_roles=roles or ROLES)
            trial, _ = repo.ingest_trial(
                session=s, store=self.store, staged=self.store.put_file(path),
                filename=path.name,
                meta={"arena_id": self.arena_id, "subject_id": subject.id, "units": "mm"},
            )  # fmt: skip
            return trial.id

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
    # Every missing value has its reason; a full heightmap file has no holes.
    assert all(r.note for r in rows if r.value is None)
    assert next(r.value for r in rows if r.measure == "heightmap_hole_fraction") == 0.0
    with lab.sessionmaker() as s:
        plots = repo.load_derived(session=s, store=lab.store, target_kind="scan",
                                  target_id=scan_id, recipe_hash=default.hash,
                                  kind="terrain_plots")  # fmt: skip
    assert plots["radial_q"].shape == plots["radial_psd"].shape and plots["radial_q"].size > 3
    assert plots["hillshade"].ndim == 2


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


def test_deterministic_failure_ends_at_once_with_type_and_message_only(
    lab: Store, pool: Any
) -> None:
    # A task's own error is deterministic: running it again gives the same error, so it is
    # not retried, and the job record holds "Type: message" without a traceback.
    scan_id = lab.add_heightmap(seed=3)
    job_id = lab.enqueue("scan", scan_id, max_attempts=3)

    def bad_flow(ctx):
        yield Compute(always_fails, ("terrain file unreadable: boom",))

    lab.runner(pool, flows={"scan": bad_flow}).run_until_idle(60)
    job = lab.job(job_id)
    assert (job.state, job.attempts) == ("failed", 1)
    assert job.error == "ValueError: terrain file unreadable: boom"
    assert lab.scores("scan", scan_id) == []


def test_infrastructure_errors_are_told_from_deterministic_ones() -> None:
    from sqlalchemy.exc import OperationalError

    assert is_infrastructure_error(BrokenProcessPool("a worker died"))
    assert is_infrastructure_error(OperationalError("SELECT 1", {}, Exception("locked")))
    for exc in (
        InvalidParameterError("dx_m", "f", "positive", -1.0),
        InsufficientDataError("x", "f", "at least 10 samples", 3),
        BadInput("unreadable", file="a.csv"),
        ValueError("bad"),
        MemoryError(),
    ):
        assert not is_infrastructure_error(exc), exc
    distributed = pytest.importorskip("distributed")
    assert is_infrastructure_error(distributed.KilledWorker("task", "worker", 3))


def _error_classes(package: Any) -> list[type[BaseException]]:
    found = set()
    for info in pkgutil.walk_packages(package.__path__, package.__name__ + "."):
        if ".migrations" in info.name:  # Alembic scripts run only under Alembic
            continue
        module = importlib.import_module(info.name)
        for _, obj in inspect.getmembers(module, inspect.isclass):
            if issubclass(obj, BaseException) and obj.__module__.startswith(package.__name__):
                found.add(obj)
    return sorted(found, key=lambda c: c.__qualname__)


def _instance(cls: type[BaseException]) -> BaseException:
    # Fill every required argument with a distinct string: the message must carry them.
    params = list(inspect.signature(cls.__init__).parameters.values())[1:]
    args, kwargs = [], {}
    for p in params:
        if p.default is not inspect.Parameter.empty or p.kind in (p.VAR_POSITIONAL, p.VAR_KEYWORD):
            continue
        if p.kind is p.KEYWORD_ONLY:
            kwargs[p.name] = f"<{p.name}>"
        else:
            args.append(f"<{p.name}>")
    if not params or all(p.kind in (p.VAR_POSITIONAL, p.VAR_KEYWORD) for p in params):
        args = ["<message>"]
    return cls(*args, **kwargs)


def test_every_error_class_of_measures_and_storage_survives_pickling() -> None:
    # Errors travel from worker processes to the runner by pickle; a class whose __init__
    # takes other arguments than its message cannot be unpickled by default, and that broke
    # the process pool and lost the message.
    classes = _error_classes(measures) + _error_classes(storage)
    names = {c.__name__ for c in classes}
    assert {"InvalidParameterError", "InsufficientDataError", "NotFound", "TooLarge"} <= names
    for cls in classes:
        exc = _instance(cls)
        back = pickle.loads(pickle.dumps(exc))
        assert type(back) is cls
        assert str(back) == str(exc) and str(exc), cls
        assert vars(back) == vars(exc), cls
    extra = NotFound("scan", 7)
    assert pickle.loads(pickle.dumps(extra)).ident == 7
    assert isinstance(pickle.loads(pickle.dumps(extra)), StorageError)


def sleep_then(value: int, seconds: float) -> int:
    time.sleep(seconds)
    return value


def die_after(seconds: float) -> None:
    time.sleep(seconds)
    os._exit(9)


@pytest.mark.slow  # ~50 s: the pool is started again after every death
def test_worker_death_charges_only_the_culprit(lab: Store) -> None:
    # Two workers, four jobs: the one whose stage kills its worker breaks the whole pool, and
    # every stage in flight fails with BrokenProcessPool. Only the culprit may spend attempts;
    # the others finish on their first one.
    scans = [lab.add_heightmap(seed=30 + i, shape_m=(0.016, 0.016)) for i in range(4)]
    jobs = {s: lab.enqueue("scan", s, max_attempts=2) for s in scans}
    culprit = scans[1]

    def flow(ctx):
        ctx.input_sha256 = "0" * 64
        if ctx.target_id == culprit:
            yield Compute(die_after, (0.5,))
        assert (yield Compute(sleep_then, (ctx.target_id, 1.0))) == ctx.target_id

    pool = LocalPool(2)
    try:
        lab.runner(pool, flows={"scan": flow}).run_until_idle(240)
    finally:
        pool.close()
    for scan_id, job_id in jobs.items():
        job = lab.job(job_id)
        if scan_id == culprit:
            assert (job.state, job.attempts) == ("failed", 2)
            assert job.error.startswith("WorkerDied: ")
        else:
            assert (job.state, job.attempts, job.error) == ("done", 1, None), scan_id


def test_grid_past_the_cap_is_refused_with_a_reason_stored(lab: Store, pool: Any) -> None:
    # A 16 x 16 grid is 256 cells; a cap of 100 refuses it before the summary allocates
    # anything, once (deterministic), and the missing scores say why.
    scan_id = lab.add_heightmap(seed=7, shape_m=(0.016, 0.016))
    job_id = lab.enqueue("scan", scan_id)
    lab.runner(pool, max_grid_cells=100).run_until_idle(60)
    job = lab.job(job_id)
    assert (job.state, job.attempts) == ("failed", 1)
    assert job.error.startswith("InvalidParameterError: ")
    assert "GAITSCAPE_MAX_GRID_CELLS" in job.error and "256 cells" in job.error
    rows = lab.scores("scan", scan_id)
    assert rows and all(r.value is None for r in rows)
    assert all("GAITSCAPE_MAX_GRID_CELLS" in r.note for r in rows)


@pytest.mark.slow  # six trials scored on a 2-worker pool
def test_bad_trial_among_five_good_ones_fails_alone_on_the_local_pool(lab: Store) -> None:
    # The subject of the bad trial names a marker its file lacks: the measure raises in the
    # worker; the error must come back whole and cost the others nothing.
    bad_roles = {**ROLES, "anterior": "nose"}
    good = [lab.add_trial(seed=40, duration_s=5.0)] + [lab.add_trial(seed=41 + i) for i in range(4)]
    bad = lab.add_trial(seed=50, roles=bad_roles)
    jobs = {t: lab.enqueue("trial", t) for t in [*good[:2], bad, *good[2:]]}
    pool = LocalPool(2)
    try:
        lab.runner(pool).run_until_idle(600)
    finally:
        pool.close()
    for trial_id, job_id in jobs.items():
        job = lab.job(job_id)
        if trial_id == bad:
            assert (job.state, job.attempts) == ("failed", 1)
            assert job.error.startswith("InvalidParameterError: ") and "'nose'" in job.error
            rows = lab.scores("trial", bad)
            assert rows and all(r.value is None and "'nose'" in r.note for r in rows)
        else:
            assert (job.state, job.attempts, job.error) == ("done", 1, None)
    check_trial_outputs(lab, good[0])


def check_trial_outputs(lab: Store, trial_id: int) -> None:
    """Every missing value has its note; plot arrays and per-window measures are stored."""
    rows = lab.scores("trial", trial_id)
    assert {"stride_frequency_hz", "rqa_det", "flagged_frame_fraction"} <= {r.measure for r in rows}
    assert all(r.note for r in rows if r.value is None)
    flagged = next(r.value for r in rows if r.measure == "flagged_frame_fraction")
    assert 0.0 <= flagged <= 1.0
    with lab.sessionmaker() as s:
        recipe_hash = rows[0].recipe_hash
        plots = repo.load_derived(session=s, store=lab.store, target_kind="trial",
                                  target_id=trial_id, recipe_hash=recipe_hash,
                                  kind="movement_plots")  # fmt: skip
        windows = repo.load_derived(session=s, store=lab.store, target_kind="trial",
                                    target_id=trial_id, recipe_hash=recipe_hash,
                                    kind="movement_windows")  # fmt: skip
    assert plots["signal"].shape == plots["signal_time_s"].shape and plots["signal"].size > 100
    assert plots["recurrence_image"].ndim == 2
    n = windows["window_start_s"].size
    # 5 s of walking in non-overlapping 2 s windows: one or two whole windows.
    assert 1 <= n <= 2 and windows["m_rqa_det"].shape == (n,)
    assert np.all(windows["window_stop_s"] > windows["window_start_s"])
    assert windows["path_origin_m"].shape == (windows["path_time_s"].size, 3)


def test_run_until_idle_reports_progress_and_has_no_deadline_by_default(
    lab: Store, pool: Any
) -> None:
    # A loaded machine is slow, not broken: no fixed deadline unless one is asked for; the
    # callback sees the job counts (what a progress bar draws) end with everything done.
    scans = [lab.add_heightmap(seed=80 + i, shape_m=(0.016, 0.016)) for i in range(2)]
    for s in scans:
        lab.enqueue("scan", s)

    def flow(ctx):
        yield Compute(sleep_then, (ctx.target_id, 0.2))

    seen: list[dict[str, int]] = []
    runner = lab.runner(pool, flows={"scan": flow})
    assert inspect.signature(runner.run_until_idle).parameters["timeout"].default is None
    runner.run_until_idle(on_progress=seen.append)
    assert seen and seen[-1] == {"queued": 0, "running": 0, "done": 2, "failed": 0}
    assert any(c["running"] for c in seen)
    lab.enqueue("scan", lab.add_heightmap(seed=90, shape_m=(0.016, 0.016)))

    def slow_flow(ctx):
        yield Compute(sleep_then, (0, 5.0))

    with pytest.raises(TimeoutError):
        lab.runner(pool, flows={"scan": slow_flow}).run_until_idle(0.5)


def test_blas_is_pinned_to_one_thread_in_local_workers(pool: Any) -> None:
    assert pool.submit(blas_threads).result(timeout=120) == 1


def test_numba_is_pinned_to_one_thread_in_local_workers(pool: Any) -> None:
    # One job per core already: a parallel kernel's extra threads would only spin.
    assert pool.submit(numba_threads).result(timeout=120) == 1


@pytest.mark.slow  # two workers import the scoring stack (~5 s)
def test_a_local_pool_started_early_has_every_worker_up_and_prepared() -> None:
    pool = LocalPool(2)
    try:
        pids = [f.result(timeout=300) for f in pool.start()]
        # One spawn per call while no worker is idle: both workers exist before any job.
        assert len(pool.worker_pids()) == 2
        assert set(pids) <= set(pool.worker_pids())
        assert pool.submit(numba_threads).result(timeout=120) == 1
    finally:
        pool.close()


def test_a_local_pool_holds_two_stages_per_worker_and_reports_one_slot(
    lab: Store, pool: Any
) -> None:
    for seed in (31, 32, 33):
        lab.enqueue("scan", lab.add_heightmap(seed=seed, shape_m=(0.016, 0.016)))

    def slow_flow(ctx):
        yield Compute(sleep_then, (0, 1.0))

    runner = lab.runner(pool, flows={"scan": slow_flow})
    runner._step()  # one pass claims what may be in flight
    with lab.sessionmaker() as s:
        counts = repo.job_counts(session=s, kind="score")
    # One worker: the second stage waits in the pool's queue, the third job in the database.
    assert (counts["running"], counts["queued"]) == (2, 1)
    assert pool.capacity() == 1  # what /v1/status reports as compute slots
    runner.run_until_idle(120)


def test_warm_builds_the_executor_once_from_any_thread(lab: Store) -> None:
    built: list[Any] = []

    class Starting:
        started = 0

        def start(self) -> None:
            self.started += 1

        def capacity(self) -> int:
            return 1

        def close(self) -> None:
            pass

    def make() -> Starting:
        time.sleep(0.2)  # a slow build (a Dask client connecting) widens any race
        built.append(Starting())
        return built[-1]

    runner = lab.runner(make)
    threads = [threading.Thread(target=runner.warm) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert len(built) == 1 and built[0].started == 4
    runner.stop()


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


def test_notes_go_to_the_score_they_name_and_no_nan_is_left_without_one() -> None:
    from measures import Score
    from service.pipeline.flows import with_notes

    nan = float("nan")
    rows = with_notes(
        [Score("hurst_psd", nan, "1"), Score("sq_m", 0.01, "m"), Score("sdr", nan, "1"),
         Score("str", 0.4, "1")],
        ["hurst psd: no self-affine band found", "str: the ACF did not decay; upper bound",
         "information scores: holes filled with the mean height"],
        context=["only 40% of frames were valid after preprocessing"],
    )  # fmt: skip
    notes = {r.name: r.note for r in rows}
    assert notes["hurst_psd"] == "hurst psd: no self-affine band found"
    assert notes["str"] == "str: the ACF did not decay; upper bound"
    assert notes["sq_m"] == ""
    # No note names sdr: it gets the summary's other notes and the run's context.
    assert notes["sdr"].startswith("no value: information scores") and "40%" in notes["sdr"]
    bare = with_notes([Score("rqa_det", nan, "1")])
    assert bare[0].note.startswith("no value: ")
