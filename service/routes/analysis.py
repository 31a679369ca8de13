"""Export of the assembled analysis table, so a statistician can refit it elsewhere."""

from __future__ import annotations

import io
import re
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Query, Request, Response
from starlette.concurrency import run_in_threadpool

from service.analysis.tables import Selection, load_study
from service.deps import ReadToken
from storage import repo
from storage.errors import BadInput

router = APIRouter(tags=["export"])

MEDIA = {"csv": "text/csv; charset=utf-8", "parquet": "application/vnd.apache.parquet"}
TABLE_RESPONSE: dict[int | str, dict[str, Any]] = {
    200: {
        "content": {MEDIA["csv"]: {}, MEDIA["parquet"]: {}},
        "description": "One row per trial: study, arena, subject, terrain, movement, covariates.",
    }
}
TextList = Annotated[list[str], Query()]


def _texts(values: list[str]) -> tuple[str, ...]:
    return tuple(v.strip() for item in values for v in item.split(",") if v.strip())


@router.get("/export/analysis-table", response_class=Response, responses=TABLE_RESPONSE)
async def export_analysis_table(
    request: Request,
    token: ReadToken,
    recipe: str,
    version: int | None = None,
    format: Literal["csv", "parquet"] = "csv",
    study: Annotated[str | None, Query(description="Limit to this study's members.")] = None,
    arena_id: Annotated[list[int], Query()] = [],  # noqa: B006 (FastAPI copies query defaults)
    subject_id: Annotated[list[int], Query()] = [],  # noqa: B006
    condition: TextList = [],  # noqa: B006
    terrain_measure: TextList = [],  # noqa: B006
    movement_measure: TextList = [],  # noqa: B006
    covariate: TextList = [],  # noqa: B006
    scans: Literal["latest", "mean"] = "latest",
) -> Response:
    """The analysis table the correspondence fits, one row per trial, as CSV or Parquet."""
    selection = Selection(
        arena_ids=tuple(arena_id),
        subject_ids=tuple(subject_id),
        conditions=_texts(condition),
        terrain_measures=_texts(terrain_measure),
        movement_measures=_texts(movement_measure),
        covariates=_texts(covariate),
        scans=scans,
        study=study,
    )

    def build() -> bytes:
        with request.app.state.sessionmaker() as session:
            prof = repo.get_recipe(session=session, name=recipe, version=version)
            tables = load_study(session=session, recipe_hash=prof.hash, selection=selection)
        if tables.trials.empty:
            raise BadInput("no scored trials in this selection under this recipe")
        frame = tables.export_table()
        frame.insert(1, "recipe", f"{prof.name}@{prof.version}")
        if format == "parquet":
            buf = io.BytesIO()
            frame.to_parquet(buf, index=False)
            return buf.getvalue()
        text: str = frame.to_csv(index=False)  # pandas is untyped here; no path -> str
        return text.encode()

    body = await run_in_threadpool(build)
    stem = re.sub(r"[^A-Za-z0-9_.-]+", "_", f"{recipe}-{study}" if study else recipe)
    name = f"gaitscape-analysis-{stem}.{format}"
    return Response(
        body,
        media_type=MEDIA[format],
        headers={"Content-Disposition": f'attachment; filename="{name}"'},
    )
