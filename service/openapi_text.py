"""Words for the OpenAPI document: a description for every parameter, tag texts, examples.

Route modules describe their own parameters where they can; ``describe_parameters`` fills
whatever is still bare from ``PARAMETER_TEXT`` (by name and place) and adds request and
response examples to the upload, query and correspondence routes, without touching any
route's logic. A test checks that no parameter is left without a description.
"""

from __future__ import annotations

import copy
from typing import Any

from fastapi import FastAPI

__all__ = ["OPENAPI_TAGS", "PARAMETER_TEXT", "describe_parameters"]

OPENAPI_TAGS = [
    {"name": "arenas", "description": "Arenas (trays, runways, treadmills) and their scans."},
    {"name": "subjects", "description": "Animals and the roles of their markers."},
    {"name": "trials", "description": "Motion-capture trials: upload, list, download."},
    {"name": "scans", "description": "Terrain scans: heightmaps and point clouds."},
    {"name": "scores", "description": "Stored scores; query and export (CSV, Parquet)."},
    {"name": "correspondence", "description": "Terrain measures against movement measures."},
    {"name": "jobs", "description": "Scoring jobs and rescoring under a recipe."},
    {"name": "recipes", "description": "Named, versioned scoring parameters."},
    {"name": "studies", "description": "Groups of arenas, subjects and trials."},
    {"name": "dashboard", "description": "Arrays and views for the browser dashboard."},
]

_ID = "Numeric id of the {0} (as returned when it was created or listed)."
PARAMETER_TEXT: dict[tuple[str, str], str] = {
    ("offset", "query"): "Rows to skip before the first one returned (paging; default 0).",
    ("limit", "query"): "Rows returned at most (paging).",
    ("arena_id", "path"): _ID.format("arena"),
    ("arena_id", "query"): "Only these arenas (repeat for several); 404 for an unknown id.",
    ("subject_id", "path"): _ID.format("subject"),
    ("subject_id", "query"): "Only these subjects (repeat for several); 404 for an unknown id.",
    ("trial_id", "path"): _ID.format("trial"),
    ("trial_id", "query"): "Only these trials (repeat for several); 404 for an unknown id.",
    ("scan_id", "path"): _ID.format("scan"),
    ("scan_id", "query"): "Only these scans (repeat for several); 404 for an unknown id.",
    ("study_id", "path"): _ID.format("study"),
    ("job_id", "path"): _ID.format("job"),
    ("token_id", "path"): _ID.format("token"),
    ("marker_set_id", "path"): _ID.format("marker set"),
    ("name", "path"): "Recipe name, e.g. default.",
    ("condition", "query"): "Only trials recorded under this condition (e.g. overground).",
    ("covariate", "query"): "Trial-level covariates to adjust for (e.g. speed_m_s); repeat.",
    ("format", "query"): "Answer format: json (default), csv or parquet where offered.",
    ("measure", "query"): "Only these measures (snake_case names with unit suffix); repeat.",
    ("movement_measure", "query"): "Movement measures to pair (repeat or comma-separate).",
    ("terrain_measure", "query"): "Terrain measures to pair (repeat or comma-separate).",
    ("recipe", "query"): "Recipe name whose scores are used (default: default).",
    ("recipe_hash", "query"): "Only scores computed under this recipe hash (hex).",
    ("recipe_version", "query"): "Recipe version (default: the latest of the named recipe).",
    ("version", "query"): "Recipe version (default: the latest of the named recipe).",
    ("recorded_after", "query"): "Only trials recorded at or after this time (ISO 8601).",
    ("recorded_before", "query"): "Only trials recorded before this time (ISO 8601).",
    ("scans", "query"): "Several scans of one arena: latest (the latest scored) or mean.",
    ("seed", "query"): "Seed of the permutation test and bootstrap (same seed, same answer).",
    ("shape", "query"): "Table shape: long (one row per score) or wide (one per target).",
    ("state", "query"): "Only jobs in this state: queued, running, done or failed.",
    ("target_id", "query"): "Only scores of this scan or trial id (with target_kind).",
    ("target_kind", "query"): "Only scores of scans or of trials: scan or trial.",
    ("study", "query"): "Only this study's arenas, subjects and trials (404 when unknown).",
    ("n_permutations", "query"): "Arena permutations of the permutation test.",
    ("n_boot", "query"): "Hierarchical bootstrap replicates.",
    ("max_px", "query"): "Longest side of the returned heightmap grid (cells).",
    ("max_frames", "query"): "Frames returned at most (the trial is decimated evenly).",
}

