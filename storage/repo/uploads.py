"""Scan and trial uploads: reader + artifact + row + first job, all or nothing.

Order of work: validate the ids, return the existing row for a duplicate (same sha256 and
target; a 409 when its metadata differs), run the reader on the staged file, link the
artifact, then flush the row and its first job and commit them in one transaction. If the
reader fails the staged file is dropped; if the commit fails the artifact just linked is
removed again unless another row refers to it.
"""

from __future__ import annotations

import hashlib
import json
import math
from collections.abc import Callable
from datetime import UTC, datetime
from typing import Any

import numpy as np
from sqlalchemy import or_, select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from storage.artifacts import ArtifactStore, StagedFile, npy_bytes
from storage.errors import ArtifactCorrupt, BadInput, Conflict
from storage.models import TARGET_KINDS, Job, Scan, Trial
from storage.readers import ReaderLimits, ScanData, TrialData, canonical_unit, read_scan, read_trial
from storage.repo._common import get_or_404, optional_positive, paginate
from storage.repo.catalog import get_arena, get_subject
from storage.repo.studies import get_study, scan_ids_in_study, trial_ids_in_study

__all__ = [
    "MetaConflict",
    "attach_artifact",
    "attach_heightmap",
    "correct_meta",
    "find_by_sha256",
    "get_scan",
    "get_trial",
    "ingest_scan",
    "ingest_trial",
    "list_scans",
    "list_trials",
    "load_scan_data",
    "load_trial_data",
    "meta_differences",
]

_ROLES = {
    ("scan", "heightmap"): "heightmap_sha256",
    ("scan", "valid_mask"): "valid_mask_sha256",
    ("trial", "preprocessed"): "preprocessed_sha256",
}


def _json_safe(value: Any) -> Any:
    return json.loads(json.dumps(value, default=str, allow_nan=False))


def _timestamp(value: object, *, name: str) -> datetime | None:
    """ISO 8601 text or a datetime; a time without zone is taken as UTC."""
    if value is None or value == "":
        return None
    if isinstance(value, datetime):
        ts = value
    else:
        try:
            ts = datetime.fromisoformat(str(value))
        except ValueError:
            raise BadInput(f"{name} must be an ISO 8601 date-time, got {value!r}") from None
    return ts if ts.tzinfo is not None else ts.replace(tzinfo=UTC)


def _int_id(meta: dict[str, Any], key: str) -> int:
    value = meta.get(key)
    if isinstance(value, bool) or not isinstance(value, int | str):
        raise BadInput(f"meta needs {key} (an integer id), got {value!r}")
    try:
        return int(value)
    except ValueError:
        raise BadInput(f"meta needs {key} (an integer id), got {value!r}") from None


def _referenced(session: Session, sha256: str) -> bool:
    """Whether any row points at the artifact ``sha256``."""
    scan = select(Scan.id).where(
        or_(Scan.sha256 == sha256, Scan.heightmap_sha256 == sha256,
            Scan.valid_mask_sha256 == sha256)
    )  # fmt: skip
    trial = select(Trial.id).where(or_(Trial.sha256 == sha256, Trial.preprocessed_sha256 == sha256))
    return session.scalar(scan.limit(1)) is not None or session.scalar(trial.limit(1)) is not None


# Keys of the upload meta that name the target (compared through the lookup, not here) or
# say nothing about the recording itself.
_NOT_COMPARED = frozenset({"arena_id", "subject_id", "study"})


def _norm(key: str, value: Any) -> Any:
    if key == "units" and isinstance(value, str):
        return canonical_unit(value)
    if isinstance(value, int | float) and not isinstance(value, bool):
        return float(value)
    return value


def meta_differences(
    stored: dict[str, Any], sent: dict[str, Any], *, sent_only: bool = False
) -> list[str]:
    """Keys whose values differ between a stored upload meta and a re-sent one (sorted).

    ``sent_only``: compare only the keys the re-sent meta names (a key it leaves out says
    nothing, so it is no conflict).
    """
    keys = (set(sent) if sent_only else set(stored) | set(sent)) - _NOT_COMPARED
    return sorted(k for k in keys if _norm(k, stored.get(k)) != _norm(k, sent.get(k)))


