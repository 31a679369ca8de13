"""The one upload flow shared by scans and trials: stream, validate meta, ingest, enqueue."""

from __future__ import annotations

import json
import re
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from sqlalchemy.orm import Session

    from service.settings import Settings
    from storage.readers import ReaderLimits

from fastapi import HTTPException, Request, Response, status
from pydantic import BaseModel, ValidationError
from starlette.concurrency import run_in_threadpool

from service.routes._multipart import receive_upload
from service.schemas import MetaCorrected, UploadPublic
from storage import repo

__all__ = [
    "SCORE_JOB_KIND",
    "check_format",
    "check_name",
    "handle_upload",
    "parse_meta",
    "reader_limits",
]

SCORE_JOB_KIND = "score"


MAX_META_DEPTH = 4  # meta is flat but for marker_names (a list): depth 2 is all it needs
_CONTROL = re.compile(r"[\x00-\x1f\x7f]")


def _depth(raw: str) -> int:
    """Deepest nesting of [ and { in a JSON text, outside strings (no parsing, no recursion)."""
    depth = deepest = 0
    in_string = escaped = False
    for ch in raw:
        if in_string:
            if escaped:
                escaped = False
            elif ch == "\\":
                escaped = True
            elif ch == '"':
                in_string = False
        elif ch == '"':
            in_string = True
        elif ch in "[{":
            depth += 1
            deepest = max(deepest, depth)
        elif ch in "]}":
            depth -= 1
    return deepest


def check_name(value: str, *, what: str) -> str:
    """Refuse NUL and other control characters in a name (HTTP 400)."""
    bad = _CONTROL.search(value)
    if bad:
        raise HTTPException(
            status.HTTP_400_BAD_REQUEST,
            detail=f"{what} contains a control character (U+{ord(bad.group()):04X}) at "
            f"position {bad.start()}",
        )
    return value


def parse_meta(raw: str | None, model: type[BaseModel]) -> Any:
    """Parse the ``meta`` form field into ``model``; HTTP 400 naming the bad field otherwise.

    Nesting deeper than ``MAX_META_DEPTH`` is refused before parsing (the form field itself is
    capped at 64 kB by the multipart reader).
    """
    if raw is None or not raw.strip():
        raw = "{}"
    if _depth(raw) > MAX_META_DEPTH:
        raise HTTPException(
            status.HTTP_400_BAD_REQUEST,
            detail=f"meta is nested deeper than {MAX_META_DEPTH} levels",
        )
    try:
        value = json.loads(raw)
    except json.JSONDecodeError as exc:
        raise HTTPException(
            status_code=status.HTTP_400_BAD_REQUEST,
            detail=f"meta is not valid JSON: {exc.msg} at line {exc.lineno} column {exc.colno}",
        ) from exc
    except RecursionError as exc:  # belt and braces: _depth should have caught it
        raise HTTPException(
            status.HTTP_400_BAD_REQUEST, detail="meta is nested too deeply"
        ) from exc
    if not isinstance(value, dict):
        raise HTTPException(status.HTTP_400_BAD_REQUEST, detail="meta must be a JSON object")
    try:
        return model.model_validate(value)
    except ValidationError as exc:
        problems = "; ".join(
            f"{'.'.join(str(p) for p in err['loc']) or 'meta'}: {err['msg']}"
            for err in exc.errors()
        )
        raise HTTPException(status.HTTP_400_BAD_REQUEST, detail=f"bad meta: {problems}") from exc


def check_format(filename: str, *, kind: str) -> str:
    """The reader format for ``filename``; HTTP 415 when no reader knows its extension."""
    from storage.errors import ReaderError
    from storage.readers import detect_format

    try:
        return detect_format(filename, kind=kind)
    except ReaderError as exc:
        raise HTTPException(status.HTTP_415_UNSUPPORTED_MEDIA_TYPE, detail=str(exc)) from exc


def _job_for(session: Session, *, target_kind: str, target_id: int) -> int | None:
    # The upload's unit of work queued the job (for a duplicate, when it had none).
    job = repo.latest_job(session=session, target_kind=target_kind, target_id=target_id)
    return None if job is None else int(job.id)


