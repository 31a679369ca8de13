"""Scores: query them, and export them tidy (one row per score) or wide (one row per target).

Each score carries its ``note`` (why a value is missing, automatic choices): a column of the
tidy exports, ``<measure>_note`` columns in the wide ones.
"""

from __future__ import annotations

import csv
import io
import json
from collections.abc import Iterator
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Query
from fastapi.responses import Response, StreamingResponse
from pydantic import BaseModel
from sqlalchemy.orm import Session

from service.deps import ReadToken, SessionDep
from service.routes.arenas import Limit, Offset, StudyFilter
from service.schemas import ScoreRowPublic, ScoresPublic
from storage import repo
from storage.repo.scores import SCORE_ROW_COLUMNS, iter_score_rows, query_scores

router = APIRouter(tags=["scores"])

# Columns that identify a target in the wide table (one row each).
WIDE_KEYS = ("target_kind", "target_id", "arena_id", "arena", "subject_id", "subject",
             "condition", "recipe", "recipe_hash")  # fmt: skip
MEDIA = {"csv": "text/csv; charset=utf-8", "json": "application/json",
         "parquet": "application/vnd.apache.parquet"}  # fmt: skip


class ScoreFilters(BaseModel):
    target_kind: Literal["scan", "trial"] | None = None
    arena_id: int | None = None
    subject_id: int | None = None
    trial_id: int | None = None
    scan_id: int | None = None
    condition: str | None = None
    recipe_hash: str | None = None
    measure: str | None = None
    study_id: int | None = None


# Ids are 64-bit in every backend; a bound here turns an absurd id into a 422 before a
# streamed export has sent its headers (schemathesis found 2**63 failing mid-stream).
RowId = Annotated[int | None, Query(ge=0, le=2**63 - 1)]


def score_filters(
    session: SessionDep,
    study_id: StudyFilter,
    target_kind: Literal["scan", "trial"] | None = None,
    arena_id: RowId = None,
    subject_id: RowId = None,
    trial_id: RowId = None,
    scan_id: RowId = None,
    condition: str | None = None,
    recipe: Annotated[str | None, Query(description="Recipe name (latest version).")] = None,
    recipe_version: Annotated[int | None, Query(ge=1)] = None,
    recipe_hash: str | None = None,
    measure: str | None = None,
) -> ScoreFilters:
    """The filters shared by the query and the export; a recipe name becomes its hash, a
    study name its id."""
    if recipe is not None:
        recipe_hash = repo.get_recipe(session=session, name=recipe, version=recipe_version).hash
    _known_ids(session, arena_id, subject_id, trial_id, scan_id)
    return ScoreFilters(
        target_kind=target_kind, arena_id=arena_id, subject_id=subject_id, trial_id=trial_id,
        scan_id=scan_id, condition=condition, recipe_hash=recipe_hash, measure=measure,
        study_id=study_id,
    )  # fmt: skip


FiltersDep = Annotated[ScoreFilters, Depends(score_filters)]


@router.get("/scores")
def list_scores(
    session: SessionDep, token: ReadToken, filters: FiltersDep, offset: Offset = 0,
    limit: Limit = 100,
) -> ScoresPublic:  # fmt: skip
    """Scores with their arena, subject and condition; trial filters leave out scan scores."""
    rows, count = query_scores(session=session, offset=offset, limit=limit, **filters.model_dump())
    return ScoresPublic(data=[ScoreRowPublic.model_validate(r) for r in rows], count=count)


# -- (ui, issue 18 item 6) unknown ids are 404; frames typed as pandas expects -------------
def _known_ids(
    session: Session,
    arena_id: int | None,
    subject_id: int | None,
    trial_id: int | None,
    scan_id: int | None,
) -> None:
    """An unknown id in a filter is a 404 (NotFound), as an unknown study is, never an empty
    table that a typo would make look like 'no scores'."""
    if arena_id is not None:
        repo.get_arena(session=session, arena_id=arena_id)
    if subject_id is not None:
        repo.get_subject(session=session, subject_id=subject_id)
    if trial_id is not None:
        repo.get_trial(session=session, trial_id=trial_id)
    if scan_id is not None:
        repo.get_scan(session=session, scan_id=scan_id)


_INT_COLUMNS = ("target_id", "arena_id", "subject_id")
_FLOAT_COLUMNS = ("value", "ci_low", "ci_high", "surrogate_z")


def _typed(frame: Any) -> Any:
    """Ids as nullable integers (Int64), values as float64 with NaN, ``computed_at`` as a UTC
    timestamp: what ``pandas.read_parquet`` then returns without a cast by the user."""
    import pandas as pd

    frame = frame.copy()
    for col in _INT_COLUMNS:
        if col in frame:
            frame[col] = pd.array(pd.to_numeric(frame[col]), dtype="Int64")
    for col in _FLOAT_COLUMNS:
        if col in frame:
            frame[col] = pd.to_numeric(frame[col], errors="coerce").astype("float64")
    if "computed_at" in frame:
        frame["computed_at"] = pd.to_datetime(frame["computed_at"], utc=True)
    return frame


