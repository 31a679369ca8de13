"""Real jobs on a Dask ``LocalCluster`` on loopback (worker processes, not a mock)."""

from __future__ import annotations

from pathlib import Path

import pytest
from test_jobs import ROLES, Store

from service.pipeline import DaskPool
from service.pipeline.tasks import blas_threads, numba_threads

distributed = pytest.importorskip("distributed")


def _cluster() -> distributed.LocalCluster:
    return distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
        dashboard_address=None,
    )  # fmt: skip


@pytest.mark.integration
@pytest.mark.slow  # ~18 s: four worker processes start
def test_scan_jobs_run_on_a_local_dask_cluster(tmp_path: Path) -> None:
    lab = Store(tmp_path)
    scans = [lab.add_heightmap(seed=s) for s in (11, 12, 13)]
    jobs = [lab.enqueue("scan", s) for s in scans]
    with _cluster() as cluster, distributed.Client(cluster) as client:
        pool = DaskPool(client)
        assert pool.capacity() == 2
        # Dask workers have no pool initializer: the first task pins BLAS to one thread.
        assert pool.submit(blas_threads).result(timeout=120) == 1
        assert pool.submit(numba_threads).result(timeout=120) == 1
        lab.runner(pool).run_until_idle(300)
    for job_id, scan_id in zip(jobs, scans, strict=True):
        assert lab.job(job_id).state == "done"
        rows = lab.scores("scan", scan_id)
        assert {"sq_m", "hurst_psd"} <= {r.measure for r in rows}


@pytest.mark.integration
@pytest.mark.slow  # six trials scored on two Dask workers
def test_bad_trial_among_five_good_ones_fails_alone_on_dask(tmp_path: Path) -> None:
    # The bad trial's subject names a marker its file lacks; the measure's error crosses the
    # cluster by pickle with its message, and the good trials finish on their first attempt.
    lab = Store(tmp_path)
    good = [lab.add_trial(seed=60 + i) for i in range(5)]
    bad = lab.add_trial(seed=70, roles={**ROLES, "posterior": "tail_tip"})
    jobs = {t: lab.enqueue("trial", t) for t in [*good[:3], bad, *good[3:]]}
    with _cluster() as cluster, distributed.Client(cluster) as client:
        lab.runner(DaskPool(client)).run_until_idle(900)
    for trial_id, job_id in jobs.items():
        job = lab.job(job_id)
        if trial_id == bad:
            assert (job.state, job.attempts) == ("failed", 1)
            assert job.error.startswith("InvalidParameterError: ") and "'tail_tip'" in job.error
            assert "Traceback" not in job.error
        else:
            assert (job.state, job.attempts, job.error) == ("done", 1, None)
