"""Dashboard data that the resource routes do not serve: decimated arrays for browser plots.

``GET /v1/dashboard/scans/{id}/heightmap`` and ``GET /v1/dashboard/trials/{id}/replay`` return
block-averaged heightmaps and frame-decimated markers, small enough for a WebGL plot.
"""

from __future__ import annotations

from typing import Annotated, Any

import numpy as np
from fastapi import APIRouter, Query, Request
from starlette.concurrency import run_in_threadpool

from service.deps import AnyToken, ReadToken, token_scopes
from storage import repo
from storage.errors import NotFound

router = APIRouter(prefix="/dashboard", tags=["dashboard"])

MaxPx = Annotated[int, Query(ge=8, le=400, description="Longest side of the returned grid.")]
MaxFrames = Annotated[int, Query(ge=10, le=5000, description="Frames returned at most.")]


def _nan_to_none(arr: np.ndarray, digits: int = 6) -> list[Any]:
    rounded = np.round(arr.astype(float), digits)
    return [[None if not np.isfinite(v) else float(v) for v in row] for row in rounded]


def _block_mean(z: np.ndarray, factor: int) -> np.ndarray:
    if factor <= 1:
        return z
    ny, nx = (z.shape[0] // factor) * factor, (z.shape[1] // factor) * factor
    blocks = z[:ny, :nx].reshape(ny // factor, factor, nx // factor, factor)
    with np.errstate(invalid="ignore"):
        means: np.ndarray = np.nanmean(blocks, axis=(1, 3))
    return means


def heightmap_payload(scan: Any, store: Any, max_px: int) -> dict[str, Any]:
    """A scan's stored heightmap, block-averaged to at most ``max_px`` cells a side (m)."""
    if not scan.heightmap_sha256:
        raise NotFound("heightmap of scan", scan.id)
    z = np.asarray(store.get_array(scan.heightmap_sha256), dtype=float)
    if scan.valid_mask_sha256:
        z = np.where(np.asarray(store.get_array(scan.valid_mask_sha256), dtype=bool), z, np.nan)
    factor = max(1, int(np.ceil(max(z.shape) / max_px)))
    small = _block_mean(z, factor)
    dx, dy = float(scan.dx_m) * factor, float(scan.dy_m) * factor
    return {
        "scan_id": scan.id,
        "arena_id": scan.arena_id,
        "units": "m",
        "x_m": (np.arange(small.shape[1]) * dx + dx / 2).round(6).tolist(),
        "y_m": (np.arange(small.shape[0]) * dy + dy / 2).round(6).tolist(),
        "z_m": _nan_to_none(small - np.nanmedian(small)),
        "block": factor,
    }


def _arena_heightmap_scan(session: Any, arena_id: int) -> Any | None:
    scans, _ = repo.list_scans(session=session, arena_id=arena_id, limit=1000)
    scans = [s for s in scans if s.heightmap_sha256]
    scans.sort(key=lambda s: (s.kind != "heightmap", s.id))
    return scans[0] if scans else None


def replay_payload(
    session: Any, store: Any, trial_id: int, max_frames: int, max_px: int
) -> dict[str, Any]:
    """Markers (preprocessed when stored, else raw) every k-th frame, plus the arena ground."""
    trial = repo.get_trial(session=session, trial_id=trial_id)
    if trial.preprocessed_sha256:
        markers = np.asarray(store.get_array(trial.preprocessed_sha256), dtype=float)
        source = "preprocessed"
    else:
        markers = repo.load_trial_data(session=session, store=store, trial_id=trial_id).markers
        source = "raw"
    step = max(1, int(np.ceil(markers.shape[0] / max_frames)))
    frames = markers[::step]
    subject = repo.get_subject(session=session, subject_id=trial.subject_id)
    roles = dict(subject.marker_set.roles) if subject.marker_set else {}
    scan = _arena_heightmap_scan(session, trial.arena_id)
    return {
        "trial_id": trial.id,
        "arena_id": trial.arena_id,
        "source": source,
        "units": "m",
        "frame_rate_hz": trial.frame_rate_hz,
        "frame_step": step,
        "time_s": (np.arange(frames.shape[0]) * step / trial.frame_rate_hz).round(5).tolist(),
        "marker_names": list(trial.marker_names or []),
        "feet": roles.get("feet", {}),
        "markers_m": [_nan_to_none(f, 5) for f in frames],
        "ground": None if scan is None else heightmap_payload(scan, store, max_px),
        "note": "Markers and ground are drawn in their stored frames; no registration applied.",
    }


@router.get("/scans/{scan_id}/heightmap")
async def scan_heightmap(
    scan_id: int, request: Request, token: ReadToken, max_px: MaxPx = 160
) -> dict[str, Any]:
    """A scan's heightmap, block-averaged for a browser surface plot (heights in m)."""

    def work() -> dict[str, Any]:
        with request.app.state.sessionmaker() as session:
            scan = repo.get_scan(session=session, scan_id=scan_id)
            return heightmap_payload(scan, request.app.state.store, max_px)

    return await run_in_threadpool(work)


@router.get("/trials/{trial_id}/replay")
async def trial_replay(
    trial_id: int,
    request: Request,
    token: ReadToken,
    max_frames: MaxFrames = 400,
    max_px: MaxPx = 120,
) -> dict[str, Any]:
    """A trial's markers (decimated) and its arena's heightmap, for the 3D replay."""

    def work() -> dict[str, Any]:
        with request.app.state.sessionmaker() as session:
            return replay_payload(session, request.app.state.store, trial_id, max_frames, max_px)

    return await run_in_threadpool(work)


TextList = Annotated[
    list[str],
    Query(description="Measures to pair (repeat or comma-separate); empty: the headline set."),
]


@router.get("/correspondence")
async def correspondence_view_route(
    request: Request,
    token: ReadToken,
    recipe: Annotated[str, Query(description="Recipe name whose scores are used.")] = "default",
    study: Annotated[
        str | None, Query(description="Limit to this study (404 when unknown).")
    ] = None,
    terrain_measure: TextList = [],  # noqa: B006 (never mutated)
    movement_measure: TextList = [],  # noqa: B006
) -> dict[str, Any]:
    """What the dashboard's correspondence page shows: the same numbers as the report.

    The correspondence is computed with the report's settings (``service.report.convention``:
    permutations, bootstrap, seed, scan policy) and turned into display values by
    ``service.report.view.correspondence_view``, the function the report uses.
    """
    from service.report.cache import shared_correspondence
    from service.report.study import load_study
    from service.report.view import correspondence_view

    study = study.strip() if study and study.strip() else None

    def split(values: list[str]) -> tuple[str, ...]:
        return tuple(v.strip() for item in values for v in item.split(",") if v.strip())

    def work() -> dict[str, Any]:
        with request.app.state.sessionmaker() as session:
            corr = shared_correspondence(
                session=session,
                recipe=recipe,
                study=study,
                terrain_measures=split(terrain_measure),
                movement_measures=split(movement_measure),
            )
            data = load_study(session=session, recipe=recipe, study=study)
            view = correspondence_view(data, corr)
            view["warnings"] = list(corr.get("warnings") or [])
            view["terrain_measures"] = corr.get("terrain_measures") or []
            view["movement_measures"] = corr.get("movement_measures") or []
            roughness = {a: v.get("sq_m", float("nan")) for a, v in data.terrain.items()}
            from service.report.figures import arena_colours

            colours = arena_colours([a.id for a in data.arenas], roughness)
            view["colours"] = {str(a): _hex(c) for a, c in colours.items()}
            return view

    return await run_in_threadpool(work)


def _hex(rgba: Any) -> str:
    r, g, b = (round(255 * float(v)) for v in tuple(rgba)[:3])
    return f"#{r:02x}{g:02x}{b:02x}"


@router.get("/whoami")
def whoami(token: AnyToken) -> dict[str, Any]:
    """The calling token's label and scopes (admin expanded), so pages offer only the forms
    the token may use; the routes behind the forms check the scope again."""
    return {"label": token.label or "", "scopes": sorted(token_scopes(token))}
