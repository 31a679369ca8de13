"""Jobs: the scoring work queued for each upload, and re-scoring under any recipe."""

from __future__ import annotations

from typing import Literal

from fastapi import APIRouter, status

from service.deps import AnalyseToken, ReadOrAnalyseToken, SessionDep
from service.pipeline import SCORE_JOB_KIND
from service.routes.arenas import Limit, Offset
from service.schemas import (
    JobDetail,
    JobsPublic,
    RecipePublic,
    RescorePublic,
    RescoreRequest,
)
from storage import repo
from storage.models import JobState
from storage.repo.jobs import enqueue_jobs, select_targets

router = APIRouter(prefix="/jobs", tags=["jobs"])


@router.get("")
def list_jobs(
    session: SessionDep,
    token: ReadOrAnalyseToken,
    state: JobState | None = None,
    target_kind: Literal["scan", "trial"] | None = None,
    target_id: int | None = None,
    offset: Offset = 0,
    limit: Limit = 100,
) -> JobsPublic:
    """List jobs, oldest first, filtered by state and target."""
    rows, count = repo.list_jobs(
        session=session, state=state, target_kind=target_kind, target_id=target_id,
        offset=offset, limit=limit,
    )  # fmt: skip
    return JobsPublic(data=[JobDetail.model_validate(r) for r in rows], count=count)


@router.post("/rescore", status_code=status.HTTP_202_ACCEPTED)
def rescore(body: RescoreRequest, session: SessionDep, token: AnalyseToken) -> RescorePublic:
    """Queue scoring of the selected scans and trials under a recipe version."""
    recipe = repo.get_recipe(session=session, name=body.recipe, version=body.version)
    targets = select_targets(
        session=session, scan_ids=body.scan_ids, trial_ids=body.trial_ids,
        arena_ids=body.arena_ids, everything=body.all,
    )  # fmt: skip
    jobs = enqueue_jobs(
        session=session, kind=SCORE_JOB_KIND, targets=targets, recipe_hash=recipe.hash
    )
    return RescorePublic(
        recipe=RecipePublic.model_validate(recipe),
        job_ids=[int(j.id) for j in jobs],
        count=len(jobs),
    )


@router.get("/{job_id}")
def get_job(job_id: int, session: SessionDep, token: ReadOrAnalyseToken) -> JobDetail:
    """A job's state, progress, message and error (``read`` or ``analyse``: whoever may start
    scoring may follow it)."""
    return JobDetail.model_validate(repo.get_job(session=session, job_id=job_id))