# -- end (ui) ------------------------------------------------------------------------------------
def _recipe_labels(session: Session) -> dict[str, str]:
    # Equal parameters share a hash; the earliest name and version labels it.
    labels: dict[str, str] = {}
    offset = 0
    while True:
        rows, count = repo.list_recipes(session=session, offset=offset, limit=1000)
        for p in rows:
            labels.setdefault(p.hash, f"{p.name}@{p.version}")  # one label format (ui)
        offset += len(rows)
        if not rows or offset >= count:
            return labels


def _tidy_rows(session: Session, filters: ScoreFilters) -> Iterator[dict[str, Any]]:
    labels = _recipe_labels(session)
    for row in iter_score_rows(session=session, **filters.model_dump()):
        row.pop("score_id", None)
        row["recipe"] = labels.get(row["recipe_hash"], "")
        computed = row.get("computed_at")
        row["computed_at"] = None if computed is None else computed.isoformat()
        yield row


TIDY_COLUMNS = [c for c in SCORE_ROW_COLUMNS if c != "score_id"]
TIDY_COLUMNS.insert(TIDY_COLUMNS.index("recipe_hash"), "recipe")


def _csv_lines(rows: Iterator[dict[str, Any]], columns: list[str]) -> Iterator[str]:
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=columns, extrasaction="ignore", lineterminator="\n")
    writer.writeheader()
    for i, row in enumerate(rows, 1):
        writer.writerow(row)
        if i % 500 == 0:
            yield buf.getvalue()
            buf.seek(0)
            buf.truncate()
    yield buf.getvalue()


def _json_array(rows: Iterator[dict[str, Any]]) -> Iterator[str]:
    yield "["
    for i, row in enumerate(rows):
        yield ("," if i else "") + json.dumps(row, allow_nan=False)
    yield "]"


def _frame(rows: Iterator[dict[str, Any]], shape: str) -> Any:
    import pandas as pd

    frame = pd.DataFrame(list(rows), columns=TIDY_COLUMNS)
    if shape == "tidy":
        return frame
    if frame.empty:
        return pd.DataFrame(columns=list(WIDE_KEYS))
    # A target under one recipe hash is one row; its context columns are constant there.
    ident = ["target_kind", "target_id", "recipe_hash"]
    values = frame.pivot_table(index=ident, columns="measure", values="value", aggfunc="first")
    # A measure missing everywhere keeps its column (its notes say why).
    values = values.reindex(columns=sorted(frame["measure"].unique()))
    values.columns.name = None
    context = frame[list(WIDE_KEYS)].drop_duplicates(subset=ident)
    wide = context.merge(values.reset_index(), on=ident, how="left")
    # Notes beside their values: "<measure>_note" for every measure that has one somewhere.
    noted = frame[frame["note"].fillna("").astype(str) != ""]
    if noted.empty:
        return wide
    notes = noted.pivot_table(index=ident, columns="measure", values="note", aggfunc="first")
    notes.columns = [f"{m}_note" for m in notes.columns]
    return wide.merge(notes.reset_index(), on=ident, how="left")


@router.get(
    "/export/scores",
    responses={200: {"content": {m: {} for m in MEDIA.values()}}},
)
def export_scores(
    session: SessionDep,
    token: ReadToken,
    filters: FiltersDep,
    format: Literal["csv", "json", "parquet"] = "csv",
    shape: Literal["tidy", "wide"] = "tidy",
) -> Response:
    """Scores as CSV, JSON records or Parquet: tidy (one row per score) or wide (per target)."""
    name = f"gaitscape-scores-{shape}.{format}"
    headers = {"Content-Disposition": f'attachment; filename="{name}"'}
    rows = _tidy_rows(session, filters)
    if shape == "tidy" and format == "csv":
        return StreamingResponse(_csv_lines(rows, TIDY_COLUMNS), media_type=MEDIA["csv"],
                                 headers=headers)  # fmt: skip
    if shape == "tidy" and format == "json":
        return StreamingResponse(_json_array(rows), media_type=MEDIA["json"], headers=headers)
    frame = _typed(_frame(rows, shape))
    if format == "parquet":
        buf = io.BytesIO()
        frame.to_parquet(buf, index=False)
        return Response(buf.getvalue(), media_type=MEDIA["parquet"], headers=headers)
    if format == "csv":
        return Response(frame.to_csv(index=False), media_type=MEDIA["csv"], headers=headers)
    return Response(
        frame.to_json(orient="records", date_format="iso"), media_type=MEDIA["json"],
        headers=headers,
    )  # fmt: skip
