"""Arenas, marker sets and subjects."""

from __future__ import annotations

from typing import Any

from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from storage.errors import BadInput, Conflict
from storage.models import ARENA_KINDS, Arena, MarkerSet, Subject
from storage.repo._common import free_text, get_or_404, need_text, optional_positive, paginate
from storage.repo.studies import arena_ids_in_study, get_study, subject_ids_in_study

__all__ = [
    "create_arena",
    "create_marker_set",
    "create_subject",
    "get_arena",
    "get_marker_set",
    "get_subject",
    "list_arenas",
    "list_marker_sets",
    "list_subjects",
    "normalise_arena_kind",
    "validate_roles",
]


def normalise_arena_kind(kind: object) -> str:
    """``"open field"``/``"Open-Field"`` -> ``"open_field"``; BadInput for unknown kinds."""
    key = str(kind).strip().lower().replace("-", "_").replace(" ", "_")
    if key not in ARENA_KINDS:
        raise BadInput(f"arena kind must be one of {', '.join(ARENA_KINDS)}, got {kind!r}")
    return key


def _commit_unique(session: Session, row: Any, what: str) -> None:
    session.add(row)
    try:
        session.commit()
    except IntegrityError:
        session.rollback()
        raise Conflict(f"{what} already exists") from None
    session.refresh(row)


def create_arena(
    *,
    session: Session,
    name: str,
    kind: str,
    scale_band_m: tuple[float, float] | list[float] | None = None,
    notes: str = "",
) -> Arena:
    """Create an arena; the animal-scale band is (low, high) in metres, 0 < low < high."""
    lo = hi = None
    if scale_band_m is not None:
        if len(scale_band_m) != 2:
            raise BadInput(f"scale_band_m must be [low, high], got {scale_band_m!r}")
        lo = optional_positive(scale_band_m[0], name="scale_band_m[0]")
        hi = optional_positive(scale_band_m[1], name="scale_band_m[1]")
        if lo is None or hi is None or not lo < hi:
            raise BadInput(f"scale_band_m must satisfy 0 < low < high, got {scale_band_m!r}")
    arena = Arena(
        name=need_text(name, name="name"),
        kind=normalise_arena_kind(kind),
        scale_band_lo_m=lo,
        scale_band_hi_m=hi,
        notes=free_text(notes, name="notes"),
    )
    _commit_unique(session, arena, f"arena {arena.name!r}")
    return arena


def get_arena(*, session: Session, arena_id: int) -> Arena:
    """The arena or NotFound."""
    return get_or_404(session, Arena, arena_id, "arena")


def list_arenas(
    *,
    session: Session,
    kind: str | None = None,
    study_id: int | None = None,
    offset: int = 0,
    limit: int = 100,
) -> tuple[list[Arena], int]:
    """Arenas by id, optionally of one kind or one study (rule: ``storage.repo.studies``)."""
    stmt = select(Arena).order_by(Arena.id)
    if kind is not None:
        stmt = stmt.where(Arena.kind == normalise_arena_kind(kind))
    if study_id is not None:
        get_study(session=session, study_id=study_id)
        stmt = stmt.where(Arena.id.in_(arena_ids_in_study(study_id)))
    return paginate(session, stmt, offset=offset, limit=limit)


def validate_roles(roles: object) -> dict[str, Any]:
    """Check a marker-role mapping; a marker may hold one role only.

    Shape: ``{"anterior": str, "posterior": str, "feet": {leg: str, ...},
    "left": [str], "right": [str], "others": [str]}`` (the last three optional).
    """
    if not isinstance(roles, dict):
        raise BadInput(f"marker roles must be an object, got {type(roles).__name__}")
    unknown = set(roles) - {"anterior", "posterior", "feet", "left", "right", "others"}
    if unknown:
        raise BadInput(f"unknown marker roles {sorted(unknown)}")
    out: dict[str, Any] = {}
    used: dict[str, str] = {}

    def claim(marker: object, role: str) -> str:
        name = need_text(marker, name=f"marker for {role}")
        if name in used:
            raise BadInput(f"marker {name!r} is both {used[name]} and {role}")
        used[name] = role
        return name

    for key in ("anterior", "posterior"):
        if key not in roles:
            raise BadInput(f"marker roles need {key!r}")
        out[key] = claim(roles[key], key)
    feet = roles.get("feet")
    if not isinstance(feet, dict) or len(feet) < 2:
        raise BadInput("marker roles need 'feet': an object of at least 2 legs, e.g. LF, RF")
    out["feet"] = {need_text(leg, name="leg"): claim(m, f"foot {leg}") for leg, m in feet.items()}
    for key in ("left", "right", "others"):
        values = roles.get(key)
        if values is None:
            continue
        if not isinstance(values, list):
            raise BadInput(f"marker role {key!r} must be a list of names")
        out[key] = [claim(m, key) for m in values]
    return out


def create_marker_set(*, session: Session, name: str, roles: dict[str, Any]) -> MarkerSet:
    """Create a named marker set after checking its roles."""
    ms = MarkerSet(name=need_text(name, name="name"), roles=validate_roles(roles))
    _commit_unique(session, ms, f"marker set {ms.name!r}")
    return ms


def get_marker_set(*, session: Session, marker_set_id: int) -> MarkerSet:
    """The marker set or NotFound."""
    return get_or_404(session, MarkerSet, marker_set_id, "marker set")


def list_marker_sets(
    *, session: Session, offset: int = 0, limit: int = 100
) -> tuple[list[MarkerSet], int]:
    """Marker sets by id."""
    return paginate(session, select(MarkerSet).order_by(MarkerSet.id), offset=offset, limit=limit)


def create_subject(
    *,
    session: Session,
    label: str,
    species: str = "",
    marker_roles: dict[str, Any] | None = None,
    marker_set_id: int | None = None,
    mass_kg: float | None = None,
    body_length_m: float | None = None,
) -> Subject:
    """Create a subject; ``marker_roles`` makes a marker set named ``"<label> markers"``."""
    label = need_text(label, name="label")
    if marker_roles is not None and marker_set_id is not None:
        raise BadInput("give marker_roles or marker_set_id, not both")
    subject = Subject(
        label=label,
        species=free_text(species, name="species", max_len=200).strip(),
        mass_kg=optional_positive(mass_kg, name="mass_kg"),
        body_length_m=optional_positive(body_length_m, name="body_length_m"),
    )
    if marker_set_id is not None:
        subject.marker_set = get_marker_set(session=session, marker_set_id=marker_set_id)
    elif marker_roles is not None:
        subject.marker_set = MarkerSet(name=f"{label} markers", roles=validate_roles(marker_roles))
    _commit_unique(session, subject, f"subject {label!r} (or its marker set)")
    return subject


def get_subject(*, session: Session, subject_id: int) -> Subject:
    """The subject or NotFound."""
    return get_or_404(session, Subject, subject_id, "subject")


def list_subjects(
    *,
    session: Session,
    species: str | None = None,
    study_id: int | None = None,
    offset: int = 0,
    limit: int = 100,
) -> tuple[list[Subject], int]:
    """Subjects by id, optionally of one species or one study (rule: ``storage.repo.studies``)."""
    stmt = select(Subject).order_by(Subject.id)
    if species is not None:
        stmt = stmt.where(Subject.species == species)
    if study_id is not None:
        get_study(session=session, study_id=study_id)
        stmt = stmt.where(Subject.id.in_(subject_ids_in_study(study_id)))
    return paginate(session, stmt, offset=offset, limit=limit)
