"""The correspondence report as one self-contained HTML page (figures inline)."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Query, Request
from fastapi.responses import HTMLResponse
from starlette.concurrency import run_in_threadpool

from service.deps import ReadToken
from service.report import convention as cv

router = APIRouter(tags=["correspondence"])

REPORT_HEADERS = {
    "Content-Security-Policy": cv.REPORT_CSP,
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",
    "Cache-Control": "no-store",
}


@router.get("/correspondence/report", response_class=HTMLResponse)
async def get_report(
    request: Request,
    token: ReadToken,
    recipe: Annotated[str, Query(description="Recipe name whose scores are used.")] = "default",
    version: Annotated[
        int | None, Query(description="Recipe version (default: the latest).")
    ] = None,
    n_permutations: Annotated[
        int, Query(ge=99, le=99_999, description="Arena permutations (the dashboard's too).")
    ] = cv.N_PERMUTATIONS,
    n_boot: Annotated[
        int, Query(ge=99, le=99_999, description="Hierarchical bootstrap replicates.")
    ] = cv.N_BOOT,
    seed: Annotated[int, Query(description="Seed of permutations and bootstrap.")] = cv.SEED,
    study: Annotated[
        str | None, Query(description="Limit the report to this study (404 when unknown).")
    ] = None,
) -> HTMLResponse:
    """The report (study summary, terrain, movement, correspondence, warnings) as HTML."""
    study = study.strip() if study and study.strip() else None

    from service.report import render_report  # matplotlib and the analysis layer: on first use

    def compute() -> str:
        with request.app.state.sessionmaker() as session:
            return render_report(
                session=session,
                store=request.app.state.store,
                recipe=recipe,
                version=version,
                n_permutations=n_permutations,
                n_boot=n_boot,
                seed=seed,
                study=study,
            )

    html = await run_in_threadpool(compute)
    return HTMLResponse(html, headers=REPORT_HEADERS)
