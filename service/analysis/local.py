"""Local correspondence from stored artifacts: trial path onto the arena's heightmap.

Blocking; the routes call it through ``run_in_threadpool``. The statistics are in
:mod:`measures.correspondence.local` (non-overlapping windows, cyclic-shift p-values).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from measures.errors import InsufficientDataError, InvalidParameterError
from service.analysis.tables import Selection, choose_scans, clean_object
from service.pipeline.recipes import current_parameters
from storage import repo
from storage.artifacts import ArtifactStore
from storage.errors import BadInput, NotFound
from storage.models import Scan, Trial

__all__ = ["LOCAL_DEFAULTS", "local_report", "trial_scores", "trial_windows"]

# -- local correspondence ---------------------------------------------------------------------
#: Defaults of the local analysis (query parameters override them).
LOCAL_DEFAULTS: dict[str, Any] = {
    "window_s": 2.0,  # non-overlapping windows: see measures.correspondence.local
    "margin_m": None,  # None: a quarter of the subject's body length, else 0.02 m
    "n_permutations": 999,
}
_FALLBACK_MARGIN_M = 0.02


def _section(parameters: dict[str, Any], name: str, defaults: dict[str, Any]) -> dict[str, Any]:
    sub = parameters.get(name)
    merged = dict(defaults)
    if isinstance(sub, dict):
        merged.update({k: v for k, v in sub.items() if k in defaults})
    return merged


def _markers(session: Session, store: ArtifactStore, trial: Trial, p: dict[str, Any]) -> np.ndarray:
    """Preprocessed markers (frames, markers, 3) in m: the stored artifact, else recomputed."""
    from measures.movement.kinematics import preprocess_trial

    if trial.preprocessed_sha256:
        arr = store.get_array(trial.preprocessed_sha256)
        if arr.ndim == 3 and arr.shape[1:] == (trial.n_markers, 3):
            return np.asarray(arr, dtype=np.float64)
    data = repo.load_trial_data(session=session, store=store, trial_id=trial.id)
    pre = preprocess_trial(
        data.markers,
        frame_rate_hz=data.frame_rate_hz,
        max_gap_s=p["max_gap_s"],
        cutoff_hz=p["cutoff_hz"],
        order=p["filter_order"],
        remove_spikes=p["remove_spikes"],
        spike_threshold=p["spike_threshold"],
        min_segment_s=p["min_segment_s"],
    )
    return pre.markers


def _heightmap(
    store: ArtifactStore, scan: Scan
) -> tuple[np.ndarray, tuple[float, float], tuple[float, float]]:
    if scan.heightmap_sha256 is None or scan.dx_m is None:  # _local_scan picks gridded
        raise BadInput(f"scan {scan.id} has no heightmap grid")
    z = np.array(store.get_array(scan.heightmap_sha256), dtype=np.float64)
    if scan.valid_mask_sha256:
        z[~np.asarray(store.get_array(scan.valid_mask_sha256), dtype=bool)] = np.nan
    meta = scan.meta or {}
    origin = meta.get("grid_origin_xy_m") or (meta.get("reader") or {}).get("origin_xy_m")
    dy = scan.dy_m or scan.dx_m
    return z, (float(scan.dx_m), float(dy)), tuple(origin or (0.0, 0.0))


def _to_scan_frame(points: np.ndarray, registration: Any) -> np.ndarray:
    """Arena-frame points into the scan's frame (``registration`` maps scan -> arena)."""
    if not registration:
        return points
    mat = np.asarray(registration, dtype=np.float64).reshape(4, 4)
    inv = np.linalg.inv(mat)
    out: np.ndarray = points @ inv[:3, :3].T + inv[:3, 3]
    return out


def trial_scores(*, session: Session, recipe_hash: str, trial_id: int) -> dict[str, float]:
    """The stored scores of one trial under a recipe (measure -> value, NaN for missing)."""
    rows = repo.load_study_rows(session=session, recipe_hash=recipe_hash, trial_ids=[trial_id])
    return {
        measure: math.nan if value is None else float(value)
        for kind, _, measure, value, _ in rows.scores
        if kind == "trial"
    }


