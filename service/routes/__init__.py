"""One router per resource. A new resource is a new module here plus one line in ``ROUTERS``."""

from __future__ import annotations

from service.routes import (
    arenas,
    correspondence,
    jobs,
    marker_sets,
    profiles,
    report,
    scans,
    scores,
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
    profiles.router,
    scores.router,
    tokens.router,
    correspondence.router,
    report.router,
]
