"""Analysis profiles and score rows."""

from __future__ import annotations

import hashlib
import json
import math
from collections.abc import Iterable
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from storage.errors import BadInput, NotFound
from storage.models import TARGET_KINDS, Profile, Score, utcnow
from storage.repo._common import need_text, paginate

__all__ = [
    "create_profile",
    "get_profile",
    "get_profile_by_hash",
    "list_profiles",
    "list_scores",
    "profile_hash",
    "save_scores",
]


def profile_hash(parameters: dict[str, Any]) -> str:
    """sha256 of the parameters as canonical JSON (sorted keys, no spaces)."""
    try:
        text = json.dumps(parameters, sort_keys=True, separators=(",", ":"), allow_nan=False)
    except (TypeError, ValueError) as exc:
        raise BadInput(f"profile parameters must be plain JSON: {exc}") from None
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def create_profile(
    *, session: Session, name: str, parameters: dict[str, Any]
) -> tuple[Profile, bool]:
    """A new version of profile ``name``; the latest one back if its parameters are equal."""
    name = need_text(name, name="name")
    if not isinstance(parameters, dict):
        raise BadInput("profile parameters must be a JSON object")
    digest = profile_hash(parameters)
    latest = _latest(session, name)
    if latest is not None and latest.hash == digest:
        return latest, False
    profile = Profile(
        name=name,
        version=1 if latest is None else latest.version + 1,
        parameters=json.loads(json.dumps(parameters)),
        hash=digest,
    )
    session.add(profile)
    session.commit()
    session.refresh(profile)
    return profile, True


def _latest(session: Session, name: str) -> Profile | None:
    return session.scalar(
        select(Profile).where(Profile.name == name).order_by(Profile.version.desc()).limit(1)
    )


def get_profile(*, session: Session, name: str, version: int | None = None) -> Profile:
    """Profile ``name`` at ``version`` (the latest when None), or NotFound."""
    if version is None:
        row = _latest(session, name)
    else:
        row = session.scalar(
            select(Profile).where(Profile.name == name, Profile.version == version)
        )
    if row is None:
        raise NotFound("profile", name if version is None else f"{name} v{version}")
    return row


def get_profile_by_hash(*, session: Session, profile_hash: str) -> Profile:
    """The earliest profile with this parameter hash, or NotFound."""
    row = session.scalar(
        select(Profile).where(Profile.hash == profile_hash).order_by(Profile.id).limit(1)
    )
    if row is None:
        raise NotFound("profile", profile_hash)
    return row


def list_profiles(
    *, session: Session, offset: int = 0, limit: int = 100
) -> tuple[list[Profile], int]:
    """Profiles by id (every version)."""
    return paginate(session, select(Profile).order_by(Profile.id), offset=offset, limit=limit)


def _num(value: Any) -> float | None:
    if value is None:
        return None
    out = float(value)
    return out if math.isfinite(out) else None


def save_scores(
    *,
    session: Session,
    target_kind: str,
    target_id: int,
    profile_hash: str,
    scores: Iterable[Any],
    code_version: str,
    input_sha256: str,
) -> list[Score]:
    """Insert or replace scores (items with name, value, unit, ci_low, ci_high, surrogate_z).

    Non-finite values are stored as NULL (JSON has no NaN).
    """
    if target_kind not in TARGET_KINDS:
        raise BadInput(f"target_kind must be one of {TARGET_KINDS}, got {target_kind!r}")
    items = list(scores)
    names = [s.name for s in items]
    existing = {
        row.measure: row
        for row in session.scalars(
            select(Score).where(
                Score.target_kind == target_kind,
                Score.target_id == target_id,
                Score.profile_hash == profile_hash,
                Score.measure.in_(names),
            )
        )
    }
    out: list[Score] = []
    now = utcnow()
    for item in items:
        row = existing.get(item.name) or Score(
            target_kind=target_kind,
            target_id=target_id,
            profile_hash=profile_hash,
            measure=item.name,
        )
        row.value = _num(item.value)
        row.unit = getattr(item, "unit", "") or ""
        row.ci_low = _num(getattr(item, "ci_low", None))
        row.ci_high = _num(getattr(item, "ci_high", None))
        row.surrogate_z = _num(getattr(item, "surrogate_z", None))
        row.code_version, row.input_sha256, row.computed_at = code_version, input_sha256, now
        session.add(row)
        existing[item.name] = row
        out.append(row)
    session.commit()
    return out


def list_scores(
    *,
    session: Session,
    target_kind: str | None = None,
    target_id: int | None = None,
    profile_hash: str | None = None,
    measure: str | None = None,
    offset: int = 0,
    limit: int = 100,
) -> tuple[list[Score], int]:
    """Scores by id with optional filters."""
    stmt = select(Score).order_by(Score.id)
    if target_kind is not None:
        stmt = stmt.where(Score.target_kind == target_kind)
    if target_id is not None:
        stmt = stmt.where(Score.target_id == target_id)
    if profile_hash is not None:
        stmt = stmt.where(Score.profile_hash == profile_hash)
    if measure is not None:
        stmt = stmt.where(Score.measure == measure)
    return paginate(session, stmt, offset=offset, limit=limit)
