"""Scoring pipeline: recipes, compute tasks, executors, flows and the job runner.

``start_job_runner(settings, resources)`` is what the app's lifespan calls; the demo and
benchmarks build a :class:`JobRunner` themselves and call ``run_until_idle()``.
"""

from __future__ import annotations

from typing import Any

from service.pipeline.executors import DaskPool, LocalPool, make_executor
from service.pipeline.flows import FLOWS, Compute, JobContext, scan_flow, trial_flow
from service.pipeline.recipes import (
    DEFAULT_RECIPE,
    complete_parameters,
    default_parameters,
    ensure_default_recipe,
    resolve_recipe,
)
from service.pipeline.runner import SCORE_JOB_KIND, JobRunner, is_infrastructure_error
from service.pipeline.tasks import DEFAULT_MAX_GRID_CELLS

__all__ = [
    "DEFAULT_MAX_GRID_CELLS",
    "DEFAULT_RECIPE",
    "FLOWS",
    "SCORE_JOB_KIND",
    "Compute",
    "DaskPool",
    "JobContext",
    "JobRunner",
    "LocalPool",
    "complete_parameters",
    "default_parameters",
    "ensure_default_recipe",
    "is_infrastructure_error",
    "make_executor",
    "resolve_recipe",
    "scan_flow",
    "start_job_runner",
    "trial_flow",
]


def start_job_runner(settings: Any, resources: Any) -> JobRunner | None:
    """Start the background runner unless jobs are off (``job_runner`` false, or no workers
    and no Dask scheduler); the executor is built lazily inside the runner thread."""
    if not settings.job_runner or (settings.workers < 1 and not settings.dask_scheduler):
        return None
    runner = JobRunner(
        sessionmaker=resources.sessionmaker,
        store=resources.store,
        executor=lambda: make_executor(settings),
        lease_s=settings.job_lease_s,
        poll_s=settings.job_poll_s,
        max_grid_cells=settings.max_grid_cells,
    )
    runner.start()
    return runner