def _check_same_meta(row: Scan | Trial, sent: dict[str, Any], *, kind: str) -> None:
    stored = _upload_meta(row)
    differ = meta_differences(stored, _json_safe(sent), sent_only=True)
    if differ:
        shown = "; ".join(
            f"{k}: stored {stored.get(k)!r}, sent {_json_safe(sent).get(k)!r}" for k in differ
        )
        plural = "trials" if kind == "trial" else "scans"
        raise MetaConflict(
            f"this file is already stored as {kind} {row.id} with different metadata "
            f"({shown}); to correct the stored record send PATCH /v1/{plural}/{row.id} "
            "with the new values (scoring is queued again)",
            fields=differ,
        )


class MetaConflict(Conflict):
    """A re-upload whose metadata differs from the stored record; ``fields`` names them."""

    def __init__(self, message: str, *, fields: list[str]) -> None:
        self.fields = fields
        super().__init__(message)

    def __reduce__(self) -> tuple[Any, ...]:
        return (_rebuild_meta_conflict, (self.message, self.fields))


def _rebuild_meta_conflict(message: str, fields: list[str]) -> MetaConflict:
    return MetaConflict(message, fields=fields)


def _queue_first_job(session: Session, *, kind: str, target_kind: str, target_id: int) -> None:
    """Flush a first job for a record that has none (the unit of work commits it)."""
    from storage.repo.jobs import enqueue_job, latest_job

    if latest_job(session=session, target_kind=target_kind, target_id=target_id) is None:
        enqueue_job(
            session=session, kind=kind, target_kind=target_kind, target_id=target_id, commit=False
        )


def _duplicate(
    session: Session,
    store: ArtifactStore,
    staged: StagedFile,
    found: Scan | Trial,
    *,
    kind: str,
    meta: dict[str, Any],
    first_job: str | None,
) -> tuple[Any, bool]:
    """The existing record for a duplicate; 409 if its meta differs; queue a missing job."""
    store.discard(staged)
    _check_same_meta(found, meta, kind=kind)
    if first_job is not None:
        _queue_first_job(session, kind=first_job, target_kind=kind, target_id=found.id)
        session.commit()
    return found, False


def _store_and_insert(
    *,
    session: Session,
    store: ArtifactStore,
    staged: StagedFile,
    row: Scan | Trial,
    existing: Callable[[], Scan | Trial | None],
    first_job: str | None,
) -> tuple[Any, bool]:
    """One unit of work: the artifact is linked into place, then the row and (optionally) its
    first job are flushed and committed in one transaction. A crash between the link and the
    commit leaves only an orphan artifact, which ``gaitscape check --repair`` removes."""
    was_present = store.exists(staged.sha256)
    store.commit(staged)
    try:
        session.add(row)
        session.flush()
        if first_job is not None:
            kind = "scan" if isinstance(row, Scan) else "trial"
            _queue_first_job(session, kind=first_job, target_kind=kind, target_id=row.id)
        session.commit()
    except BaseException as exc:
        session.rollback()
        if not was_present and not _referenced(session, staged.sha256):
            store.remove(staged.sha256)
        if isinstance(exc, IntegrityError):
            # Another upload of the same file won the race: hand back its row.
            winner = existing()
            if winner is not None:
                return winner, False
            raise Conflict(f"could not store the upload: {exc.orig}") from None
        raise
    session.refresh(row)
    return row, True


def _scan_fields(data: ScanData) -> dict[str, Any]:
    return {
        "format": data.fmt,
        "kind": data.kind,
        "units": data.units_in,
        "n_points": None if data.points is None else len(data.points),
        "grid_ny": None if data.z is None else data.z.shape[0],
        "grid_nx": None if data.z is None else data.z.shape[1],
        "dx_m": data.dx_m,
        "dy_m": data.dy_m,
    }