_TRIAL_META = {
    "arena": 3,
    "subject": 1,
    "units": "mm",
    "frame_rate_hz": 300,
    "condition": "overground",
}
_SCAN_META = {"units": "m", "dx": 0.001, "dy": 0.001}
_SCORE_ROW = {
    "target_kind": "trial",
    "target_id": 12,
    "arena_id": 3,
    "arena": "gravel tray 3",
    "subject_id": 1,
    "subject": "M07",
    "measure": "stride_frequency_hz",
    "value": 2.41,
    "unit": "Hz",
    "recipe": "default@1",
}
_CORR_ROW = {
    "terrain_measure": "sq_m",
    "movement_measure": "stride_frequency_hz",
    "slope": -310.0,
    "ci_low": -520.0,
    "ci_high": -95.0,
    "p_value": 0.004,
    "q_value": 0.031,
    "spearman_rho": -0.86,
    "n_arenas": 7,
    "n_subjects": 4,
    "n_trials": 56,
}

# (method, path) -> (request-body example or None, response example or None)
EXAMPLES: dict[tuple[str, str], tuple[Any, Any]] = {
    ("post", "/v1/trials"): (
        {"file": "(the C3D, TRC or CSV file)", "meta": _TRIAL_META},
        {"id": 12, "arena_id": 3, "subject_id": 1, "n_frames": 6000, "frame_rate_hz": 300.0},
    ),
    ("post", "/v1/arenas/{arena_id}/scans"): (
        {"file": "(the PLY, LAS, NPY or TIFF file)", "meta": _SCAN_META},
        {"id": 5, "arena_id": 3, "format": "npy", "kind": "heightmap"},
    ),
    ("get", "/v1/scores"): (None, {"data": [_SCORE_ROW], "count": 1}),
    ("get", "/v1/export/scores"): (None, [_SCORE_ROW]),
    ("get", "/v1/correspondence"): (
        None,
        {
            "recipe": {"name": "default", "version": 1, "hash": "3f2a..."},
            "rows": [_CORR_ROW],
            "n_arenas": 7,
            "n_permutations": 5040,
            "exact_permutations": True,
            "warnings": [],
        },
    ),
}


def _fill(spec: dict[str, Any]) -> dict[str, Any]:
    for path, item in spec.get("paths", {}).items():
        for method, op in item.items():
            if not isinstance(op, dict):
                continue
            for prm in op.get("parameters", []):
                if prm.get("description") or prm.get("schema", {}).get("description"):
                    continue
                text = PARAMETER_TEXT.get((prm["name"], prm["in"]))
                prm["description"] = text or f"The {prm['name'].replace('_', ' ')}."
            request, response = EXAMPLES.get((method, path), (None, None))
            if request is not None:
                for media in op.get("requestBody", {}).get("content", {}).values():
                    media.setdefault("example", request)
            if response is not None:
                ok = op.get("responses", {}).get("200") or op.get("responses", {}).get("201")
                if ok is not None:
                    content = ok.setdefault("content", {})
                    media = content.setdefault("application/json", {})
                    media.setdefault("example", response)
    return spec


def describe_parameters(app: FastAPI) -> None:
    """Wrap ``app.openapi`` so the document it returns is fully described (built once)."""
    build = app.openapi

    def openapi() -> dict[str, Any]:
        if app.openapi_schema is None:
            app.openapi_schema = _fill(copy.deepcopy(build()))
        return app.openapi_schema

    app.openapi = openapi  # type: ignore[method-assign]
