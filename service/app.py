"""``create_app(settings)``: one FastAPI app with its own engine and artifact store.

Nothing is built at import time; each call opens the database named by ``settings`` (running
migrations) and keeps the handles on ``app.state``, so tests start isolated apps side by side.
"""

from __future__ import annotations

import asyncio
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from dataclasses import dataclass
from typing import Any

from fastapi import FastAPI, Response
from fastapi.middleware.cors import CORSMiddleware

from service import __version__
from service.api_docs import install_docs
from service.dashboard import page_router as dashboard_pages
from service.deps import FailedAuthLimiter
from service.errors import install_error_handlers
from service.openapi_text import OPENAPI_TAGS, describe_parameters
from service.pipeline import ensure_default_recipe, start_job_runner
from service.routes import ROUTERS
from service.schemas import Health
from service.security import install_hardening
from service.settings import Settings, get_settings

__all__ = ["Resources", "create_app", "open_resources"]

API_PREFIX = "/v1"

DESCRIPTION = """\
Scores terrain scans and movement trials with shared information-theoretic estimators and
reports their correspondence across arenas.

Every route but `/healthz` needs `Authorization: Bearer TOKEN`. Token scopes: `read` (look),
`upload` (add arenas, subjects, marker sets, scans, trials), `analyse` (run scoring), `admin`
(tokens; implies every scope). Errors are JSON `{"detail": ...}`.
"""


@dataclass(frozen=True)
class Resources:
    """The database and artifact-store handles one app (or one CLI command) works with."""

    engine: Any
    sessionmaker: Any
    store: Any


def open_resources(settings: Settings) -> Resources:
    """Create ``data_dir`` if needed, open and migrate the database, open the artifact store."""
    from storage.artifacts import ArtifactStore
    from storage.db import make_engine, make_sessionmaker, upgrade

    settings.data_dir.mkdir(parents=True, exist_ok=True)
    engine = make_engine(settings.resolved_database_url)
    upgrade(engine)
    return Resources(
        engine=engine,
        sessionmaker=make_sessionmaker(engine),
        store=ArtifactStore(settings.artifacts_dir),
    )


def create_app(settings: Settings | None = None) -> FastAPI:
    """Build the gaitscape API for ``settings`` (default: from the environment)."""
    settings = settings if settings is not None else get_settings()
    resources = open_resources(settings)

    with resources.sessionmaker() as session:
        ensure_default_recipe(session)

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        # The runner is a thread of its own; heavy work runs on its executor, never here.
        app.state.job_runner = start_job_runner(settings, resources)
        yield
        if app.state.job_runner is not None:
            await asyncio.to_thread(app.state.job_runner.stop)
        resources.engine.dispose()

    app = FastAPI(
        title="gaitscape",
        version=__version__,
        description=DESCRIPTION,
        lifespan=lifespan,
        # Served by install_docs from local files (no CDN): service/api_docs.py.
        docs_url=None,
        redoc_url=None,
        openapi_tags=OPENAPI_TAGS,
    )
    app.state.settings = settings
    app.state.engine = resources.engine
    app.state.sessionmaker = resources.sessionmaker
    app.state.store = resources.store
    app.state.job_runner = None
    app.state.auth_limiter = FailedAuthLimiter(
        limit=settings.auth_failure_limit, window_s=settings.auth_failure_window_s
    )
    if settings.cors_origins:
        app.add_middleware(
            CORSMiddleware,
            allow_origins=settings.cors_origins,
            allow_methods=["GET", "POST", "HEAD", "DELETE"],
            allow_headers=["Authorization", "Content-Type"],
        )
    install_error_handlers(app)
    install_hardening(app, settings)  # request ids, JSON logs, headers, body cap

    @app.get("/healthz", tags=["health"])
    def healthz() -> Health:
        """Liveness check; needs no token."""
        return Health(version=__version__)

    @app.get("/favicon.ico", include_in_schema=False)
    def favicon() -> Response:
        """No icon (204): browsers ask for one on every page, and a 404 is noise in logs."""
        return Response(status_code=204)

    for router in ROUTERS:
        app.include_router(router, prefix=API_PREFIX)
    app.include_router(dashboard_pages)  # HTML shells under /ui (service/dashboard)
    install_docs(app)  # /docs and /redoc from local assets (service/api_docs.py)
    describe_parameters(app)
    return app