def _read_scan_meta(
    path: Any, *, filename: str, meta: dict[str, Any], limits: ReaderLimits | None
) -> ScanData:
    return read_scan(
        path,
        fmt=meta.get("format"),
        filename=filename,
        units=meta.get("units"),
        dx=meta.get("dx"),
        dy=meta.get("dy"),
        ground_only=meta.get("ground_only"),
        limits=limits,
    )


def ingest_scan(
    *,
    session: Session,
    store: ArtifactStore,
    arena_id: int,
    staged: StagedFile,
    filename: str,
    meta: dict[str, Any] | None,
    limits: ReaderLimits | None = None,
    first_job: str | None = None,
) -> tuple[Scan, bool]:
    """Read, check and store a scan of arena ``arena_id``; ``(row, created)``.

    ``meta``: ``units`` (required), ``dx``/``dy`` (heightmaps), optional ``format``,
    ``captured_at`` and ``ground_only`` (LAS/LAZ). ``first_job``: the kind of job to queue
    with the record, in the same transaction (also for a duplicate that has no job yet).
    A duplicate whose meta differs from the stored one is a ``MetaConflict``. The staged file
    is consumed (committed or discarded) in every case.
    """
    meta = dict(meta or {})

    def lookup() -> Scan | None:
        stmt = select(Scan).where(Scan.sha256 == staged.sha256, Scan.arena_id == arena_id)
        return session.scalar(stmt)

    try:
        get_arena(session=session, arena_id=arena_id)
        found = lookup()
        if found is not None:
            return _duplicate(session, store, staged, found, kind="scan", meta=meta,
                              first_job=first_job)  # fmt: skip
        captured_at = _timestamp(meta.get("captured_at"), name="captured_at")
        data = _read_scan_meta(staged.path, filename=filename, meta=meta, limits=limits)
    except BaseException:
        store.discard(staged)
        raise
    row = Scan(
        arena_id=arena_id,
        sha256=staged.sha256,
        filename=filename or "",
        size_bytes=staged.size,
        captured_at=captured_at,
        meta=_json_safe({"upload": meta, "reader": data.meta}),
        **_scan_fields(data),
    )
    return _store_and_insert(session=session, store=store, staged=staged, row=row,
                             existing=lookup, first_job=first_job)  # fmt: skip


def _treadmill_speed(meta: dict[str, Any]) -> float | None:
    speed = meta.get("treadmill_speed_m_s")
    if speed is None:
        return None
    if isinstance(speed, bool) or not isinstance(speed, int | float) or not math.isfinite(speed):
        raise BadInput(f"treadmill_speed_m_s must be a number, got {speed!r}")
    if not 0 <= speed <= 100:
        raise BadInput(f"treadmill_speed_m_s must lie in 0-100 m/s, got {speed!r}")
    return float(speed)


def _read_trial_meta(
    path: Any, *, filename: str, meta: dict[str, Any], limits: ReaderLimits | None
) -> TrialData:
    return read_trial(
        path,
        fmt=meta.get("format"),
        filename=filename,
        units=meta.get("units"),
        frame_rate_hz=meta.get("frame_rate_hz"),
        marker_names=meta.get("marker_names"),
        limits=limits,
    )


def _trial_fields(data: TrialData) -> dict[str, Any]:
    return {
        "format": data.fmt,
        "units": data.units_in,
        "frame_rate_hz": data.frame_rate_hz,
        "n_frames": int(data.markers.shape[0]),
        "n_markers": int(data.markers.shape[1]),
        "marker_names": list(data.marker_names),
    }


