"""Analysis recipes and score rows."""

from __future__ import annotations

import hashlib
import json
import math
from collections.abc import Iterable, Iterator
from typing import Any

from sqlalchemy import Select, and_, func, or_, select
from sqlalchemy.orm import Session

from storage.errors import BadInput, NotFound
from storage.models import TARGET_KINDS, Arena, Recipe, Scan, Score, Subject, Trial, utcnow
from storage.repo._common import need_text, paginate
from storage.repo.studies import get_study, scan_ids_in_study, trial_ids_in_study

__all__ = [
    "create_recipe",
    "get_recipe",
    "get_recipe_by_hash",
    "iter_score_rows",
    "list_recipes",
    "list_scores",
    "query_scores",
    "recipe_hash",
    "save_scores",
]


def recipe_hash(parameters: dict[str, Any]) -> str:
    """sha256 of the parameters as canonical JSON (sorted keys, no spaces)."""
    try:
        text = json.dumps(parameters, sort_keys=True, separators=(",", ":"), allow_nan=False)
    except (TypeError, ValueError) as exc:
        raise BadInput(f"recipe parameters must be plain JSON: {exc}") from None
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def create_recipe(
    *, session: Session, name: str, parameters: dict[str, Any]
) -> tuple[Recipe, bool]:
    """A new version of recipe ``name``; the latest one back if its parameters are equal."""
    name = need_text(name, name="name")
    if not isinstance(parameters, dict):
        raise BadInput("recipe parameters must be a JSON object")
    digest = recipe_hash(parameters)
    latest = _latest(session, name)
    if latest is not None and latest.hash == digest:
        return latest, False
    recipe = Recipe(
        name=name,
        version=1 if latest is None else latest.version + 1,
        parameters=json.loads(json.dumps(parameters)),
        hash=digest,
    )
    session.add(recipe)
    session.commit()
    session.refresh(recipe)
    return recipe, True


def _latest(session: Session, name: str) -> Recipe | None:
    return session.scalar(
        select(Recipe).where(Recipe.name == name).order_by(Recipe.version.desc()).limit(1)
    )


def get_recipe(*, session: Session, name: str, version: int | None = None) -> Recipe:
    """Recipe ``name`` at ``version`` (the latest when None), or NotFound."""
    if version is None:
        row = _latest(session, name)
    else:
        row = session.scalar(select(Recipe).where(Recipe.name == name, Recipe.version == version))
    if row is None:
        raise NotFound("recipe", name if version is None else f"{name} v{version}")
    return row


def get_recipe_by_hash(*, session: Session, recipe_hash: str) -> Recipe:
    """The earliest recipe with this parameter hash, or NotFound."""
    row = session.scalar(
        select(Recipe).where(Recipe.hash == recipe_hash).order_by(Recipe.id).limit(1)
    )
    if row is None:
        raise NotFound("recipe", recipe_hash)
    return row


