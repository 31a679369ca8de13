"""Plot arrays for the report, read from what the scoring jobs stored (``derived`` table).

Terrain: hillshade, radially averaged PSD with its power-law fit, slope histogram of the scan
the study tables use for each arena. Movement: a representative trial's recurrence plot,
state portrait and step-cycle classes. Nothing is recomputed here: a target scored before
its job stored plot arrays gets no panel (logged; rescoring draws it).
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


def _policy_scan(study: StudyData, arena_id: int) -> Any | None:
    # The scan the tables take the arena's terrain values from (the correspondence's scan
    # policy), so figure, legend and table show one scan; else one with a heightmap file.
    scans = [s for s in study.scans if s.arena_id == arena_id and s.heightmap_sha256]
    policy = study.policy_scan_ids.get(arena_id, [])
    scans.sort(key=lambda s: (s.id not in policy, s.kind != "heightmap", s.id))
    return scans[0] if scans else None


class _NotStored(Exception):
    """The scoring job stored no plot arrays for this target under this recipe."""


def _derived(session: Any, store: Any, kind: str, target: tuple[str, int], recipe: str) -> Any:
    from storage.errors import NotFound

    try:
        return repo.load_derived(
            session=session, store=store, target_kind=target[0], target_id=target[1],
            recipe_hash=recipe, kind=kind,
        )  # fmt: skip
    except NotFound:
        raise _NotStored(f"{target[0]} {target[1]} has no stored {kind}: rescore it") from None


def _terrain_panel(
    study: StudyData, session: Any, store: Any, arena: Any, scan: Any
) -> TerrainPanel:
    a = _derived(session, store, "terrain_plots", ("scan", scan.id), study.recipe_hash)
    dx, dy = float(scan.dx_m), float(scan.dy_m or scan.dx_m)
    nx, ny = int(scan.grid_nx or 0), int(scan.grid_ny or 0)
    return TerrainPanel(
        arena_id=arena.id,
        arena_name=arena.name,
        scan_id=scan.id,
        extent_m=(nx * dx, ny * dy),
        hillshade=np.asarray(a["hillshade"]),
        q=np.asarray(a["radial_q"]),
        psd=np.asarray(a["radial_psd"]),
        fit_q=np.asarray(a.get("fit_q", np.array([]))),
        fit_psd=np.asarray(a.get("fit_psd", np.array([]))),
        hurst=_stored(scan.id, "hurst_psd", study, float("nan")),
        slope_counts=np.asarray(a["slope_counts"]),
        slope_edges_deg=np.asarray(a["slope_edges_deg"]),
    )


def _stored(scan_id: int, measure: str, study: StudyData, fallback: float) -> float:
    # Label with the stored score of this scan, so the legend matches the tables.
    value = study.scan_scores.get(scan_id, {}).get(measure)
    return fallback if value is None else float(value)


def terrain_panels(study: StudyData, *, session: Any, store: Any) -> list[TerrainPanel]:
    """One panel per arena with a scored heightmap, in arena order, from the plot arrays
    its scoring job stored (the scan the study tables use)."""
    out = []
    for arena in study.arenas:
        scan = _policy_scan(study, arena.id)
        if scan is None:
            continue
        try:
            out.append(_terrain_panel(study, session, store, arena, scan))
        except _NotStored as exc:
            log.info("report: no terrain panel for arena %s: %s", arena.name, exc)
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


def movement_panels(
    study: StudyData, *, session: Any, store: Any, rank_by: str | None = "sq_m"
) -> list[MovementPanel]:
    """Recurrence plot, state portrait and class sequence of representative trials, from
    the plot arrays their scoring jobs stored."""
    out = []
    for trial_id in _representative_trials(study, rank_by):
        try:
            trial = repo.get_trial(session=session, trial_id=trial_id)
            subject = repo.get_subject(session=session, subject_id=trial.subject_id)
            a = _derived(session, store, "movement_plots", ("trial", trial_id), study.recipe_hash)
            out.append(_movement_panel(study, trial, subject, a))
        except _NotStored as exc:
            log.info("report: no movement panel for trial %s: %s", trial_id, exc)
        except Exception as exc:  # a plot must never sink the whole report
            log.warning("report: movement panel for trial %s failed: %s", trial_id, exc)
    return out


def _movement_panel(study: StudyData, trial: Any, subject: Any, a: Any) -> MovementPanel:
    # The array fields of MovementSummary, as service.pipeline.tasks.plot_arrays stores them.
    t = np.asarray(a["signal_time_s"])
    return MovementPanel(
        trial_id=trial.id,
        arena_name=study.arena_name(trial.arena_id),
        subject_label=subject.label,
        recurrence=np.asarray(a["recurrence_image"]),
        duration_s=float(t[-1] - t[0]) if t.size > 1 else 0.0,
        ssa_pair=np.asarray(a["ssa_pair"]),
        class_sequence=np.asarray(a["class_sequence"]),
        frame_rate_hz=float(trial.frame_rate_hz),
    )
