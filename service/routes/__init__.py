"""One router per resource. A new resource is a new module here plus one line in ``ROUTERS``."""

from __future__ import annotations

from service.dashboard import data_router as dashboard_data
from service.routes import (
    analysis,
    arenas,
    correspondence,
    expected,
    jobs,
    marker_sets,
    recipes,
    report,
    scans,
    scores,
    status,
    studies,
    subjects,
    tokens,
    trials,
    uploads,
)

__all__ = ["ROUTERS"]

ROUTERS = [
    arenas.router,
    subjects.router,
    marker_sets.router,
    scans.router,
    trials.router,
    uploads.router,
    jobs.router,
    recipes.router,
    scores.router,
    tokens.router,
    correspondence.router,
    expected.router,
    analysis.router,
    studies.router,
    report.router,
    dashboard_data,
    status.router,
]
