"""Scan and trial uploads: reader + artifact + row, all or nothing.

Order of work: validate the ids, return the existing row for a duplicate (same sha256 and
target), run the reader on the staged file, commit the artifact, insert the row. If the
reader fails the staged file is dropped; if the row insert fails the artifact just
committed is removed again unless another row refers to it.
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
from storage.models import TARGET_KINDS, Scan, Trial
from storage.readers import ScanData, TrialData, read_scan, read_trial
from storage.repo._common import get_or_404, optional_positive, paginate
from storage.repo.catalog import get_arena, get_subject
from storage.repo.studies import get_study, scan_ids_in_study, trial_ids_in_study

__all__ = [
    "attach_artifact",
    "attach_heightmap",
    "find_by_sha256",
    "get_scan",
    "get_trial",
    "ingest_scan",
    "ingest_trial",
    "list_scans",
    "list_trials",
    "load_scan_data",
    "load_trial_data",
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


def _store_and_insert(
    *,
    session: Session,
    store: ArtifactStore,
    staged: StagedFile,
    row: Scan | Trial,
    existing: Callable[[], Scan | Trial | None],
) -> tuple[Any, bool]:
    was_present = store.exists(staged.sha256)
    store.commit(staged)
    try:
        session.add(row)
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


def ingest_scan(
    *,
    session: Session,
    store: ArtifactStore,
    arena_id: int,
    staged: StagedFile,
    filename: str,
    meta: dict[str, Any] | None,
) -> tuple[Scan, bool]:
    """Read, check and store a scan of arena ``arena_id``; ``(row, created)``.

    ``meta``: ``units`` (required), ``dx``/``dy`` (heightmaps), optional ``format`` and
    ``captured_at``. The staged file is consumed (committed or discarded) in every case.
    """
    meta = dict(meta or {})

    def lookup() -> Scan | None:
        stmt = select(Scan).where(Scan.sha256 == staged.sha256, Scan.arena_id == arena_id)
        return session.scalar(stmt)

    try:
        get_arena(session=session, arena_id=arena_id)
        found = lookup()
        if found is not None:
            store.discard(staged)
            return found, False
        captured_at = _timestamp(meta.get("captured_at"), name="captured_at")
        data = read_scan(
            staged.path,
            fmt=meta.get("format"),
            filename=filename,
            units=meta.get("units"),
            dx=meta.get("dx"),
            dy=meta.get("dy"),
        )
    except BaseException:
        store.discard(staged)
        raise
    row = Scan(
        arena_id=arena_id,
        sha256=staged.sha256,
        filename=filename or "",
        format=data.fmt,
        kind=data.kind,
        units=data.units_in,
        size_bytes=staged.size,
        n_points=None if data.points is None else len(data.points),
        grid_ny=None if data.z is None else data.z.shape[0],
        grid_nx=None if data.z is None else data.z.shape[1],
        grid_dx_m=data.dx_m,
        grid_dy_m=data.dy_m,
        captured_at=captured_at,
        meta=_json_safe({"upload": meta, "reader": data.meta}),
    )
    return _store_and_insert(session=session, store=store, staged=staged, row=row, existing=lookup)


def ingest_trial(
    *,
    session: Session,
    store: ArtifactStore,
    staged: StagedFile,
    filename: str,
    meta: dict[str, Any] | None,
) -> tuple[Trial, bool]:
    """Read, check and store a trial; ``(row, created)``.

    ``meta``: ``arena_id``, ``subject_id`` (required), ``units`` and ``frame_rate_hz`` where
    the file has none, optional ``condition``, ``treadmill_speed_m_s``, ``recorded_at``,
    ``marker_names`` (NPY), ``format``. The staged file is consumed in every case.
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
            store.discard(staged)
            return found, False
        recorded_at = _timestamp(meta.get("recorded_at"), name="recorded_at")
        speed = meta.get("treadmill_speed_m_s")
        if speed is not None and (not isinstance(speed, int | float) or not math.isfinite(speed)):
            raise BadInput(f"treadmill_speed_m_s must be a number, got {speed!r}")
        data = read_trial(
            staged.path,
            fmt=meta.get("format"),
            filename=filename,
            units=meta.get("units"),
            frame_rate_hz=meta.get("frame_rate_hz"),
            marker_names=meta.get("marker_names"),
        )
    except BaseException:
        store.discard(staged)
        raise
    row = Trial(
        arena_id=arena_id,
        subject_id=subject_id,
        sha256=staged.sha256,
        filename=filename or "",
        format=data.fmt,
        units=data.units_in,
        size_bytes=staged.size,
        frame_rate_hz=data.frame_rate_hz,
        n_frames=int(data.markers.shape[0]),
        n_markers=int(data.markers.shape[1]),
        marker_names=list(data.marker_names),
        condition=str(meta.get("condition") or ""),
        treadmill_speed_m_s=None if speed is None else float(speed),
        recorded_at=recorded_at,
        meta=_json_safe({"upload": meta, "reader": data.meta}),
    )
    return _store_and_insert(session=session, store=store, staged=staged, row=row, existing=lookup)


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
    row.grid_dx_m, row.grid_dy_m = dx, dy
    row.grid_ny, row.grid_nx = z.shape
    session.commit()
    return row
