"""Scoring flows: the stages of one job, written as generators the runner drives.

A flow does its database work itself (it runs in the runner thread, the single writer) and
``yield``s a :class:`Compute` for each heavy stage; the runner submits it to the executor and
sends the result back in. Progress is written as each stage finishes.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Generator, Iterable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from service.pipeline import tasks
from storage import repo

__all__ = [
    "FLOWS",
    "Compute",
    "Flow",
    "JobContext",
    "NotedScore",
    "record_missing",
    "scan_flow",
    "trial_flow",
    "with_notes",
]


@dataclass(frozen=True)
class NotedScore:
    """A score as stored: the measure's fields plus its note."""

    name: str
    value: float
    unit: str
    ci_low: float | None = None
    ci_high: float | None = None
    surrogate_z: float | None = None
    note: str = ""


def _head(note: str) -> str:
    # "hurst psd: no band found" concerns the score hurst_psd.
    return note.split(":", 1)[0].strip().lower().replace(" ", "_")


def _missing(value: Any) -> bool:
    try:
        return not math.isfinite(float(value))
    except (TypeError, ValueError):
        return True


def with_notes(
    scores: Iterable[Any], notes: Iterable[str] = (), *, context: Iterable[str] = ()
) -> tuple[NotedScore, ...]:
    """Attach each summary note to the score it names; give every missing value a reason.

    A score keeps its own ``note`` (read with ``getattr``: score types without one work)
    and gains the summary notes whose head (before the first colon) names it. A missing
    value (NaN) with no note then takes the summary's remaining notes and ``context`` (facts
    of the run such as too few strides), or a plain statement that the data did not support
    the measure: no NaN is stored without a reason.
    """
    notes = [str(n) for n in notes if str(n).strip()]
    context = [str(c) for c in context if str(c).strip()]
    items = list(scores)
    names = {s.name for s in items}
    named = {n for n in notes if _head(n) in names}
    general = [n for n in notes if n not in named] + context
    out = []
    for s in items:
        parts = [str(getattr(s, "note", "") or "")]
        parts += [n for n in notes if _head(n) == s.name]
        note = "; ".join(p for p in parts if p)
        if _missing(s.value) and not note:
            note = "no value: " + (
                "; ".join(general) if general
                else "the data did not support this measure (the summary gave no reason)"
            )  # fmt: skip
        out.append(
            NotedScore(
                s.name,
                s.value,
                getattr(s, "unit", "") or "",
                getattr(s, "ci_low", None),
                getattr(s, "ci_high", None),
                getattr(s, "surrogate_z", None),
                note,
            )
        )
    return tuple(out)


@dataclass(frozen=True)
class Compute:
    """One call to run on a worker: ``fn(*args, **kwargs)``."""

    fn: Callable[..., Any]
    args: tuple[Any, ...] = ()
    kwargs: dict[str, Any] = field(default_factory=dict)


@dataclass
class JobContext:
    """What a flow knows about its job; ``progress`` writes the job row (and tells listeners)."""

    job_id: int
    target_kind: str
    target_id: int
    recipe_hash: str
    parameters: dict[str, Any]
    sessionmaker: Any
    store: Any
    listener: Callable[[int, float, str], None] | None = None
    max_grid_cells: int | None = tasks.DEFAULT_MAX_GRID_CELLS
    input_sha256: str = ""  # set by the flow once it has read its target

    def session(self) -> Any:
        return self.sessionmaker()

    def progress(self, value: float, message: str) -> None:
        with self.session() as session:
            repo.update_job(session=session, job_id=self.job_id, progress=value, message=message)
        if self.listener is not None:
            self.listener(self.job_id, value, message)

    def save(
        self,
        scores: tuple[Any, ...],
        *,
        code_version: str,
        input_sha256: str,
        notes: Iterable[str] = (),
        context: Iterable[str] = (),
    ) -> None:
        # Upsert on (target, recipe hash, measure): a re-run never writes a score twice.
        scores = with_notes(scores, notes, context=context)
        with self.session() as session:
            repo.save_scores(
                session=session,
                target_kind=self.target_kind,
                target_id=self.target_id,
                recipe_hash=self.recipe_hash,
                scores=scores,
                code_version=code_version,
                input_sha256=input_sha256,
            )

    def save_arrays(self, kind: str, arrays: dict[str, Any], notes: Iterable[str] = ()) -> None:
        """Store arrays for later views (``storage.repo.save_derived``); notes ride along."""
        if not arrays:
            return
        arrays = dict(arrays)
        text = [str(n) for n in notes]
        if text:
            arrays["notes"] = np.asarray(text, dtype=str)  # unicode, not object: no pickle
        with self.session() as session:
            repo.save_derived(
                session=session, store=self.store, target_kind=self.target_kind,
                target_id=self.target_id, recipe_hash=self.recipe_hash, kind=kind,
                arrays=arrays,
            )  # fmt: skip