def ingest_trial(
    *,
    session: Session,
    store: ArtifactStore,
    staged: StagedFile,
    filename: str,
    meta: dict[str, Any] | None,
    limits: ReaderLimits | None = None,
    first_job: str | None = None,
) -> tuple[Trial, bool]:
    """Read, check and store a trial; ``(row, created)``.

    ``meta``: ``arena_id``, ``subject_id`` (required), ``units`` and ``frame_rate_hz`` where
    the file has none, optional ``condition``, ``treadmill_speed_m_s``, ``recorded_at``,
    ``marker_names`` (NPY), ``format``, ``up_axis`` (kept for the scoring job). ``first_job``
    and duplicates as for ``ingest_scan``. The staged file is consumed in every case.
    """
    meta = dict(meta or {})
    try:
        arena_id = _int_id(meta, "arena_id")
        subject_id = _int_id(meta, "subject_id")

        def lookup() -> Trial | None:
            stmt = select(Trial).where(
                Trial.sha256 == staged.sha256,
                Trial.arena_id == arena_id,
                Trial.subject_id == subject_id,
            )
            return session.scalar(stmt)

        get_arena(session=session, arena_id=arena_id)
        get_subject(session=session, subject_id=subject_id)
        found = lookup()
        if found is not None:
            return _duplicate(session, store, staged, found, kind="trial", meta=meta,
                              first_job=first_job)  # fmt: skip
        recorded_at = _timestamp(meta.get("recorded_at"), name="recorded_at")
        speed = _treadmill_speed(meta)
        data = _read_trial_meta(staged.path, filename=filename, meta=meta, limits=limits)
    except BaseException:
        store.discard(staged)
        raise
    row = Trial(
        arena_id=arena_id,
        subject_id=subject_id,
        sha256=staged.sha256,
        filename=filename or "",
        size_bytes=staged.size,
        condition=str(meta.get("condition") or ""),
        treadmill_speed_m_s=speed,
        recorded_at=recorded_at,
        meta=_json_safe({"upload": meta, "reader": data.meta}),
        **_trial_fields(data),
    )
    return _store_and_insert(session=session, store=store, staged=staged, row=row,
                             existing=lookup, first_job=first_job)  # fmt: skip


def correct_meta(
    *,
    session: Session,
    store: ArtifactStore,
    target_kind: str,
    target_id: int,
    changes: dict[str, Any],
    limits: ReaderLimits | None = None,
    job_kind: str = "score",
) -> tuple[Scan | Trial, int]:
    """Correct a stored record's upload metadata and queue it for scoring again.

    ``changes`` holds the keys to set (None removes one); ``arena_id``/``subject_id`` cannot
    change (upload the file to the other target instead). The raw file is read again with the
    merged metadata, so a correction the reader refuses changes nothing. The record, a note of
    the correction (old and new values, time) and a new scoring job are committed together.
    Returns ``(row, job_id)``.
    """
    if target_kind not in ("scan", "trial"):
        raise BadInput(f"target_kind must be scan or trial, got {target_kind!r}")
    fixed = sorted(set(changes) & {"arena_id", "subject_id"})
    if fixed:
        raise BadInput(f"{', '.join(fixed)} cannot be corrected; upload to the other target")
    row: Scan | Trial = (
        get_scan(session=session, scan_id=target_id)
        if target_kind == "scan"
        else get_trial(session=session, trial_id=target_id)
    )
    old = _upload_meta(row)
    merged = {k: v for k, v in {**old, **_json_safe(changes)}.items() if v is not None}
    changed = meta_differences(old, merged)
    if not changed:
        raise BadInput("nothing to correct: the values sent equal the stored ones")
    if not store.verify(row.sha256):
        raise ArtifactCorrupt(row.sha256)
    path = store.path(row.sha256)
    if isinstance(row, Scan):
        _timestamp(merged.get("captured_at"), name="captured_at")
        data = _read_scan_meta(path, filename=row.filename, meta=merged, limits=limits)
        fields = _scan_fields(data)
        row.captured_at = _timestamp(merged.get("captured_at"), name="captured_at")
    else:
        speed = _treadmill_speed(merged)
        recorded_at = _timestamp(merged.get("recorded_at"), name="recorded_at")
        trial_data = _read_trial_meta(path, filename=row.filename, meta=merged, limits=limits)
        fields = _trial_fields(trial_data)
        row.condition = str(merged.get("condition") or "")
        row.treadmill_speed_m_s = speed
        row.recorded_at = recorded_at
        data = trial_data  # type: ignore[assignment]
    for key, value in fields.items():
        setattr(row, key, value)
    history = list((row.meta or {}).get("corrections") or [])
    history.append(
        {
            "at": datetime.now(UTC).isoformat(timespec="seconds"),
            "changed": {k: [old.get(k), merged.get(k)] for k in changed},
        }
    )
    row.meta = _json_safe({"upload": merged, "reader": data.meta, "corrections": history})
    session.flush()
    # A queued job will read the corrected metadata when it starts; a running one read the
    # old, so it does not count: a new job is queued beside it.
    queued = session.scalar(
        select(Job).where(Job.kind == job_kind, Job.target_kind == target_kind,
                          Job.target_id == row.id, Job.recipe_hash.is_(None),
                          Job.state == "queued").order_by(Job.id).limit(1)
    )  # fmt: skip
    job = queued
    if job is None:
        job = Job(kind=job_kind, target_kind=target_kind, target_id=row.id, recipe_hash=None,
                  max_attempts=3, state="queued", progress=0.0, message="queued",
                  attempts=0)  # fmt: skip
        session.add(job)
        session.flush()
    session.commit()
    session.refresh(row)
    return row, int(job.id)


