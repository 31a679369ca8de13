"""Real jobs on a Dask ``LocalCluster`` on loopback (worker processes, not a mock)."""

from __future__ import annotations

from pathlib import Path

import pytest
from test_jobs import Store

from service.pipeline import DaskPool

distributed = pytest.importorskip("distributed")


@pytest.mark.integration
@pytest.mark.slow  # ~18 s: four worker processes start
def test_scan_jobs_run_on_a_local_dask_cluster(tmp_path: Path) -> None:
    lab = Store(tmp_path)
    scans = [lab.add_heightmap(seed=s) for s in (11, 12, 13)]
    jobs = [lab.enqueue("scan", s) for s in scans]
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
        dashboard_address=None,
    ) as cluster, distributed.Client(cluster) as client:  # fmt: skip
        pool = DaskPool(client)
        assert pool.capacity() == 2
        lab.runner(pool).run_until_idle(300)
    for job_id, scan_id in zip(jobs, scans, strict=True):
        assert lab.job(job_id).state == "done"
        rows = lab.scores("scan", scan_id)
        assert {"sq_m", "hurst_psd"} <= {r.measure for r in rows}