def record_missing(ctx: JobContext, exc: BaseException) -> int:
    """Store why a failed job's scores are missing; returns how many rows were written.

    The measures are those already stored for this kind of target (under this recipe if
    any, else under any), or one row ``summary`` when none is known; a measure that already
    has a row for this target and recipe keeps it. Nothing is written before the flow knew
    its input (``ctx.input_sha256``).
    """
    from sqlalchemy import select

    from storage.models import Score

    if not ctx.input_sha256:
        return 0
    reason = f"no value: the scoring job failed: {type(exc).__name__}: {exc}"[:2000]
    with ctx.session() as session:

        def measures_under(recipe_hash: str | None) -> list[str]:
            stmt = select(Score.measure).where(Score.target_kind == ctx.target_kind).distinct()
            if recipe_hash is not None:
                stmt = stmt.where(Score.recipe_hash == recipe_hash)
            return sorted(session.scalars(stmt))

        names = measures_under(ctx.recipe_hash) or measures_under(None) or ["summary"]
        have = set(
            session.scalars(
                select(Score.measure).where(
                    Score.target_kind == ctx.target_kind, Score.target_id == ctx.target_id,
                    Score.recipe_hash == ctx.recipe_hash,
                )
            )
        )  # fmt: skip
        rows = [NotedScore(n, float("nan"), "", note=reason) for n in names if n not in have]
        if rows:
            repo.save_scores(
                session=session, target_kind=ctx.target_kind, target_id=ctx.target_id,
                recipe_hash=ctx.recipe_hash, scores=rows, code_version=tasks.code_version(),
                input_sha256=ctx.input_sha256,
            )  # fmt: skip
    return len(rows)


Flow = Callable[[JobContext], Generator[Compute, Any, None]]


def _upload_meta(row: Any) -> dict[str, Any]:
    return dict((row.meta or {}).get("upload") or {})


def scan_flow(ctx: JobContext) -> Generator[Compute, Any, None]:
    """Read + heightmap -> store heightmap -> terrain summary -> scores, notes, plot arrays."""
    with ctx.session() as session:
        scan = repo.get_scan(session=session, scan_id=ctx.target_id)
        band = repo.get_arena(session=session, arena_id=scan.arena_id).scale_band_m
        meta = _upload_meta(scan)
        path = str(ctx.store.path(scan.sha256))
    ctx.input_sha256 = scan.sha256
    read_meta = {k: meta.get(k) for k in ("units", "dx", "dy")}
    if meta.get("ground_only") is not None:  # LAS/LAZ: keep every point when the upload said so
        read_meta["ground_only"] = bool(meta["ground_only"])
    ctx.progress(0.05, "reading the scan and building its heightmap")
    hm = yield Compute(
        tasks.heightmap_task,
        (path,),
        {
            "sha256": scan.sha256,
            "fmt": scan.format,
            "filename": scan.filename,
            "read_meta": read_meta,
            "params": ctx.parameters["heightmap"],
            "max_cells": ctx.max_grid_cells,
        },
    )
    with ctx.session() as session:
        repo.attach_heightmap(
            session=session, store=ctx.store, scan_id=scan.id, z=hm.z, valid=hm.valid,
            dx_m=hm.dx_m, dy_m=hm.dy_m,
        )  # fmt: skip
    ctx.progress(0.4, "heightmap stored; scoring the terrain")
    terrain = yield Compute(
        tasks.terrain_task,
        (hm.z, hm.valid),
        {"dx_m": hm.dx_m, "dy_m": hm.dy_m, "band_m": band, "params": ctx.parameters["terrain"]},
    )
    ctx.progress(0.9, "terrain scored; writing scores and plot arrays")
    ctx.save_arrays("terrain_plots", terrain.plots, terrain.notes)
    ctx.save(
        hm.scores + terrain.scores, code_version=terrain.code_version, input_sha256=scan.sha256,
        notes=terrain.notes,
    )  # fmt: skip