def _embedding(
    signal: np.ndarray, fs: float, scores: dict[str, float], p: dict[str, Any]
) -> tuple[int, int]:
    from measures.dynamics.embedding import embedding_dimension, first_ami_minimum

    delay_s, dim = (scores.get(k, math.nan) for k in ("embedding_delay_s", "embedding_dimension"))
    delay = round(delay_s * fs) if math.isfinite(delay_s) else None
    if p.get("embedding_delay_samples") is not None:
        delay = int(p["embedding_delay_samples"])
    if not delay:
        delay = first_ami_minimum(signal, max_lag=max(2, min(round(0.5 * fs), signal.size // 10)))
    if p.get("embedding_dimension") is not None:
        dim = int(p["embedding_dimension"])
    if not math.isfinite(dim):
        dim = embedding_dimension(signal, delay=delay, max_dim=int(p.get("max_dimension", 8)))
    return max(1, int(delay)), max(1, int(dim))


def _local_scan(session: Session, scans: list[dict[str, Any]], trial: dict[str, Any]) -> Scan:
    # The scan policy of the grid ("latest": heightmap uploads first, then the latest),
    # among the arena's scans that have a heightmap grid to map the path onto.
    gridded = [s for s in scans if s["heightmap_sha256"] and s["dx_m"]]
    if not gridded:
        raise BadInput(
            f"arena {trial['arena_id']} has no heightmap to map trial {trial['id']} onto"
        )
    return repo.get_scan(session=session, scan_id=choose_scans(gridded, "latest")[0]["id"])


def _stored_windows(arrays: dict[str, np.ndarray] | None, window_s: float) -> dict[str, Any] | None:
    """Per-window movement measures the scoring job stored, or None (absent, other length)."""
    if arrays is None or "window_s" not in arrays:
        return None
    if abs(float(np.asarray(arrays["window_s"]).ravel()[0]) - window_s) > 1e-9:
        return None
    return {
        "source": "stored",
        "window_start_s": np.asarray(arrays["window_start_s"], dtype=float),
        "window_stop_s": np.asarray(arrays["window_stop_s"], dtype=float),
        "delay": int(np.asarray(arrays.get("delay_samples", 0)).ravel()[0]),
        "dimension": int(np.asarray(arrays.get("dimension", 0)).ravel()[0]),
        "movement": {
            k.removeprefix("m_"): np.asarray(v, dtype=float)
            for k, v in arrays.items()
            if k.startswith("m_")
        },
        "path_m": np.asarray(arrays.get("path_origin_m", np.zeros((0, 3))), dtype=float),
        "path_time_s": np.asarray(arrays.get("path_time_s", np.zeros(0)), dtype=float),
    }


@dataclass
class _Batch:
    """What the request reads once for all its trials: the trial rows (joined with arena
    and subject), their arenas' scans, and the stored per-window measures (one query)."""

    trials: dict[int, dict[str, Any]]
    scans: dict[int, list[dict[str, Any]]]
    windows: dict[int, dict[str, np.ndarray]]
    heightmaps: dict[int, tuple[Scan, Any]] = field(default_factory=dict)


def _batch(
    session: Session, store: ArtifactStore, recipe_hash: str, rows: repo.StudyRows
) -> _Batch:
    scans: dict[int, list[dict[str, Any]]] = {}
    for row in rows.scans:
        scans.setdefault(row["arena_id"], []).append(row)
    trials = {t["id"]: t for t in rows.trials}
    windows = repo.load_derived_many(
        session=session, store=store, target_kind="trial", target_ids=list(trials),
        recipe_hash=recipe_hash, kind="movement_windows",
    )  # fmt: skip
    return _Batch(trials, scans, windows)


def _computed_windows(
    session: Session, store: ArtifactStore, trial: Trial, subject: Any, recipe: Any, window_s: float
) -> dict[str, Any]:
    """Per-window movement measures computed from the preprocessed markers (fallback for
    stores scored before the scoring job kept them)."""
    from measures.correspondence.local import window_movement_measures
    from measures.movement.bodyframe import body_frame
    from measures.movement.kinematics import valid_segments
    from measures.movement.summary import MOVEMENT_DEFAULTS

    p = _section(current_parameters(recipe.parameters), "movement", MOVEMENT_DEFAULTS)
    roles, names = subject.marker_set.roles, list(trial.marker_names)
    ant = [names.index(n) for n in np.atleast_1d(roles["anterior"])]
    post = [names.index(n) for n in np.atleast_1d(roles["posterior"])]
    limb = p["signal_limb"] or p["reference_limb"]
    foot = names.index(roles["feet"][limb])
    markers = _markers(session, store, trial, p)
    fs = float(trial.frame_rate_hz)
    body = body_frame(markers, anterior=ant, posterior=post, up=p["up"])
    a, b = max(
        valid_segments(markers, min_length=8, marker_indices=[*ant, *post, foot]),
        key=lambda s: s[1] - s[0],
        default=(0, 0),
    )
    axis = {"x": 0, "y": 1, "z": 2}[p["signal_axis"]]
    signal = body.markers[a:b, foot, axis]
    scores = trial_scores(session=session, recipe_hash=recipe.hash, trial_id=trial.id)
    delay, dim = _embedding(signal, fs, scores, p)
    wm = window_movement_measures(
        signal,
        frame_rate_hz=fs,
        window_s=window_s,
        delay=delay,
        dimension=dim,
        start_time_s=a / fs,
        recurrence_rate=p["rqa_recurrence_rate"],
        symbol_order=p["symbol_order"],
        seed=p["seed"],
    )
    return {
        "source": "computed",
        "window_start_s": wm.window_start_s,
        "window_stop_s": wm.window_stop_s,
        "delay": delay,
        "dimension": dim,
        "movement": wm.values,
        "path_m": body.origin,
        "path_time_s": np.arange(markers.shape[0]) / fs,
    }


def trial_windows(
    *,
    session: Session,
    store: ArtifactStore,
    trial_id: int,
    recipe: Any,
    window_s: float,
    margin_m: float | None,
    batch: _Batch | None = None,
) -> dict[str, Any]:
    """Prepare one trial for local correspondence: window movement measures and the
    terrain patch under the animal in each window (the one function every caller uses).

    Movement windows are read from what the scoring job stored (derived kind
    ``movement_windows``, read for every trial of a request in one query: ``batch``) when
    present with the requested window length; otherwise, for stores scored before the job
    kept them or for another window length, they are computed here
    (:func:`_computed_windows`). ``movement_source`` in the result says which.
    """
    from measures.correspondence.local import window_terrain_patches
    from measures.terrain.summary import TERRAIN_DEFAULTS

    if batch is None:
        rows = repo.load_study_rows(session=session, recipe_hash=recipe.hash, trial_ids=[trial_id])
        batch = _batch(session, store, recipe.hash, rows)
    row = batch.trials.get(trial_id)
    if row is None:
        raise NotFound("trial", trial_id)
    if row["treadmill_speed_m_s"] is not None or row["arena_kind"] == "treadmill":
        raise BadInput(f"trial {trial_id} is on a treadmill; local correspondence needs overground")
    params = current_parameters(recipe.parameters)
    order = tuple(_section(params, "terrain", TERRAIN_DEFAULTS)["ordinal_order"])
    windows = _stored_windows(batch.windows.get(trial_id), window_s)
    if windows is None:
        trial = repo.get_trial(session=session, trial_id=trial_id)
        subject = repo.get_subject(session=session, subject_id=trial.subject_id)
        if subject.marker_set is None:
            raise BadInput(f"subject {subject.id} has no marker roles")
        windows = _computed_windows(session, store, trial, subject, recipe, window_s)
    arena_id = row["arena_id"]
    if arena_id not in batch.heightmaps:  # one heightmap read per arena, not per trial
        scan = _local_scan(session, batch.scans.get(arena_id, []), row)
        batch.heightmaps[arena_id] = (scan, _heightmap(store, scan))
    scan, (z, spacing, origin) = batch.heightmaps[arena_id]
    if margin_m is None:
        body_length_m = row["body_length_m"]
        margin_m = body_length_m / 4 if body_length_m else _FALLBACK_MARGIN_M
    path = _to_scan_frame(windows["path_m"], scan.registration)[:, :2]
    patches = window_terrain_patches(
        path,
        time_s=windows["path_time_s"],
        window_start_s=windows["window_start_s"],
        window_stop_s=windows["window_stop_s"],
        z=z,
        dx_m=spacing[0],
        dy_m=spacing[1],
        origin_xy_m=origin,
        margin_m=margin_m,
        ordinal_order=order,
    )
    return {
        "trial_id": trial_id,
        "arena_id": arena_id,
        "subject_id": row["subject_id"],
        "scan_id": scan.id,
        "embedding_delay_samples": windows["delay"],
        "embedding_dimension": windows["dimension"],
        "movement_source": windows["source"],
        "margin_m": margin_m,
        "window_start_s": windows["window_start_s"],
        "window_stop_s": windows["window_stop_s"],
        "terrain": dict(zip(patches.names, patches.values.T, strict=True)),
        "movement": windows["movement"],
        "centre_xy_m": patches.centre_xy_m,
        "coverage": patches.coverage,
    }


def local_report(
    *,
    session: Session,
    store: ArtifactStore,
    recipe: str,
    version: int | None = None,
    trial_ids: Sequence[int] = (),
    selection: Selection = Selection(),
    window_s: float = LOCAL_DEFAULTS["window_s"],
    margin_m: float | None = None,
    n_permutations: int = LOCAL_DEFAULTS["n_permutations"],
    seed: int = 0,
) -> dict[str, Any]:
    """Local correspondence for the given trials (or the selection's overground trials)."""
    from measures.correspondence.local import local_correspondence

    prof = repo.get_recipe(session=session, name=recipe, version=version)
    warnings: list[str] = []
    if trial_ids:
        ids = list(trial_ids)
        study_rows = repo.load_study_rows(session=session, recipe_hash=prof.hash, trial_ids=ids)
    else:
        study_id = (
            None
            if selection.study is None
            else repo.get_study_by_name(session=session, name=selection.study).id
        )
        study_rows = repo.load_study_rows(
            session=session,
            recipe_hash=prof.hash,
            study_id=study_id,
            arena_ids=selection.arena_ids,
            subject_ids=selection.subject_ids,
            conditions=selection.conditions,
            trial_ids=selection.trial_ids,
        )
        ids = [t["id"] for t in study_rows.trials]
    batch = _batch(session, store, prof.hash, study_rows)
    per_trial = []
    for tid in ids:
        try:
            per_trial.append(
                trial_windows(
                    session=session,
                    store=store,
                    trial_id=tid,
                    recipe=prof,
                    window_s=window_s,
                    margin_m=margin_m,
                    batch=batch,
                )
            )
        except (BadInput, InvalidParameterError, InsufficientDataError, ValueError) as exc:
            if trial_ids and len(ids) == 1:
                raise
            warnings.append(f"trial {tid} left out: {exc}")
    if not per_trial:
        raise BadInput("no trial in this selection could be mapped onto a heightmap")
    t_names = list(per_trial[0]["terrain"])
    m_names = list(per_trial[0]["movement"])
    terrain = np.vstack([np.column_stack([w["terrain"][n] for n in t_names]) for w in per_trial])
    movement = np.vstack([np.column_stack([w["movement"][n] for n in m_names]) for w in per_trial])
    index = np.concatenate([np.full(len(w["window_start_s"]), k) for k, w in enumerate(per_trial)])
    res = local_correspondence(
        terrain,
        movement,
        index,
        terrain_names=t_names,
        movement_names=m_names,
        n_permutations=n_permutations,
        seed=seed,
    )
    rows, within = [], []
    for r in res.rows:
        rows.append(
            {
                k: getattr(r, k)
                for k in (
                    "terrain_measure",
                    "movement_measure",
                    "slope",
                    "ci_low",
                    "ci_high",
                    "p_value",
                    "mixed_p_value",
                    "statistic",
                    "n_trials",
                    "n_windows",
                )
            }
            | {"rho_within_median": r.rho_within_median}
        )
        for k, code in enumerate(res.trial_codes):
            within.append(
                {
                    "trial_id": per_trial[code]["trial_id"],
                    "terrain_measure": r.terrain_measure,
                    "movement_measure": r.movement_measure,
                    "spearman_rho": r.rho_within[k],
                    "p_value": r.p_within[k],
                }
            )
    if len(per_trial) < 3:
        warnings.append(
            f"Only {len(per_trial)} trials: the across-trial slope rests on very few groups."
        )
    trials_out = []
    for w in per_trial:
        windows = [
            {
                "start_s": w["window_start_s"][i],
                "stop_s": w["window_stop_s"][i],
                "centre_xy_m": w["centre_xy_m"][i].tolist(),
                "coverage": w["coverage"][i],
                **{n: w["terrain"][n][i] for n in t_names},
                **{n: w["movement"][n][i] for n in m_names},
            }
            for i in range(len(w["window_start_s"]))
        ]
        keys = (
            "trial_id",
            "arena_id",
            "subject_id",
            "scan_id",
            "embedding_delay_samples",
            "embedding_dimension",
            "movement_source",
            "margin_m",
        )
        trials_out.append({k: w[k] for k in keys} | {"windows": windows})
    return clean_object(
        {
            "recipe": {"name": prof.name, "version": prof.version, "hash": prof.hash},
            "window_s": window_s,
            "rows": rows,
            "within_trial": within,
            "trials": trials_out,
            "warnings": warnings,
            "n_trials": len(per_trial),
            "n_windows": int(index.size),
            "n_permutations": res.n_permutations,
            "method": (
                "Non-overlapping windows; p_value from independent cyclic shifts of each "
                "trial's terrain series (torus translation), which keeps autocorrelation; "
                "mixed_p_value (Wald, windows exchangeable within trial) for reference only."
            ),
        }
    )
