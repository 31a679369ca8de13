"""One router per resource. A new resource is a new module here plus one line in ``ROUTERS``."""

from __future__ import annotations

from service.routes import arenas, jobs, marker_sets, scans, subjects, tokens, trials, uploads

__all__ = ["ROUTERS"]

ROUTERS = [
    arenas.router,
    subjects.router,
    marker_sets.router,
    scans.router,
    trials.router,
    uploads.router,
    jobs.router,
    tokens.router,
]
