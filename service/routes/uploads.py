"""Ask whether the server already holds a file, by sha256 (the uploader's resume check)."""

from __future__ import annotations

import re
from typing import Annotated

from fastapi import APIRouter, HTTPException, Path, Response, status

from service.deps import ReadToken, SessionDep
from service.schemas import UploadCheck
from storage import repo

router = APIRouter(prefix="/uploads", tags=["uploads"])

Sha256 = Annotated[str, Path(pattern=r"^[0-9a-fA-F]{64}$", description="hex sha256 of the file")]
_HEX = re.compile(r"^[0-9a-f]{64}$")


def _records(session: object, sha256: str) -> list[dict[str, object]]:
    rows = repo.find_by_sha256(session=session, sha256=sha256.lower())
    records = []
    for row in rows:
        kind = "scan" if type(row).__name__ == "Scan" else "trial"
        record: dict[str, object] = {"kind": kind, "id": row.id, "arena_id": row.arena_id}
        if kind == "trial":
            record["subject_id"] = row.subject_id
        records.append(record)
    return records


@router.get("/{sha256}", responses={404: {"description": "No record has this file."}})
def check_upload(sha256: Sha256, session: SessionDep, token: ReadToken) -> UploadCheck:
    """Whether a scan or trial with this sha256 exists, and which (404 when none)."""
    records = _records(session, sha256)
    if not records:
        raise HTTPException(status.HTTP_404_NOT_FOUND, detail=f"no upload with sha256 {sha256}")
    return UploadCheck(sha256=sha256.lower(), present=True, records=records)


@router.head("/{sha256}", responses={404: {"description": "No record has this file."}})
def check_upload_head(sha256: Sha256, session: SessionDep, token: ReadToken) -> Response:
    """Like GET, status only: 200 when the file is here, 404 when not."""
    found = bool(_records(session, sha256))
    return Response(status_code=status.HTTP_200_OK if found else status.HTTP_404_NOT_FOUND)
