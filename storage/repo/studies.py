"""Studies: named groups of arenas, subjects and trials, and membership queries.

Membership rule (the one place it is defined; every ``study_id=`` filter uses it):

- a **trial** is in a study when it is a member itself, or when its arena and its subject
  both are;
- an **arena** (a **subject**) is in a study when it is a member itself, or when it is the
  arena (the subject) of a trial in the study -- so every trial a study lists has its arena
  and subject listed too;
- a **scan** is in a study when its arena is;
- a **score** is in a study when its target (trial or scan) is.

The ``*_in_study`` functions return SELECTs of ids for use as SQL ``IN`` subqueries, so lists
filter and count in the database.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import Select, Table, and_, insert, or_, select
from sqlalchemy.orm import Session

from storage.errors import Conflict, NotFound
from storage.models import (
    Arena,
    Scan,
    Score,
    Study,
    Subject,
    Trial,
    study_arenas,
    study_subjects,
    study_trials,
)
from storage.repo._common import get_or_404, need_text, paginate

__all__ = [
    "StudyRows",
    "add_study_members",
    "arena_ids_in_study",
    "arena_scan_scores",
    "create_study",
    "get_study",
    "get_study_by_name",
    "list_studies",
    "load_study_rows",
    "scan_ids_in_study",
    "study_members",
    "study_trial_ids",
    "subject_ids_in_study",
    "trial_ids_in_study",
]

_TABLES: dict[str, tuple[Table, type[Arena] | type[Subject] | type[Trial], str]] = {
    "arena": (study_arenas, Arena, "arena_id"),
    "subject": (study_subjects, Subject, "subject_id"),
    "trial": (study_trials, Trial, "trial_id"),
}


def create_study(*, session: Session, name: str, notes: str = "") -> Study:
    """A new study; Conflict when the name is taken."""
    text = need_text(name, name="name")
    if session.scalar(select(Study).where(Study.name == text)) is not None:
        raise Conflict(f"a study named {text!r} exists")
    study = Study(name=text, notes=notes or "")
    session.add(study)
    session.commit()
    return study


def get_study(*, session: Session, study_id: int) -> Study:
    """The study with this id, or NotFound."""
    return get_or_404(session, Study, study_id, "study")


def get_study_by_name(*, session: Session, name: str) -> Study:
    """The study with this name, or NotFound."""
    study = session.scalar(select(Study).where(Study.name == name))
    if study is None:
        raise NotFound("study", name)
    return study


def list_studies(*, session: Session, offset: int = 0, limit: int = 100) -> tuple[list[Study], int]:
    """Studies by id."""
    return paginate(session, select(Study).order_by(Study.id), offset=offset, limit=limit)


def add_study_members(
    *,
    session: Session,
    study_id: int,
    arena_ids: Iterable[int] = (),
    subject_ids: Iterable[int] = (),
    trial_ids: Iterable[int] = (),
) -> dict[str, list[int]]:
    """Add members (idempotent: existing memberships are kept); NotFound for unknown ids."""
    get_study(session=session, study_id=study_id)
    wanted = {"arena": arena_ids, "subject": subject_ids, "trial": trial_ids}
    for kind, ids in wanted.items():
        table, model, column = _TABLES[kind]
        ids = sorted({int(i) for i in ids})
        if not ids:
            continue
        found = set(session.scalars(select(model.id).where(model.id.in_(ids))))
        missing = [i for i in ids if i not in found]
        if missing:
            session.rollback()
            raise NotFound(kind, missing[0] if len(missing) == 1 else missing)
        have = set(
            session.scalars(
                select(table.c[column]).where(
                    table.c.study_id == study_id, table.c[column].in_(ids)
                )
            )
        )
        new = [{"study_id": study_id, column: i} for i in ids if i not in have]
        if new:
            session.execute(insert(table), new)
    session.commit()
    return study_members(session=session, study_id=study_id)


def study_members(*, session: Session, study_id: int) -> dict[str, list[int]]:
    """Ids of the study's arenas, subjects and trials (explicit memberships)."""
    get_study(session=session, study_id=study_id)
    out = {}
    for kind, (table, _, column) in _TABLES.items():
        out[f"{kind}_ids"] = sorted(
            session.scalars(select(table.c[column]).where(table.c.study_id == study_id))
        )
    return out


def trial_ids_in_study(study_id: int) -> Select[int]:
    """SELECT of the ids of the study's trials: members, or arena and subject both members."""
    arenas = select(study_arenas.c.arena_id).where(study_arenas.c.study_id == study_id)
    subjects = select(study_subjects.c.subject_id).where(study_subjects.c.study_id == study_id)
    trials = select(study_trials.c.trial_id).where(study_trials.c.study_id == study_id)
    return select(Trial.id).where(
        or_(
            Trial.id.in_(trials),
            Trial.arena_id.in_(arenas) & Trial.subject_id.in_(subjects),
        )
    )


def arena_ids_in_study(study_id: int) -> Select[int]:
    """SELECT of the ids of the study's arenas: members, or the arena of a study trial."""
    members = select(study_arenas.c.arena_id).where(study_arenas.c.study_id == study_id)
    of_trials = select(Trial.arena_id).where(Trial.id.in_(trial_ids_in_study(study_id)))
    return select(Arena.id).where(or_(Arena.id.in_(members), Arena.id.in_(of_trials)))