def list_recipes(
    *, session: Session, offset: int = 0, limit: int = 100
) -> tuple[list[Recipe], int]:
    """Recipes by id (every version)."""
    return paginate(session, select(Recipe).order_by(Recipe.id), offset=offset, limit=limit)


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
    recipe_hash: str,
    scores: Iterable[Any],
    code_version: str,
    input_sha256: str,
) -> list[Score]:
    """Insert or replace scores (items with name, value, unit, ci_low, ci_high, surrogate_z,
    note).

    Non-finite values are stored as NULL (JSON has no NaN). ``note`` (why a value is
    missing, which automatic choice was made) is read with ``getattr``: score types without
    it store "". The scoring flows give every missing value its reason.
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
                Score.recipe_hash == recipe_hash,
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
            recipe_hash=recipe_hash,
            measure=item.name,
        )
        row.value = _num(item.value)
        row.unit = getattr(item, "unit", "") or ""
        row.ci_low = _num(getattr(item, "ci_low", None))
        row.ci_high = _num(getattr(item, "ci_high", None))
        row.surrogate_z = _num(getattr(item, "surrogate_z", None))
        row.note = str(getattr(item, "note", "") or "")
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
    recipe_hash: str | None = None,
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
    if recipe_hash is not None:
        stmt = stmt.where(Score.recipe_hash == recipe_hash)
    if measure is not None:
        stmt = stmt.where(Score.measure == measure)
    return paginate(session, stmt, offset=offset, limit=limit)


#: Columns of a score row with its context, in export order.
SCORE_ROW_COLUMNS = (
    "target_kind", "target_id", "arena_id", "arena", "subject_id", "subject", "condition",
    "recipe_hash", "measure", "value", "unit", "ci_low", "ci_high", "surrogate_z", "note",
    "code_version", "input_sha256", "computed_at", "score_id",
)  # fmt: skip


def _score_rows_stmt(
    *,
    target_kind: str | None,
    arena_id: int | None,
    subject_id: int | None,
    trial_id: int | None,
    scan_id: int | None,
    condition: str | None,
    recipe_hash: str | None,
    measure: str | None,
    study_id: int | None = None,
) -> Select[*tuple[Any, ...]]:
    arena_of = func.coalesce(Trial.arena_id, Scan.arena_id)
    stmt = (
        select(
            Score.target_kind,
            Score.target_id,
            arena_of.label("arena_id"),
            Arena.name.label("arena"),
            Trial.subject_id.label("subject_id"),
            Subject.label.label("subject"),
            Trial.condition.label("condition"),
            Score.recipe_hash,
            Score.measure,
            Score.value,
            Score.unit,
            Score.ci_low,
            Score.ci_high,
            Score.surrogate_z,
            Score.note,
            Score.code_version,
            Score.input_sha256,
            Score.computed_at,
            Score.id.label("score_id"),
        )
        .outerjoin(Trial, and_(Score.target_kind == "trial", Trial.id == Score.target_id))
        .outerjoin(Scan, and_(Score.target_kind == "scan", Scan.id == Score.target_id))
        .outerjoin(Arena, Arena.id == arena_of)
        .outerjoin(Subject, Subject.id == Trial.subject_id)
        .order_by(Score.id)
    )
    if target_kind is not None:
        if target_kind not in TARGET_KINDS:
            raise BadInput(f"target_kind must be one of {TARGET_KINDS}, got {target_kind!r}")
        stmt = stmt.where(Score.target_kind == target_kind)
    if trial_id is not None:
        stmt = stmt.where(Score.target_kind == "trial", Score.target_id == trial_id)
    if scan_id is not None:
        stmt = stmt.where(Score.target_kind == "scan", Score.target_id == scan_id)
    if arena_id is not None:
        stmt = stmt.where(arena_of == arena_id)
    if subject_id is not None:
        stmt = stmt.where(Trial.subject_id == subject_id)
    if condition is not None:
        stmt = stmt.where(Trial.condition == condition)
    if recipe_hash is not None:
        stmt = stmt.where(Score.recipe_hash == recipe_hash)
    if measure is not None:
        stmt = stmt.where(Score.measure == measure)
    if study_id is not None:
        # A score is in a study when its target is (rule: storage.repo.studies).
        trials, scans = trial_ids_in_study(study_id), scan_ids_in_study(study_id)
        stmt = stmt.where(
            or_(
                and_(Score.target_kind == "trial", Score.target_id.in_(trials)),
                and_(Score.target_kind == "scan", Score.target_id.in_(scans)),
            )
        )
    return stmt


def query_scores(
    *,
    session: Session,
    target_kind: str | None = None,
    arena_id: int | None = None,
    subject_id: int | None = None,
    trial_id: int | None = None,
    scan_id: int | None = None,
    condition: str | None = None,
    recipe_hash: str | None = None,
    measure: str | None = None,
    study_id: int | None = None,
    offset: int = 0,
    limit: int = 100,
) -> tuple[list[dict[str, Any]], int]:
    """Score rows with their arena, subject and condition (trial filters drop scan scores);
    ``study_id``: scores of the study's trials and scans (rule: ``storage.repo.studies``)."""
    if study_id is not None:
        get_study(session=session, study_id=study_id)
    stmt = _score_rows_stmt(
        target_kind=target_kind, arena_id=arena_id, subject_id=subject_id, trial_id=trial_id,
        scan_id=scan_id, condition=condition, recipe_hash=recipe_hash, measure=measure,
        study_id=study_id,
    )  # fmt: skip
    if not isinstance(offset, int) or offset < 0:
        raise BadInput(f"offset must be an integer >= 0, got {offset!r}")
    if not isinstance(limit, int) or not 1 <= limit <= 1000:
        raise BadInput(f"limit must be an integer in 1..1000, got {limit!r}")
    count = session.scalar(select(func.count()).select_from(stmt.order_by(None).subquery()))
    rows = [dict(r._mapping) for r in session.execute(stmt.offset(offset).limit(limit))]
    return rows, int(count or 0)


def iter_score_rows(
    *, session: Session, batch: int = 2000, **filters: Any
) -> Iterator[dict[str, Any]]:
    """Every matching score row (as ``query_scores``), fetched ``batch`` rows at a time."""
    if filters.get("study_id") is not None:
        get_study(session=session, study_id=filters["study_id"])
    stmt = _score_rows_stmt(**{k: filters.get(k) for k in (
        "target_kind", "arena_id", "subject_id", "trial_id", "scan_id", "condition",
        "recipe_hash", "measure", "study_id",
    )})  # fmt: skip
    last = 0
    while True:
        # Keyset pagination on the score id: stable while rows are being added.
        chunk = list(session.execute(stmt.where(Score.id > last).limit(batch)))
        if not chunk:
            return
        for row in chunk:
            yield dict(row._mapping)
        last = chunk[-1].score_id