def reader_limits(settings: Settings) -> ReaderLimits:
    """The reader caps a server's settings give."""
    from storage.readers import ReaderLimits

    return ReaderLimits(
        max_points=settings.max_points,
        max_grid_cells=settings.max_upload_grid_cells,
        max_frames=settings.max_frames,
        max_marker_samples=settings.max_marker_samples,
    )


def _split_study(raw: str | None) -> tuple[str | None, str | None]:
    """Take ``study`` (a study name) out of the meta JSON; the rest goes to the meta model."""
    if raw is None or not raw.strip() or _depth(raw) > MAX_META_DEPTH:
        return None, raw  # parse_meta reports the error
    try:
        value = json.loads(raw)
    except (json.JSONDecodeError, RecursionError):
        return None, raw  # parse_meta reports the error
    if not isinstance(value, dict) or "study" not in value:
        return None, raw
    study = value.pop("study")
    if not isinstance(study, str) or not study.strip():
        raise HTTPException(status.HTTP_400_BAD_REQUEST, detail="meta.study must be a name")
    return study.strip(), json.dumps(value)


async def handle_upload(
    request: Request,
    response: Response,
    *,
    target_kind: str,
    meta_model: type[BaseModel],
    ingest: Callable[..., tuple[Any, bool]],
) -> UploadPublic:
    """Stage the file, check ``meta``, run ``ingest`` off the event loop, enqueue a job.

    ``ingest(session=, store=, staged=, filename=, meta=, limits=, first_job=)`` is a
    ``storage.repo`` function; it reads and validates the file and commits the row and its
    first job in one transaction. 201 for a new
    record, 200 for a duplicate (the existing record; its staged copy is dropped).
    """
    state = request.app.state
    store = state.store
    received = await receive_upload(request, store=store, max_bytes=state.settings.max_upload_bytes)

    def work() -> UploadPublic:
        check_name(received.filename, what="the file name")
        study, raw_meta = _split_study(received.fields.get("meta"))
        meta = parse_meta(raw_meta, meta_model)
        check_format(received.filename, kind=target_kind)
        with state.sessionmaker() as session:
            if study is not None:  # NotFound (404) for an unknown study, before storing
                study_id = repo.get_study_by_name(session=session, name=study).id
            row, created = ingest(
                session=session,
                store=store,
                staged=received.staged,
                filename=received.filename,
                meta=meta.model_dump(mode="json", exclude_none=True),
                limits=reader_limits(state.settings),
                first_job=SCORE_JOB_KIND,
            )
            if study is not None:
                # A scan makes its arena a member; a trial is a member itself.
                key = "trial_ids" if target_kind == "trial" else "arena_ids"
                member = row.id if target_kind == "trial" else row.arena_id
                repo.add_study_members(session=session, study_id=study_id, **{key: [member]})
            job_id = _job_for(session, target_kind=target_kind, target_id=row.id)
            return UploadPublic(id=row.id, sha256=row.sha256, job_id=job_id, created=created)

    try:
        result = await run_in_threadpool(work)
    finally:
        store.discard(received.staged)  # idempotent; a committed upload was linked into place
    response.status_code = status.HTTP_201_CREATED if result.created else status.HTTP_200_OK
    return result


def correct_upload_meta(
    request: Request, *, target_kind: str, target_id: int, body: BaseModel
) -> MetaCorrected:
    """Apply a metadata correction (``storage.repo.correct_meta``) and answer what changed."""
    state = request.app.state
    changes = body.model_dump(mode="json", exclude_unset=True)
    with state.sessionmaker() as session:
        before = dict(
            (
                repo.get_scan(session=session, scan_id=target_id)
                if target_kind == "scan"
                else repo.get_trial(session=session, trial_id=target_id)
            ).meta.get("upload")
            or {}
        )
        row, job_id = repo.correct_meta(
            session=session,
            store=state.store,
            target_kind=target_kind,
            target_id=target_id,
            changes=changes,
            limits=reader_limits(state.settings),
            job_kind=SCORE_JOB_KIND,
        )
        changed = repo.meta_differences(before, dict(row.meta.get("upload") or {}))
        return MetaCorrected(id=row.id, changed=changed, job_id=job_id)