def get_scan(*, session: Session, scan_id: int) -> Scan:
    """The scan or NotFound."""
    return get_or_404(session, Scan, scan_id, "scan")


def get_trial(*, session: Session, trial_id: int) -> Trial:
    """The trial or NotFound."""
    return get_or_404(session, Trial, trial_id, "trial")


def list_scans(
    *,
    session: Session,
    arena_id: int | None = None,
    kind: str | None = None,
    study_id: int | None = None,
    offset: int = 0,
    limit: int = 100,
) -> tuple[list[Scan], int]:
    """Scans by id, optionally of one arena, kind ("points"/"heightmap") or study (the scans
    of the study's arenas; rule: ``storage.repo.studies``)."""
    stmt = select(Scan).order_by(Scan.id)
    if arena_id is not None:
        stmt = stmt.where(Scan.arena_id == arena_id)
    if kind is not None:
        stmt = stmt.where(Scan.kind == kind)
    if study_id is not None:
        get_study(session=session, study_id=study_id)
        stmt = stmt.where(Scan.id.in_(scan_ids_in_study(study_id)))
    return paginate(session, stmt, offset=offset, limit=limit)


def list_trials(
    *,
    session: Session,
    arena_id: int | None = None,
    subject_id: int | None = None,
    condition: str | None = None,
    recorded_after: datetime | None = None,
    recorded_before: datetime | None = None,
    study_id: int | None = None,
    offset: int = 0,
    limit: int = 100,
) -> tuple[list[Trial], int]:
    """Trials by id; ``recorded_after`` is inclusive, ``recorded_before`` exclusive;
    ``study_id``: the study's trials (rule: ``storage.repo.studies``)."""
    stmt = select(Trial).order_by(Trial.id)
    if study_id is not None:
        get_study(session=session, study_id=study_id)
        stmt = stmt.where(Trial.id.in_(trial_ids_in_study(study_id)))
    if arena_id is not None:
        stmt = stmt.where(Trial.arena_id == arena_id)
    if subject_id is not None:
        stmt = stmt.where(Trial.subject_id == subject_id)
    if condition is not None:
        stmt = stmt.where(Trial.condition == condition)
    if recorded_after is not None:
        stmt = stmt.where(Trial.recorded_at >= _timestamp(recorded_after, name="recorded_after"))
    if recorded_before is not None:
        stmt = stmt.where(Trial.recorded_at < _timestamp(recorded_before, name="recorded_before"))
    return paginate(session, stmt, offset=offset, limit=limit)


