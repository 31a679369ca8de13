"""Scans: 3D captures of an arena's ground, uploaded under their arena."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request, Response, status
from fastapi.responses import FileResponse

from service.deps import ReadToken, SessionDep, StoreDep, UploadToken
from service.routes._ingest import correct_upload_meta, handle_upload
from service.routes._multipart import multipart_request_body
from service.routes.arenas import Limit, Offset, StudyFilter
from service.schemas import (
    MetaCorrected,
    ScanMetaCorrection,
    ScanPublic,
    ScansPublic,
    ScanUploadMeta,
    UploadPublic,
)
from service.security import safe_download_name
from storage import repo

router = APIRouter(tags=["scans"])

UPLOAD_RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {"description": "Duplicate: the file was here already; the existing record."},
    400: {"description": "Bad meta or malformed multipart body."},
    404: {"description": "Unknown arena or subject."},
    413: {"description": "Larger than max_upload_bytes; nothing stored."},
    415: {"description": "Not multipart, or a file format no reader knows."},
    422: {"description": "The reader rejected the file; the message names file and place."},
    507: {"description": "The server's disk is full."},
}


def scan_for_token(scan_id: int, session: SessionDep, token: ReadToken) -> Any:
    """This scan, if the token may see it (404 otherwise)."""
    return repo.get_scan(session=session, scan_id=scan_id)


ScanDep = Annotated[Any, Depends(scan_for_token)]


@router.post(
    "/arenas/{arena_id}/scans",
    status_code=status.HTTP_201_CREATED,
    responses=UPLOAD_RESPONSES,
    openapi_extra=multipart_request_body(
        "JSON: units (m, cm, mm, um; default m); dx, dy (cell size in units) for heightmaps.",
        {"units": "mm", "dx": 0.5, "dy": 0.5},
    ),
)
async def upload_scan(
    arena_id: int, request: Request, response: Response, token: UploadToken
) -> UploadPublic:
    """Upload a scan (PLY, PCD, XYZ/PTS, NPY, CSV grid, TIFF) of this arena's ground."""

    def ingest(**kwargs: Any) -> Any:
        return repo.ingest_scan(arena_id=arena_id, **kwargs)

    return await handle_upload(
        request, response, target_kind="scan", meta_model=ScanUploadMeta, ingest=ingest
    )


@router.get("/arenas/{arena_id}/scans")
def list_arena_scans(
    arena_id: int,
    session: SessionDep,
    token: ReadToken,
    study_id: StudyFilter,
    offset: Offset = 0,
    limit: Limit = 100,
) -> ScansPublic:
    """List the scans of one arena (none when a ``study`` is named that the arena is not in)."""
    repo.get_arena(session=session, arena_id=arena_id)  # 404 for an unknown arena
    rows, count = repo.list_scans(
        session=session, arena_id=arena_id, study_id=study_id, offset=offset, limit=limit
    )
    return ScansPublic(data=[ScanPublic.model_validate(r) for r in rows], count=count)


@router.get("/scans")
def list_scans(
    session: SessionDep,
    token: ReadToken,
    study_id: StudyFilter,
    arena_id: int | None = None,
    offset: Offset = 0,
    limit: Limit = 100,
) -> ScansPublic:
    """List scans, optionally of one arena or one study (the scans of its arenas)."""
    rows, count = repo.list_scans(
        session=session, arena_id=arena_id, study_id=study_id, offset=offset, limit=limit
    )
    return ScansPublic(data=[ScanPublic.model_validate(r) for r in rows], count=count)


@router.get("/scans/{scan_id}")
def get_scan(scan: ScanDep) -> ScanPublic:
    """One scan's record."""
    return ScanPublic.model_validate(scan)


@router.get("/scans/{scan_id}/file", response_class=FileResponse)
def download_scan(scan: ScanDep, store: StoreDep) -> FileResponse:
    """The raw file as uploaded."""
    return FileResponse(
        store.path(scan.sha256),
        filename=safe_download_name(scan.filename, f"scan-{scan.id}.{scan.format}"),
        media_type="application/octet-stream",
    )


@router.patch("/scans/{scan_id}", responses={422: {"description": "The reader refused the file "
              "with the corrected metadata; nothing changed."}})  # fmt: skip
def correct_scan(
    scan_id: int, body: ScanMetaCorrection, request: Request, token: UploadToken
) -> MetaCorrected:
    """Correct a scan's upload metadata (units, dx, dy, captured_at, ground_only).

    The raw file is read again with the corrected values, and the record, a note of the
    change and a new scoring job are committed together.
    """
    return correct_upload_meta(request, target_kind="scan", target_id=scan_id, body=body)