def subject_ids_in_study(study_id: int) -> Select[int]:
    """SELECT of the ids of the study's subjects: members, or the subject of a study trial."""
    members = select(study_subjects.c.subject_id).where(study_subjects.c.study_id == study_id)
    of_trials = select(Trial.subject_id).where(Trial.id.in_(trial_ids_in_study(study_id)))
    return select(Subject.id).where(or_(Subject.id.in_(members), Subject.id.in_(of_trials)))


def scan_ids_in_study(study_id: int) -> Select[int]:
    """SELECT of the ids of the scans of the study's arenas."""
    return select(Scan.id).where(Scan.arena_id.in_(arena_ids_in_study(study_id)))


def study_trial_ids(*, session: Session, study_id: int) -> set[int]:
    """Trials in the study: members themselves, or whose arena and subject both are."""
    get_study(session=session, study_id=study_id)
    return set(session.scalars(trial_ids_in_study(study_id)))


@dataclass(frozen=True)
class StudyRows:
    """Everything a correspondence needs, read in three statements (no per-row lookups).

    ``trials``: one mapping per selected trial with its arena name and kind and its
    subject's label, body length and mass. ``scans``: every scan of those arenas (id,
    arena_id, kind, captured_at, created_at, heightmap_sha256, dx_m). ``scores``:
    ``(target_kind, target_id, measure, value, surrogate_z)`` of those trials and scans
    under the recipe.
    """

    trials: list[dict[str, Any]]
    scans: list[dict[str, Any]]
    scores: list[tuple[str, int, str, float | None, float | None]]


def load_study_rows(
    *,
    session: Session,
    recipe_hash: str,
    study_id: int | None = None,
    arena_ids: Sequence[int] = (),
    subject_ids: Sequence[int] = (),
    conditions: Sequence[str] = (),
    trial_ids: Sequence[int] = (),
) -> StudyRows:
    """Trials (joined with arena and subject), their arenas' scans and all their scores.

    Every filter is applied in SQL; the number of statements does not depend on the
    number of trials, scans or scores (three SELECTs). Filters combine with AND; an empty
    filter does not restrict; ``study_id`` applies the membership rule of this module.
    """
    trial_stmt = (
        select(
            Trial.id,
            Trial.arena_id,
            Trial.subject_id,
            Trial.condition,
            Trial.n_frames,
            Trial.frame_rate_hz,
            Trial.treadmill_speed_m_s,
            Arena.name.label("arena_name"),
            Arena.kind.label("arena_kind"),
            Subject.label.label("subject_label"),
            Subject.body_length_m,
            Subject.mass_kg,
        )
        .join(Arena, Arena.id == Trial.arena_id)
        .join(Subject, Subject.id == Trial.subject_id)
        .order_by(Trial.id)
    )
    if study_id is not None:
        get_study(session=session, study_id=study_id)
        trial_stmt = trial_stmt.where(Trial.id.in_(trial_ids_in_study(study_id)))
    if arena_ids:
        trial_stmt = trial_stmt.where(Trial.arena_id.in_(list(arena_ids)))
    if subject_ids:
        trial_stmt = trial_stmt.where(Trial.subject_id.in_(list(subject_ids)))
    if conditions:
        trial_stmt = trial_stmt.where(Trial.condition.in_(list(conditions)))
    if trial_ids:
        trial_stmt = trial_stmt.where(Trial.id.in_(list(trial_ids)))
    trials = [dict(r._mapping) for r in session.execute(trial_stmt)]
    selected = trial_stmt.with_only_columns(Trial.id).order_by(None)
    arenas_of = trial_stmt.with_only_columns(Trial.arena_id).order_by(None)
    scan_stmt = (
        select(
            Scan.id,
            Scan.arena_id,
            Scan.kind,
            Scan.captured_at,
            Scan.created_at,
            Scan.heightmap_sha256,
            Scan.dx_m,
        )
        .where(Scan.arena_id.in_(arenas_of))
        .order_by(Scan.id)
    )
    scans = [dict(r._mapping) for r in session.execute(scan_stmt)]
    score_stmt = select(
        Score.target_kind, Score.target_id, Score.measure, Score.value, Score.surrogate_z
    ).where(
        Score.recipe_hash == recipe_hash,
        or_(
            and_(Score.target_kind == "trial", Score.target_id.in_(selected)),
            and_(
                Score.target_kind == "scan",
                Score.target_id.in_(scan_stmt.with_only_columns(Scan.id).order_by(None)),
            ),
        ),
    )
    scores = [tuple(r) for r in session.execute(score_stmt)]
    return StudyRows(trials, scans, scores)  # type: ignore[arg-type]


def arena_scan_scores(
    *, session: Session, recipe_hash: str, arena_id: int
) -> tuple[list[dict[str, Any]], list[tuple[int, str, float | None]]]:
    """The arena's scans and their scores under the recipe, in two statements.

    Returns ``(scans, scores)``: scans as in :class:`StudyRows`, scores as
    ``(scan_id, measure, value)``. For an arena that may have no trials.
    """
    scan_stmt = (
        select(
            Scan.id,
            Scan.arena_id,
            Scan.kind,
            Scan.captured_at,
            Scan.created_at,
            Scan.heightmap_sha256,
            Scan.dx_m,
        )
        .where(Scan.arena_id == arena_id)
        .order_by(Scan.id)
    )
    scans = [dict(r._mapping) for r in session.execute(scan_stmt)]
    score_stmt = select(Score.target_id, Score.measure, Score.value).where(
        Score.recipe_hash == recipe_hash,
        Score.target_kind == "scan",
        Score.target_id.in_(scan_stmt.with_only_columns(Scan.id).order_by(None)),
    )
    return scans, [tuple(r) for r in session.execute(score_stmt)]  # type: ignore[misc]
