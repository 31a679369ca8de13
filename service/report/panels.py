"""Plot arrays for the report, recomputed from stored artifacts with the recipe's parameters.

Terrain: hillshade, radially averaged PSD with its power-law fit, slope histogram, from each
arena's stored heightmap. Movement: one trial's recurrence plot, SSA pair and step-cycle
classes, from ``measures.movement_summary`` re-run on the stored raw trial (the numbers in the
tables come from the stored scores; these arrays only draw them).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import Any

import numpy as np

from service.report.study import StudyData
from storage import repo

__all__ = ["MovementPanel", "TerrainPanel", "movement_panels", "terrain_panels"]

log = logging.getLogger("gaitscape.report")


@dataclass(frozen=True)
class TerrainPanel:
    arena_id: int
    arena_name: str
    scan_id: int
    extent_m: tuple[float, float]  # x, y
    hillshade: np.ndarray
    q: np.ndarray  # rad/m
    psd: np.ndarray  # m^4
    fit_q: np.ndarray
    fit_psd: np.ndarray
    hurst: float
    slope_counts: np.ndarray
    slope_edges_deg: np.ndarray


@dataclass(frozen=True)
class MovementPanel:
    trial_id: int
    arena_name: str
    subject_label: str
    recurrence: np.ndarray
    duration_s: float
    ssa_pair: np.ndarray  # (n, 2) m
    class_sequence: np.ndarray
    frame_rate_hz: float


def _heightmap_scan(study: StudyData, arena_id: int) -> Any | None:
    # The scan the tables take the arena's terrain values from (the correspondence's scan
    # policy), so figure, legend and table show one scan; else one with a heightmap file.
    scans = [s for s in study.scans if s.arena_id == arena_id and s.heightmap_sha256]
    policy = study.policy_scan_ids.get(arena_id, [])
    scans.sort(key=lambda s: (s.id not in policy, s.kind != "heightmap", s.id))
    return scans[0] if scans else None


def _terrain_panel(study: StudyData, store: Any, arena: Any, scan: Any) -> TerrainPanel:
    from measures import gradient_entropy, hillshade, hurst_exponent, radial_psd

    p = dict(study.parameters.get("terrain") or {})
    z = np.asarray(store.get_array(scan.heightmap_sha256), dtype=np.float64)
    valid = np.isfinite(z)
    if scan.valid_mask_sha256:
        valid &= np.asarray(store.get_array(scan.valid_mask_sha256), dtype=bool)
    mask = None if bool(valid.all()) else valid
    dx, dy = float(scan.grid_dx_m), float(scan.grid_dy_m)
    zf = np.where(valid, z, np.nanmean(z[valid]))
    rp = radial_psd(zf, dx, dy, valid=mask, bins_per_decade=int(p.get("psd_bins_per_decade", 10)))
    band = arena.scale_band_m
    fit_q = fit_psd = np.array([])
    hurst = float("nan")
    try:
        step = max(dx, dy)
        extent = max(z.shape) * step
        fit_band = None if band is None else (max(band[0], 2 * step), min(band[1], extent))
        r = hurst_exponent(zf, dx, dy=dy, method="psd", band=fit_band, valid=mask)
        fit_q = np.asarray(r.fit_x)
        fit_psd = np.exp(r.fit_intercept) * fit_q**r.slope
        hurst = _stored(scan.id, "hurst_psd", study, float(r.hurst))
    except ValueError as exc:
        log.info("report: no PSD fit for arena %s: %s", arena.name, exc)
    ge = gradient_entropy(zf, dx, dy, valid=mask, slope_bin_deg=float(p.get("slope_bin_deg", 1.0)))
    shade = hillshade(
        zf,
        dx,
        dy,
        azimuth_deg=float(p.get("hillshade_azimuth_deg", 135.0)),
        altitude_deg=float(p.get("hillshade_altitude_deg", 45.0)),
        max_px=int(p.get("thumbnail_px", 256)),
    )
    return TerrainPanel(
        arena_id=arena.id,
        arena_name=arena.name,
        scan_id=scan.id,
        extent_m=(z.shape[1] * dx, z.shape[0] * dy),
        hillshade=shade,
        q=np.asarray(rp.q),
        psd=np.asarray(rp.psd),
        fit_q=fit_q,
        fit_psd=fit_psd,
        hurst=hurst,
        slope_counts=np.asarray(ge.slope_counts),
        slope_edges_deg=np.asarray(ge.slope_edges_deg),
    )


def _stored(scan_id: int, measure: str, study: StudyData, fallback: float) -> float:
    # Label with the stored score of this scan, so the legend matches the tables.
    value = study.scan_scores.get(scan_id, {}).get(measure)
    return fallback if value is None else float(value)


def terrain_panels(study: StudyData, store: Any) -> list[TerrainPanel]:
    """One panel per arena that has a stored heightmap, in arena order."""
    out = []
    for arena in study.arenas:
        scan = _heightmap_scan(study, arena.id)
        if scan is None:
            continue
        try:
            out.append(_terrain_panel(study, store, arena, scan))
        except Exception as exc:  # a plot must never sink the whole report
            log.warning("report: terrain panel for arena %s failed: %s", arena.name, exc)
    return out


def _representative_trials(study: StudyData, key: str | None) -> list[int]:
    """A trial on the smoothest and one on the roughest arena (by ``key``), else the first."""
    by_arena: dict[int, list[int]] = {}
    for t in study.movement:
        by_arena.setdefault(t.arena_id, []).append(t.trial_id)
    ranked = [a for a in study.scored_arena_ids if a in by_arena]
    if key:
        ranked = [a for a in ranked if np.isfinite(study.terrain[a].get(key, np.nan))]
        ranked.sort(key=lambda a: study.terrain[a][key])
    if not ranked:
        return [study.movement[0].trial_id] if study.movement else []
    picks = [by_arena[ranked[0]][0]]
    if len(ranked) > 1:
        picks.append(by_arena[ranked[-1]][0])
    return picks


_DERIVED_KEYS = ("recurrence_image", "ssa_pair", "class_sequence", "signal_time_s")


def _stored_arrays(session: Any, store: Any, trial_id: int, recipe_hash: str) -> Any | None:
    """The plot arrays the scoring job stored (``derived`` table), when the repository offers
    ``load_derived``; None otherwise. Expected: a mapping with ``_DERIVED_KEYS``."""
    load = getattr(repo, "load_derived", None)
    if load is None:
        return None
    try:
        arrays = load(
            session=session,
            store=store,
            target_kind="trial",
            target_id=trial_id,
            recipe_hash=recipe_hash,
        )
    except Exception as exc:  # not stored for this trial: fall back below
        log.info("report: no stored plot arrays for trial %s: %s", trial_id, exc)
        return None
    if not arrays or any(k not in arrays for k in _DERIVED_KEYS):
        return None
    from types import SimpleNamespace

    return SimpleNamespace(**{k: np.asarray(arrays[k]) for k in _DERIVED_KEYS})


def movement_panels(
    study: StudyData, *, session: Any, store: Any, rank_by: str | None = "sq_m"
) -> list[MovementPanel]:
    """Recurrence plot, SSA pair and class sequence of representative trials."""
    from measures import movement_summary

    params = dict(study.parameters.get("movement") or {})
    out = []
    for trial_id in _representative_trials(study, rank_by):
        try:
            trial = repo.get_trial(session=session, trial_id=trial_id)
            subject = repo.get_subject(session=session, subject_id=trial.subject_id)
            summary = _stored_arrays(session, store, trial_id, study.recipe_hash)
        except Exception as exc:  # a plot must never sink the whole report
            log.warning("report: movement panel for trial %s failed: %s", trial_id, exc)
            continue
        if summary is not None:  # views read what jobs stored
            out.append(_movement_panel(study, trial, subject, summary))
            continue
        # FALLBACK until the pipeline stores plot arrays for every trial (derived table):
        # re-run the movement summary on the stored raw trial for these two plots only.
        try:
            trial = repo.get_trial(session=session, trial_id=trial_id)
            subject = repo.get_subject(session=session, subject_id=trial.subject_id)
            roles = dict(subject.marker_set.roles) if subject.marker_set else {}
            roles = {k: roles[k] for k in ("anterior", "posterior", "feet") if k in roles}
            data = repo.load_trial_data(session=session, store=store, trial_id=trial_id)
            run = dict(params)
            if run.get("treadmill_speed_m_s") is None and trial.treadmill_speed_m_s is not None:
                run["treadmill_speed_m_s"] = trial.treadmill_speed_m_s
            summary = movement_summary(
                data.markers,
                frame_rate_hz=data.frame_rate_hz,
                marker_names=list(data.marker_names),
                roles=roles,
                params=run,
            )
        except Exception as exc:  # a plot must never sink the whole report
            log.warning("report: movement panel for trial %s failed: %s", trial_id, exc)
            continue
        out.append(_movement_panel(study, trial, subject, summary))
    return out


def _movement_panel(study: StudyData, trial: Any, subject: Any, summary: Any) -> MovementPanel:
    t = np.asarray(summary.signal_time_s)
    return MovementPanel(
        trial_id=trial.id,
        arena_name=study.arena_name(trial.arena_id),
        subject_label=subject.label,
        recurrence=np.asarray(summary.recurrence_image),
        duration_s=float(t[-1] - t[0]) if t.size > 1 else 0.0,
        ssa_pair=np.asarray(summary.ssa_pair),
        class_sequence=np.asarray(summary.class_sequence),
        frame_rate_hz=float(trial.frame_rate_hz),
    )