def _trial_context(scores: Iterable[Any]) -> list[str]:
    """Facts of a scored trial that explain missing values (few strides, few valid frames)."""
    by = {s.name: s.value for s in scores}
    out = []
    strides = by.get("n_strides")
    if strides is not None and not _missing(strides) and strides < 2:
        out.append(f"{int(strides)} stride(s) detected; stride measures need at least 2")
    valid = by.get("valid_fraction")
    if valid is not None and not _missing(valid) and valid < 0.5:
        out.append(f"only {valid:.0%} of frames were valid after preprocessing")
    return out


def trial_flow(ctx: JobContext) -> Generator[Compute, Any, None]:
    """Read + preprocess + movement summary -> store preprocessed markers, plot arrays and
    per-window measures -> scores with notes."""
    with ctx.session() as session:
        trial = repo.get_trial(session=session, trial_id=ctx.target_id)
        subject = repo.get_subject(session=session, subject_id=trial.subject_id)
        marker_set = subject.marker_set
        roles = {} if marker_set is None else dict(marker_set.roles or {})
        meta = _upload_meta(trial)
        path = str(ctx.store.path(trial.sha256))
    ctx.input_sha256 = trial.sha256
    if not roles:
        from storage.errors import BadInput

        raise BadInput(f"subject {subject.id} has no marker roles; cannot score trial {trial.id}")
    roles = {k: roles[k] for k in ("anterior", "posterior", "feet") if k in roles}
    params = dict(ctx.parameters["movement"])
    if params.get("treadmill_speed_m_s") is None and trial.treadmill_speed_m_s is not None:
        # The belt speed is a fact of the recording, not a recipe choice.
        params["treadmill_speed_m_s"] = trial.treadmill_speed_m_s
    if params.get("up_axis") is None and meta.get("up_axis"):
        # Likewise the rig's up axis, declared at upload; the summary checks it against the data.
        params["up_axis"] = meta["up_axis"]
    read_meta = {k: meta.get(k) for k in ("units", "frame_rate_hz", "marker_names")}
    ctx.progress(0.05, "reading, preprocessing and scoring the trial")
    res = yield Compute(
        tasks.movement_task,
        (path,),
        {
            "sha256": trial.sha256,
            "fmt": trial.format,
            "filename": trial.filename,
            "read_meta": read_meta,
            "roles": roles,
            "params": params,
        },
    )
    ctx.progress(0.7, "movement scored; storing the preprocessed markers and plot arrays")
    with ctx.session() as session:
        repo.attach_artifact(
            session=session, store=ctx.store, target_kind="trial", target_id=trial.id,
            role="preprocessed", array=res.preprocessed,
        )  # fmt: skip
    ctx.save_arrays("movement_plots", res.plots, res.notes)
    ctx.save_arrays("movement_windows", res.windows, [n for n in res.notes if "per-window" in n])
    ctx.progress(0.9, "writing scores")
    ctx.save(
        res.scores, code_version=res.code_version, input_sha256=trial.sha256, notes=res.notes,
        context=_trial_context(res.scores),
    )  # fmt: skip


FLOWS: dict[str, Flow] = {"scan": scan_flow, "trial": trial_flow}
