"""Gather one study's records and scores under one recipe, for the report.

Everything here reads the database and the artifact store through ``storage.repo``; nothing
is computed that the pipeline did not store, except plot arrays (``service.report.panels``).
"""

from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass, field
from typing import Any

from service.pipeline.recipes import current_parameters
from storage import repo

__all__ = ["StudyData", "TrialScores", "load_study"]

_PAGE = 1000


def _all(list_fn: Any, **kwargs: Any) -> list[Any]:
    """Every row of a paginated repository list."""
    out: list[Any] = []
    while True:
        rows, count = list_fn(offset=len(out), limit=_PAGE, **kwargs)
        out += rows
        if not rows or len(out) >= count:
            return out


@dataclass
class TrialScores:
    trial_id: int
    arena_id: int
    subject_id: int
    duration_s: float
    values: dict[str, float]


@dataclass
class StudyData:
    """What the report shows, in plain Python: ids, names, values, units."""

    recipe_name: str
    recipe_version: int
    recipe_hash: str
    parameters: dict[str, Any]
    arenas: list[Any]  # storage.models.Arena rows
    subjects: list[Any]
    scans: list[Any]
    trials: list[Any]
    terrain: dict[int, dict[str, float]]  # arena id -> measure -> mean over its scans
    movement: list[TrialScores]
    units: dict[str, str]
    code_versions: list[str]
    job_counts: dict[str, int]
    scan_scores: dict[int, dict[str, float]] = field(default_factory=dict)
    failed_jobs: list[str] = field(default_factory=list)
    study_name: str | None = None  # None: the whole store
    # arena id -> the scans the correspondence's scan policy takes its terrain values from
    policy_scan_ids: dict[int, list[int]] = field(default_factory=dict)

    @property
    def scored_arena_ids(self) -> list[int]:
        return [a.id for a in self.arenas if a.id in self.terrain]

    def arena_name(self, arena_id: int) -> str:
        return next((a.name for a in self.arenas if a.id == arena_id), f"arena {arena_id}")

    def is_invented(self) -> bool:
        """True when the records say they are invented (the demo labels its data so)."""
        texts = [s.species or "" for s in self.subjects] + [a.notes or "" for a in self.arenas]
        return any("invented" in t.lower() for t in texts)


def _recipe(session: Any, name: str | None) -> Any:
    from service.pipeline.recipes import DEFAULT_RECIPE, ensure_default_recipe

    if name is None or name == DEFAULT_RECIPE:
        return ensure_default_recipe(session)
    return repo.get_recipe(session=session, name=name)


def _scores_by_target(session: Any, kind: str, recipe_hash: str) -> dict[int, list[Any]]:
    rows = _all(
        lambda **kw: repo.list_scores(session=session, **kw),
        target_kind=kind,
        recipe_hash=recipe_hash,
    )
    out: dict[int, list[Any]] = defaultdict(list)
    for row in rows:
        out[row.target_id].append(row)
    return out


def load_study(*, session: Any, recipe: str | None = None, study: str | None = None) -> StudyData:
    """The store's records (or those of study ``study``, by name) with the scores of recipe
    ``recipe`` (latest ``default``); NotFound for an unknown study."""
    prof = _recipe(session, recipe)
    sid = None if study is None else repo.get_study_by_name(session=session, name=study).id
    arenas = _all(lambda **kw: repo.list_arenas(session=session, study_id=sid, **kw))
    subjects = _all(lambda **kw: repo.list_subjects(session=session, study_id=sid, **kw))
    scans = _all(lambda **kw: repo.list_scans(session=session, study_id=sid, **kw))
    trials = _all(lambda **kw: repo.list_trials(session=session, study_id=sid, **kw))
    # Terrain and movement values exactly as the correspondence uses them (latest scored scan
    # of each arena; diagnostics left out), so figures and table agree.
    from service.analysis.grid import Selection
    from service.analysis.grid import load_study as load_tables

    tables = load_tables(session=session, recipe_hash=prof.hash, selection=Selection(study=study))
    terrain = {
        int(a): {m: float(row[m]) for m in tables.terrain_measures}
        for a, row in tables.arenas.iterrows()
    }
    by_id = {t.id: t for t in trials}
    # Every stored trial score (quality-control ones too, for the warnings), with the
    # correspondence table's values on top so figures and table agree.
    stored = {kind: _scores_by_target(session, kind, prof.hash) for kind in ("scan", "trial")}
    movement = []
    for rec in tables.trials.to_dict("records"):
        t = by_id[int(rec["trial_id"])]
        duration = (t.n_frames or 0) / t.frame_rate_hz if t.frame_rate_hz else float("nan")
        values = {
            s.measure: float("nan") if s.value is None else s.value for s in stored["trial"][t.id]
        }
        values.update({m: float(rec[m]) for m in tables.movement_measures})
        movement.append(TrialScores(t.id, t.arena_id, t.subject_id, duration, values))
    units: dict[str, str] = {}
    versions: set[str] = set()
    scan_scores: dict[int, dict[str, float]] = {}
    members = {"scan": {s.id for s in scans}, "trial": set(by_id)}
    for kind in ("scan", "trial"):
        for target, rows in stored[kind].items():
            if sid is not None and target not in members[kind]:
                continue
            if kind == "scan":
                scan_scores[target] = {s.measure: s.value for s in rows}
            for s in rows:
                units[s.measure] = s.unit
                versions.add(s.code_version)
    jobs = _all(lambda **kw: repo.list_jobs(session=session, **kw))
    counts: dict[str, int] = defaultdict(int)
    failed = []
    for j in jobs:
        if sid is not None and j.target_id not in members.get(j.target_kind, ()):
            continue  # another study's job
        counts[j.state] += 1
        if j.state == "failed":
            failed.append(f"{j.target_kind} {j.target_id}: {(j.error or '').strip()[:200]}")
    return StudyData(
        recipe_name=prof.name,
        recipe_version=prof.version,
        recipe_hash=prof.hash,
        parameters=current_parameters(prof.parameters),
        arenas=arenas,
        subjects=subjects,
        scans=scans,
        trials=trials,
        terrain=terrain,
        movement=movement,
        units=units,
        code_versions=sorted(versions),
        job_counts=dict(counts),
        failed_jobs=failed,
        scan_scores=scan_scores,
        study_name=study,
        policy_scan_ids={
            int(e["arena_id"]): [int(i) for i in e["scan_ids"]]
            for e in tables.scan_policy.get("arenas", [])
        },
    )
