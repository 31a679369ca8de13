"""Ask whether the server already holds a file, by sha256 and target (the uploader's resume
check).

A token with ``read`` may ask about any record. A token with only ``upload`` (an acquisition
PC) must name the target it is uploading to, ``arena_id`` (and ``subject_id`` for a trial),
and hears only about that target: it learns nothing about the rest of the store, and a file
already held under another target is "not here" for it, so it gets uploaded there too.
"""

from __future__ import annotations

import re
from typing import Annotated, Any, Literal

from fastapi import APIRouter, HTTPException, Path, Query, Response, status
from sqlalchemy.orm import Session

from service.deps import ReadOrUploadToken, SessionDep, token_scopes
from service.schemas import UploadCheck
from storage import repo
from storage.models import Trial

router = APIRouter(prefix="/uploads", tags=["uploads"])

Sha256 = Annotated[str, Path(pattern=r"^[0-9a-fA-F]{64}$", description="hex sha256 of the file")]
ArenaQ = Annotated[int | None, Query(description="only records of this arena")]
SubjectQ = Annotated[int | None, Query(description="only trials of this subject")]
KindQ = Annotated[Literal["scan", "trial"] | None, Query(description="only scans or trials")]
_HEX = re.compile(r"^[0-9a-f]{64}$")


def _records(
    session: Session,
    sha256: str,
    *,
    token: Any,
    arena_id: int | None,
    subject_id: int | None,
    kind: str | None,
) -> list[dict[str, object]]:
    if "read" not in token_scopes(token) and (
        arena_id is None or (kind == "trial" and subject_id is None)
    ):
        raise HTTPException(
            status.HTTP_400_BAD_REQUEST,
            detail="a token without the 'read' scope must name the target: arena_id "
            "(and subject_id with kind=trial)",
        )
    rows = repo.find_by_sha256(session=session, sha256=sha256.lower())
    records = []
    for row in rows:
        row_kind = "trial" if isinstance(row, Trial) else "scan"
        if kind is not None and row_kind != kind:
            continue
        if arena_id is not None and row.arena_id != arena_id:
            continue
        if subject_id is not None and not (isinstance(row, Trial) and row.subject_id == subject_id):
            continue
        record: dict[str, object] = {"kind": row_kind, "id": row.id, "arena_id": row.arena_id}
        if isinstance(row, Trial):
            record["subject_id"] = row.subject_id
        records.append(record)
    return records


@router.get("/{sha256}", responses={404: {"description": "No record has this file."}})
def check_upload(
    sha256: Sha256,
    session: SessionDep,
    token: ReadOrUploadToken,
    arena_id: ArenaQ = None,
    subject_id: SubjectQ = None,
    kind: KindQ = None,
) -> UploadCheck:
    """Whether a scan or trial with this sha256 exists (for the target, if named), and which
    (404 when none)."""
    records = _records(session, sha256, token=token, arena_id=arena_id,
                       subject_id=subject_id, kind=kind)  # fmt: skip
    if not records:
        raise HTTPException(status.HTTP_404_NOT_FOUND, detail=f"no upload with sha256 {sha256}")
    return UploadCheck(sha256=sha256.lower(), present=True, records=records)


@router.head("/{sha256}", responses={404: {"description": "No record has this file."}})
def check_upload_head(
    sha256: Sha256,
    session: SessionDep,
    token: ReadOrUploadToken,
    arena_id: ArenaQ = None,
    subject_id: SubjectQ = None,
    kind: KindQ = None,
) -> Response:
    """Like GET, status only: 200 when the file is here (for the target), 404 when not."""
    found = bool(_records(session, sha256, token=token, arena_id=arena_id,
                          subject_id=subject_id, kind=kind))  # fmt: skip
    return Response(status_code=status.HTTP_200_OK if found else status.HTTP_404_NOT_FOUND)
