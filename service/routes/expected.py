"""Expected movement: what the study's arena-level fit predicts for one arena's ground."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Query, Request
from fastapi.responses import PlainTextResponse
from pydantic import BaseModel, Field
from starlette.concurrency import run_in_threadpool

from service.deps import ReadToken

router = APIRouter(tags=["correspondence"])


class ExpectedRowPublic(BaseModel):
    """One movement measure; the first five fields are the contract."""

    movement_measure: str
    predicted: float | None = Field(description="Predicted arena mean; null: not predicted.")
    pi_low: float | None = Field(description="95 % prediction interval, lower end.")
    pi_high: float | None = Field(description="95 % prediction interval, upper end.")
    n_arenas: int = Field(description="Arenas the fit used (this arena left out).")
    terrain_measure: str | None = None
    baseline_predicted: float | None = Field(
        None, description="The terrain-ignoring prediction: the other arenas' mean."
    )
    baseline_pi_low: float | None = None
    baseline_pi_high: float | None = None
    note: str = Field("", description="Why there is no prediction, or that it extrapolates.")


class ExpectedMovementPublic(BaseModel):
    """Expected movement on one arena's ground (contract: rows and warnings)."""

    rows: list[ExpectedRowPublic]
    warnings: list[str]
    arena_id: int
    arena_name: str
    recipe: dict[str, Any]
    study: str | None = None
    terrain_measure: str | None = None
    terrain_measure_choice: str = ""
    terrain_value: float | None = None
    left_out: bool = Field(description="The arena belongs to the study and was left out.")
    n_arenas: int
    level: float
    scan_policy: dict[str, Any]
    method: str


CSV_RESPONSE: dict[int | str, dict[str, Any]] = {
    200: {"content": {"text/csv": {}}, "description": "JSON, or CSV rows with format=csv."}
}


@router.get(
    "/arenas/{arena_id}/expected-movement",
    response_model=ExpectedMovementPublic,
    responses=CSV_RESPONSE,
)
async def get_expected_movement(
    arena_id: int,
    request: Request,
    token: ReadToken,
    recipe: str,
    version: int | None = None,
    format: Literal["json", "csv"] = "json",
    terrain_measure: Annotated[
        str | None,
        Query(description="Terrain measure to predict from; default: the dominant one."),
    ] = None,
    movement_measure: Annotated[
        list[str], Query(description="Movement measures (default: the headline ones).")
    ] = [],  # noqa: B006 (FastAPI copies query defaults)
    study: Annotated[str | None, Query(description="Fit on this study's members.")] = None,
    scans: Literal["latest", "mean"] = "latest",
) -> Any:
    """Predicted movement measures with 95 % prediction intervals, this arena left out."""
    names = tuple(v.strip() for item in movement_measure for v in item.split(",") if v.strip())
    # The analysis layer (numba, scipy.stats) loads on first use, not at server start.
    from service.analysis.expected import expected_csv, expected_movement

    def compute() -> dict[str, Any]:
        with request.app.state.sessionmaker() as session:
            return expected_movement(
                session=session,
                recipe=recipe,
                version=version,
                arena_id=arena_id,
                terrain_measure=terrain_measure,
                movement_measures=names,
                study=study,
                scans=scans,
            )

    body = await run_in_threadpool(compute)
    if format == "csv":
        return PlainTextResponse(expected_csv(body["rows"]), media_type="text/csv")
    return body
