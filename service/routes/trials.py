"""Trials: recordings of one subject in one arena."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request, Response, status
from fastapi.responses import FileResponse

from service.deps import ReadToken, SessionDep, StoreDep, UploadToken
from service.routes._ingest import correct_upload_meta, handle_upload
from service.routes._multipart import multipart_request_body
from service.routes.arenas import Limit, Offset, StudyFilter
from service.routes.scans import UPLOAD_RESPONSES
from service.schemas import (
    MetaCorrected,
    TrialMetaCorrection,
    TrialPublic,
    TrialsPublic,
    TrialUploadMeta,
    UploadPublic,
)
from service.security import safe_download_name
from storage import repo

router = APIRouter(prefix="/trials", tags=["trials"])


def trial_for_token(trial_id: int, session: SessionDep, token: ReadToken) -> Any:
    """This trial, if the token may see it (404 otherwise)."""
    return repo.get_trial(session=session, trial_id=trial_id)


TrialDep = Annotated[Any, Depends(trial_for_token)]


@router.post(
    "",
    status_code=status.HTTP_201_CREATED,
    responses=UPLOAD_RESPONSES,
    openapi_extra=multipart_request_body(
        "JSON: arena_id, subject_id; frame_rate_hz where the file has none; units (m, cm, mm, "
        "um); optional condition, treadmill_speed_m_s, recorded_at, marker_names (NPY).",
        {"arena_id": 1, "subject_id": 1, "frame_rate_hz": 300, "units": "mm", "condition": "dry"},
    ),
)
async def upload_trial(request: Request, response: Response, token: UploadToken) -> UploadPublic:
    """Upload a trial (C3D, CSV/TSV wide or long form, NPY with marker names)."""
    return await handle_upload(
        request, response, target_kind="trial", meta_model=TrialUploadMeta, ingest=repo.ingest_trial
    )


@router.get("")
def list_trials(
    session: SessionDep,
    token: ReadToken,
    study_id: StudyFilter,
    arena_id: int | None = None,
    subject_id: int | None = None,
    condition: str | None = None,
    recorded_after: datetime | None = None,
    recorded_before: datetime | None = None,
    offset: Offset = 0,
    limit: Limit = 100,
) -> TrialsPublic:
    """List trials, filtered by study, arena, subject, condition and recording date."""
    rows, count = repo.list_trials(
        session=session,
        arena_id=arena_id,
        subject_id=subject_id,
        condition=condition,
        recorded_after=recorded_after,
        recorded_before=recorded_before,
        study_id=study_id,
        offset=offset,
        limit=limit,
    )
    return TrialsPublic(data=[TrialPublic.model_validate(r) for r in rows], count=count)


@router.get("/{trial_id}")
def get_trial(trial: TrialDep) -> TrialPublic:
    """One trial's record."""
    return TrialPublic.model_validate(trial)


@router.get("/{trial_id}/file", response_class=FileResponse)
def download_trial(trial: TrialDep, store: StoreDep) -> FileResponse:
    """The raw file as uploaded."""
    return FileResponse(
        store.path(trial.sha256),
        filename=safe_download_name(trial.filename, f"trial-{trial.id}.{trial.format}"),
        media_type="application/octet-stream",
    )


@router.patch("/{trial_id}", responses={422: {"description": "The reader refused the file "
              "with the corrected metadata; nothing changed."}})  # fmt: skip
def correct_trial(
    trial_id: int, body: TrialMetaCorrection, request: Request, token: UploadToken
) -> MetaCorrected:
    """Correct a trial's upload metadata (frame rate, units, condition, treadmill speed,
    recorded_at, marker names, up axis).

    The raw file is read again with the corrected values, and the record, a note of the
    change and a new scoring job are committed together.
    """
    return correct_upload_meta(request, target_kind="trial", target_id=trial_id, body=body)
