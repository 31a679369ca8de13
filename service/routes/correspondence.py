"""Correspondence: how terrain measures relate to movement measures across arenas."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Query, Request
from fastapi.responses import PlainTextResponse
from pydantic import Field
from starlette.concurrency import run_in_threadpool

from service.analysis.tables import Selection
from service.deps import ReadToken
from service.schemas import (
    CorrespondencePublic,
    CorrespondenceRowPublic,
    LocalCorrespondencePublic,
)

router = APIRouter(tags=["correspondence"])


class CorrespondenceArenaRowPublic(CorrespondenceRowPublic):
    """One estimable terrain x movement pair; the interval is the arena-level one."""

    slope: float | None = Field(
        description="Arena-level slope: subject-adjusted arena mean movement on terrain (OLS)."
    )
    ci_low: float | None = Field(description="Arena-level 95 % t interval, lower end.")
    ci_high: float | None = Field(description="Arena-level 95 % t interval, upper end.")
    slope_se: float | None = None
    slope_df: int | None = Field(None, description="n_arenas - 2 - number of covariates.")
    spearman_p_value: float | None = Field(
        None, description="Exact permutation p below 10 arenas, t approximation from 10."
    )
    ci_method: str = "arena"
    trial_slope: float | None = Field(
        None, description="Trial-level mixed model (subject intercept only); reference only."
    )
    trial_ci_low: float | None = None
    trial_ci_high: float | None = None
    terrain_group: list[str] = Field(
        default_factory=list, description="Representative first, then measures folded into it."
    )
    movement_group: list[str] = Field(default_factory=list)
    arena_points: list[dict[str, Any]] = Field(
        default_factory=list,
        description="Per arena: arena_id, arena_name, terrain, movement (subject-adjusted "
        "mean), movement_ci_low, movement_ci_high, n_trials, n_subjects.",
    )
    fit_line: dict[str, Any] | None = Field(
        None, description="Arena-level line: intercept, slope, x, y, band_low, band_high."
    )


class CorrespondenceAdjustedPublic(CorrespondencePublic):
    """The correspondence report with its study, covariates, confound checks and design."""

    rows: list[CorrespondenceArenaRowPublic]  # type: ignore[assignment]
    scan_policy: dict[str, Any] = Field(
        default_factory=dict, description="Which scans give each arena's terrain, and why."
    )
    warning_details: list[dict[str, Any]] = Field(
        default_factory=list,
        description="Each warning with its scope (study, measure, pair), measures, n_arenas.",
    )
    not_estimable: list[dict[str, Any]] = Field(
        default_factory=list,
        description="Measures or pairs without a row: terrain_measure, movement_measure, "
        "reason, n_arenas.",
    )
    groups: dict[str, list[dict[str, Any]]] = Field(
        default_factory=dict, description="Redundant measures folded into one representative."
    )
    group_threshold_r: float | None = None
    min_relative_spread: float | None = None
    methods: dict[str, str] = Field(default_factory=dict)

    study: str | None = Field(None, description="Study the selection was limited to.")
    covariates: dict[str, Any] = Field(
        default_factory=dict, description="Covariates adjusted for and how (names, method)."
    )
    confounds: dict[str, Any] = Field(
        default_factory=dict,
        description="Speed vs terrain across arenas, subject-by-arena balance, collinearity.",
    )
    design: dict[str, Any] = Field(
        default_factory=dict,
        description="Arenas x subjects trial counts and the detectable rank correlation.",
    )


IntList = Annotated[list[int], Query()]
TextList = Annotated[list[str], Query()]
MeasureList = Annotated[
    list[str],
    Query(
        description="Measures to pair (repeat or comma-separate). Empty: the headline "
        "measures (service.analysis.grid.HEADLINE_MEASURES); 'all': every scored, "
        "non-diagnostic measure."
    ),
]
Permutations = Annotated[int, Query(ge=99, le=99_999, description="Arena permutations.")]
Boot = Annotated[int, Query(ge=99, le=99_999, description="Hierarchical bootstrap replicates.")]
Scans = Annotated[
    Literal["latest", "mean"],
    Query(description="Several scans of one arena: the latest scored one, or their mean."),
]
CSV_RESPONSE: dict[int | str, dict[str, Any]] = {
    200: {"content": {"text/csv": {}}, "description": "JSON, or CSV rows with format=csv."}
}


def _texts(values: list[str]) -> tuple[str, ...]:
    # Accept repeated parameters and comma-separated lists alike.
    return tuple(v.strip() for item in values for v in item.split(",") if v.strip())


def _selection(
    arena_id: list[int],
    subject_id: list[int],
    condition: list[str],
    trial_id: list[int],
    terrain_measure: list[str],
    movement_measure: list[str],
    scans: str,
    covariate: list[str] = [],  # noqa: B006 (never mutated)
    study: str | None = None,
) -> Selection:
    return Selection(
        arena_ids=tuple(arena_id),
        subject_ids=tuple(subject_id),
        conditions=_texts(condition),
        trial_ids=tuple(trial_id),
        terrain_measures=_texts(terrain_measure),
        movement_measures=_texts(movement_measure),
        scans=scans,
        covariates=_texts(covariate),
        study=study,
    )


@router.get("/correspondence", response_model=CorrespondenceAdjustedPublic, responses=CSV_RESPONSE)
async def get_correspondence(
    request: Request,
    token: ReadToken,
    recipe: str,
    version: int | None = None,
    format: Literal["json", "csv"] = "json",
    arena_id: IntList = [],  # noqa: B006 (FastAPI copies query defaults)
    subject_id: IntList = [],  # noqa: B006
    condition: TextList = [],  # noqa: B006
    trial_id: IntList = [],  # noqa: B006
    terrain_measure: MeasureList = [],  # noqa: B006
    movement_measure: MeasureList = [],  # noqa: B006
    scans: Scans = "latest",
    n_permutations: Permutations = 9999,
    n_boot: Boot = 1999,
    seed: int = 0,
    covariate: Annotated[
        list[str],
        Query(description="Trial covariates to adjust for (speed_m_s, trial_duration_s, ...)."),
    ] = [],  # noqa: B006
    study: Annotated[str | None, Query(description="Limit to this study's members.")] = None,
) -> Any:
    """Mixed model, arena permutation test, bootstrap Spearman and BH for every measure pair."""
    selection = _selection(
        arena_id,
        subject_id,
        condition,
        trial_id,
        terrain_measure,
        movement_measure,
        scans,
        covariate,
        study,
    )

    # The analysis layer (numba, scipy.stats) loads on first use, not at server start.
    from service.analysis.grid import correspondence_report, rows_csv

    def compute() -> dict[str, Any]:
        with request.app.state.sessionmaker() as session:
            return correspondence_report(
                session=session,
                recipe=recipe,
                version=version,
                selection=selection,
                n_permutations=n_permutations,
                n_boot=n_boot,
                seed=seed,
            )

    report = await run_in_threadpool(compute)
    if format == "csv":
        return PlainTextResponse(rows_csv(report["rows"]), media_type="text/csv")
    return report


async def _local(request: Request, **kwargs: Any) -> dict[str, Any]:
    from service.analysis.local import local_report  # loads numerics on first use

    def compute() -> dict[str, Any]:
        with request.app.state.sessionmaker() as session:
            return local_report(session=session, store=request.app.state.store, **kwargs)

    return await run_in_threadpool(compute)


WindowS = Annotated[float, Query(gt=0, le=600, description="Window length (s), no overlap.")]
MarginM = Annotated[
    float | None,
    Query(ge=0, description="Patch margin around the path (m); default body length / 4."),
]
LocalPermutations = Annotated[int, Query(ge=99, le=99_999, description="Cyclic-shift draws.")]


@router.get("/correspondence/local", response_model=LocalCorrespondencePublic)
async def get_local_correspondence(
    request: Request,
    token: ReadToken,
    recipe: str,
    version: int | None = None,
    arena_id: IntList = [],  # noqa: B006
    subject_id: IntList = [],  # noqa: B006
    condition: TextList = [],  # noqa: B006
    trial_id: IntList = [],  # noqa: B006
    window_s: WindowS = 2.0,
    margin_m: MarginM = None,
    n_permutations: LocalPermutations = 999,
    seed: int = 0,
) -> Any:
    """Window-level movement complexity against the terrain patch under the animal."""
    selection = _selection(arena_id, subject_id, condition, trial_id, [], [], "latest")
    return await _local(
        request,
        recipe=recipe,
        version=version,
        selection=selection,
        window_s=window_s,
        margin_m=margin_m,
        n_permutations=n_permutations,
        seed=seed,
    )


@router.get("/trials/{trial_id}/local-correspondence", response_model=LocalCorrespondencePublic)
async def get_trial_local_correspondence(
    trial_id: int,
    request: Request,
    token: ReadToken,
    recipe: str,
    version: int | None = None,
    window_s: WindowS = 2.0,
    margin_m: MarginM = None,
    n_permutations: LocalPermutations = 999,
    seed: int = 0,
) -> Any:
    """Local correspondence of one overground trial (within-trial Spearman per window pair)."""
    return await _local(
        request,
        recipe=recipe,
        version=version,
        trial_ids=[trial_id],
        window_s=window_s,
        margin_m=margin_m,
        n_permutations=n_permutations,
        seed=seed,
    )