def find_by_sha256(*, session: Session, sha256: str) -> list[Scan | Trial]:
    """Every scan and trial whose raw file has this sha256 (for resumable uploads)."""
    sha = sha256.lower()
    scans = list(session.scalars(select(Scan).where(Scan.sha256 == sha).order_by(Scan.id)))
    trials = list(session.scalars(select(Trial).where(Trial.sha256 == sha).order_by(Trial.id)))
    return [*scans, *trials]


def _upload_meta(row: Scan | Trial) -> dict[str, Any]:
    return dict((row.meta or {}).get("upload") or {})


def load_scan_data(*, session: Session, store: ArtifactStore, scan_id: int) -> ScanData:
    """Re-read a stored scan's raw file (hash checked first)."""
    row = get_scan(session=session, scan_id=scan_id)
    meta = _upload_meta(row)
    if not store.verify(row.sha256):
        raise ArtifactCorrupt(row.sha256)
    return read_scan(
        store.path(row.sha256),
        fmt=row.format,
        filename=row.filename,
        units=meta.get("units"),
        dx=meta.get("dx"),
        dy=meta.get("dy"),
        ground_only=meta.get("ground_only"),
    )


def load_trial_data(*, session: Session, store: ArtifactStore, trial_id: int) -> TrialData:
    """Re-read a stored trial's raw file (hash checked first)."""
    row = get_trial(session=session, trial_id=trial_id)
    meta = _upload_meta(row)
    if not store.verify(row.sha256):
        raise ArtifactCorrupt(row.sha256)
    return read_trial(
        store.path(row.sha256),
        fmt=row.format,
        filename=row.filename,
        units=meta.get("units"),
        frame_rate_hz=meta.get("frame_rate_hz"),
        marker_names=meta.get("marker_names"),
    )


def attach_artifact(
    *,
    session: Session,
    store: ArtifactStore,
    target_kind: str,
    target_id: int,
    role: str,
    array: np.ndarray,
) -> str:
    """Store a derived array and point the row at it; returns its sha256.

    Roles: scan "heightmap" or "valid_mask"; trial "preprocessed".
    """
    column = _ROLES.get((target_kind, role))
    if target_kind not in TARGET_KINDS or column is None:
        allowed = ", ".join(f"{k}/{r}" for k, r in _ROLES)
        raise BadInput(f"unknown artifact role {target_kind}/{role}; expected one of {allowed}")
    row = (get_scan(session=session, scan_id=target_id) if target_kind == "scan"
           else get_trial(session=session, trial_id=target_id))  # fmt: skip
    data = npy_bytes(array)
    sha = hashlib.sha256(data).hexdigest()
    was_present = store.exists(sha)
    store.put_bytes(data)
    setattr(row, column, sha)
    try:
        session.commit()
    except BaseException:
        session.rollback()
        if not was_present and not _referenced(session, sha):
            store.remove(sha)
        raise
    return sha


def attach_heightmap(
    *,
    session: Session,
    store: ArtifactStore,
    scan_id: int,
    z: np.ndarray,
    valid: np.ndarray,
    dx_m: float,
    dy_m: float,
) -> Scan:
    """Store a scan's derived heightmap (m) and validity mask and its grid spacing (m)."""
    z = np.asarray(z, dtype=np.float64)
    valid = np.asarray(valid, dtype=bool)
    if z.ndim != 2 or valid.shape != z.shape:
        raise BadInput(f"z must be 2-D and valid the same shape, got {z.shape}, {valid.shape}")
    dx = optional_positive(dx_m, name="dx_m")
    dy = optional_positive(dy_m, name="dy_m")
    row = get_scan(session=session, scan_id=scan_id)
    attach_artifact(session=session, store=store, target_kind="scan", target_id=scan_id,
                    role="heightmap", array=z)  # fmt: skip
    attach_artifact(session=session, store=store, target_kind="scan", target_id=scan_id,
                    role="valid_mask", array=valid)  # fmt: skip
    row.dx_m, row.dy_m = dx, dy
    row.grid_ny, row.grid_nx = z.shape
    session.commit()
    return row
